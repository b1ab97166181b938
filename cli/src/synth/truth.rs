//! The ground truth written beside a capture as `FILE.truth.json`.
//!
//! Made for tests and for people: every episode says where (keyed by the
//! dimension short names of `flowsift drops --by`, e.g. `out-if`,
//! `in-vrf`, `peer-as`, `segments`), why (the `forwardingReason` value of
//! the Parquet contract, e.g. `policer`), when (RFC 3339 and ms since the
//! epoch), the class a before/after comparison of the maintenance window
//! should give it, and how much it dropped: flow records, sampled packets
//! and octets as exported, and the estimate scaled by the 1-in-N rate.

use serde::Serialize;

use super::network::{self, behavior, vrf, Exporter, TimeStyle, CARRIER, CARRIER_AS, EXPORTERS, PEERS, POLICIES, QUINCE_METRO_POLICY};
use super::scenario::{status, Episode, EpisodeKind, Generator, Tally};
use super::{Loss, SynthConfig};

/// Format version of this document.
pub(crate) const TRUTH_VERSION: u32 = 1;

/// What the exporting processes counted.
#[derive(Debug, Clone, Copy)]
pub(crate) struct DomainCounts {
    pub id: u32,
    pub flow_records: u64,
    pub options_records: u64,
    pub init_ms: u64,
}

/// Totals of the capture.
#[derive(Debug, Clone, Copy)]
pub(crate) struct Totals {
    pub flow_records: u64,
    pub options_records: u64,
    pub messages: u64,
    pub bytes: u64,
}

/// The whole document.
#[derive(Debug, Clone, Serialize)]
#[serde(rename_all = "camelCase")]
pub(crate) struct Truth {
    pub truth_version: u32,
    pub scenario: &'static str,
    pub description: &'static str,
    pub seed: u64,
    pub format: &'static str,
    pub generator: String,
    pub time_range: Span,
    pub maintenance_window: Window,
    /// 1-in-N packet sampling of each exporter (details under `network`).
    pub sampling_rates: Vec<SamplingRate>,
    /// What each expected class means.
    pub classes: Classes,
    pub records: Records,
    pub network: Network,
    pub episodes: Vec<EpisodeTruth>,
    pub background: Background,
    pub export_loss: Vec<LossTruth>,
}

/// A time span, both as text and as ms since the UNIX epoch; `end` exclusive.
#[derive(Debug, Clone, Serialize)]
#[serde(rename_all = "camelCase")]
pub(crate) struct Span {
    pub start: String,
    pub end: String,
    pub start_ms: u64,
    pub end_ms: u64,
}

impl Span {
    fn new(start_ms: u64, end_ms: u64) -> Self {
        Self { start: rfc3339(start_ms), end: rfc3339(end_ms), start_ms, end_ms }
    }
}

/// The maintenance window.
#[derive(Debug, Clone, Serialize)]
#[serde(rename_all = "camelCase")]
pub(crate) struct Window {
    #[serde(flatten)]
    pub span: Span,
    pub work: Vec<&'static str>,
}

/// One exporter's sampling rate.
#[derive(Debug, Clone, Serialize)]
#[serde(rename_all = "camelCase")]
pub(crate) struct SamplingRate {
    pub exporter: &'static str,
    pub address: String,
    pub observation_domain_ids: Vec<u32>,
    pub rate: u32,
}

/// Meaning of the classes.
#[derive(Debug, Clone, Serialize)]
pub(crate) struct Classes {
    pub transient: &'static str,
    pub persistent: &'static str,
    pub new: &'static str,
    pub background: &'static str,
}

/// Record and message totals.
#[derive(Debug, Clone, Serialize)]
#[serde(rename_all = "camelCase")]
pub(crate) struct Records {
    /// Flow (non-options) Data Records in the capture.
    pub flow: u64,
    /// Options Data Records in the capture.
    pub options: u64,
    pub messages: u64,
    pub capture_bytes: u64,
    /// Flow records per Observation Domain ID.
    pub flow_by_domain: Vec<DomainRecords>,
}

/// Flow records of one domain.
#[derive(Debug, Clone, Serialize)]
#[serde(rename_all = "camelCase")]
pub(crate) struct DomainRecords {
    pub observation_domain_id: u32,
    pub flow: u64,
    pub options: u64,
}

/// The network, for readers of the story.
#[derive(Debug, Clone, Serialize)]
#[serde(rename_all = "camelCase")]
pub(crate) struct Network {
    pub carrier: &'static str,
    pub carrier_as: u32,
    pub collector: Vec<String>,
    pub exporters: Vec<ExporterTruth>,
    pub other_nodes: Vec<String>,
    pub vrfs: Vec<Named>,
    pub peers: Vec<PeerTruth>,
    pub srv6_policies: Vec<PolicyTruth>,
    pub enterprise_elements: Vec<String>,
}

/// An id and its name.
#[derive(Debug, Clone, Serialize)]
pub(crate) struct Named {
    pub id: u32,
    pub name: &'static str,
}

/// One exporter.
#[derive(Debug, Clone, Serialize)]
#[serde(rename_all = "camelCase")]
pub(crate) struct ExporterTruth {
    pub name: &'static str,
    pub role: &'static str,
    /// Loopback 192.0.2.n, SR-MPLS prefix SID 16000+n, SRv6 locator 2001:db8:c0:n::/64.
    pub node: u32,
    /// The `exporter` column in Parquet from pcap/pcapng (null for .ipfix).
    pub address: String,
    pub transport: &'static str,
    pub source_port: u16,
    pub sampling_rate: u32,
    pub selector_id: u32,
    pub time_elements: &'static str,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub system_init_time: Option<String>,
    pub domains: Vec<DomainTruth>,
    pub interfaces: Vec<Named>,
}

/// One Observation Domain.
#[derive(Debug, Clone, Serialize)]
#[serde(rename_all = "camelCase")]
pub(crate) struct DomainTruth {
    pub id: u32,
    pub description: &'static str,
    pub templates: Vec<u16>,
}

/// One BGP peer.
#[derive(Debug, Clone, Serialize)]
#[serde(rename_all = "camelCase")]
pub(crate) struct PeerTruth {
    #[serde(rename = "as")]
    pub asn: u32,
    pub name: &'static str,
    pub next_hop: String,
    pub next_hop_v6: String,
    pub interface: u32,
}

/// One SR policy.
#[derive(Debug, Clone, Serialize)]
#[serde(rename_all = "camelCase")]
pub(crate) struct PolicyTruth {
    pub name: &'static str,
    /// Segments in travel order.
    pub path: Vec<String>,
    pub active_segment: String,
    pub behavior: &'static str,
}

/// Where an episode drops, keyed by `flowsift drops --by` short names.
#[derive(Debug, Clone, Default, Serialize)]
pub(crate) struct Where {
    /// Observation Domain ID (`domain`).
    pub domain: u32,
    #[serde(rename = "out-if", skip_serializing_if = "Option::is_none")]
    pub out_if: Option<IdName>,
    #[serde(rename = "in-if", skip_serializing_if = "Option::is_none")]
    pub in_if: Option<IdName>,
    #[serde(rename = "in-vrf", skip_serializing_if = "Option::is_none")]
    pub in_vrf: Option<IdName>,
    #[serde(rename = "next-hop", skip_serializing_if = "Option::is_none")]
    pub next_hop: Option<String>,
    #[serde(rename = "bgp-next-hop", skip_serializing_if = "Option::is_none")]
    pub bgp_next_hop: Option<String>,
    #[serde(rename = "peer-as", skip_serializing_if = "Option::is_none")]
    pub peer_as: Option<u32>,
    /// Segment list as stored (element 0 = last segment, IANA IE 496).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub segments: Option<Vec<String>>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub segment: Option<String>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub behavior: Option<&'static str>,
}

/// An interface or VRF: id and name.
#[derive(Debug, Clone, Serialize)]
pub(crate) struct IdName {
    pub id: u32,
    pub name: &'static str,
}

/// Extra conditions that narrow an episode's traffic (column = value).
#[derive(Debug, Clone, Serialize)]
#[serde(rename_all = "camelCase")]
pub(crate) struct Matching {
    #[serde(skip_serializing_if = "Option::is_none")]
    pub protocol_identifier: Option<u8>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub destination_transport_port: Option<u16>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub ip_version: Option<u8>,
}

/// One episode.
#[derive(Debug, Clone, Serialize)]
#[serde(rename_all = "camelCase")]
pub(crate) struct EpisodeTruth {
    pub name: &'static str,
    pub summary: &'static str,
    pub story: &'static str,
    pub exporter: &'static str,
    pub exporter_address: String,
    pub observation_domain_id: u32,
    #[serde(rename = "where")]
    pub place: Where,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub matching: Option<Matching>,
    /// forwardingReason as in the Parquet contract.
    pub why: &'static str,
    pub forwarding_status: u8,
    #[serde(flatten)]
    pub span: Span,
    /// Still dropping when the capture ends.
    pub ongoing_at_end: bool,
    pub first_drop: Option<String>,
    pub last_drop: Option<String>,
    pub first_drop_ms: Option<u64>,
    pub last_drop_ms: Option<u64>,
    pub expected_class: &'static str,
    /// For transient episodes: seconds from first drop to convergence.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub convergence_seconds: Option<f64>,
    pub sampling_rate: u32,
    pub dropped_records: u64,
    pub dropped_packets_sampled: u64,
    pub dropped_octets_sampled: u64,
    pub dropped_packets_estimated: u64,
    pub dropped_octets_estimated: u64,
    /// Records matching `where` while the episode was active that were
    /// forwarded (the policer lets some through).
    pub passed_records: u64,
    pub passed_packets_sampled: u64,
    /// A `flowsift drops` invocation that shows the episode (run on the
    /// Parquet converted from the capture).
    pub drops_query: String,
}

/// Background drops and traffic.
#[derive(Debug, Clone, Serialize)]
#[serde(rename_all = "camelCase")]
pub(crate) struct Background {
    pub forwarded: Counts,
    pub drops: Vec<BackgroundDrops>,
    pub note: &'static str,
}

/// Sampled counts.
#[derive(Debug, Clone, Serialize)]
#[serde(rename_all = "camelCase")]
pub(crate) struct Counts {
    pub records: u64,
    pub packets_sampled: u64,
    pub octets_sampled: u64,
    /// Scaled by each record's sampling rate (1000 or 500 by exporter).
    pub packets_estimated: u64,
    pub octets_estimated: u64,
}

impl From<Tally> for Counts {
    fn from(t: Tally) -> Self {
        Self {
            records: t.records,
            packets_sampled: t.packets,
            octets_sampled: t.octets,
            packets_estimated: t.packets_estimated,
            octets_estimated: t.octets_estimated,
        }
    }
}

/// Background drops of one reason.
#[derive(Debug, Clone, Serialize)]
#[serde(rename_all = "camelCase")]
pub(crate) struct BackgroundDrops {
    pub why: &'static str,
    pub forwarding_status: u8,
    pub class: &'static str,
    #[serde(flatten)]
    pub counts: Counts,
    /// Share of all flow records.
    pub record_share: f64,
}

/// The planted export loss.
#[derive(Debug, Clone, Serialize)]
#[serde(rename_all = "camelCase")]
pub(crate) struct LossTruth {
    pub exporter: &'static str,
    pub exporter_address: String,
    pub observation_domain_id: u32,
    pub at: String,
    pub at_ms: u64,
    pub lost_records: u64,
    pub lost_messages: u64,
    /// Sequence Number of the (first) lost message; the next message that
    /// arrives carries this plus `lostRecords` (RFC 7011 §3.1).
    pub sequence_number: u32,
}

/// RFC 3339 UTC with milliseconds.
pub(crate) fn rfc3339(ms: u64) -> String {
    i64::try_from(ms)
        .ok()
        .and_then(flow_analytics::DateTime::<flow_analytics::Utc>::from_timestamp_millis)
        .map(|t| t.format("%Y-%m-%dT%H:%M:%S%.3fZ").to_string())
        .unwrap_or_default()
}

/// Seconds-precision RFC 3339 for command lines.
fn rfc3339_seconds(ms: u64) -> String {
    i64::try_from(ms / 1000 * 1000)
        .ok()
        .and_then(flow_analytics::DateTime::<flow_analytics::Utc>::from_timestamp_millis)
        .map(|t| t.format("%Y-%m-%dT%H:%M:%SZ").to_string())
        .unwrap_or_default()
}

fn reason(code: u8) -> &'static str {
    ipfix_core::ie::ForwardingStatus(u32::from(code)).reason_name().unwrap_or("unknown")
}

fn behavior_name(code: u16) -> &'static str {
    ipfix_core::ie::srv6_endpoint_behavior_name(code).unwrap_or("unknown")
}

fn if_name(exporter: &Exporter, index: u32) -> IdName {
    IdName { id: index, name: exporter.interface(index).map_or("", |i| i.name) }
}

fn vrf_name(id: u32) -> IdName {
    IdName { id, name: vrf(id).name }
}

/// Builds the document after a run.
pub(crate) fn build(config: &SynthConfig, generator: &Generator, domains: &[DomainCounts], loss: Option<&Loss>, totals: Totals) -> Truth {
    let timeline = generator.timeline;
    let parquet = config.output.file_name().map_or_else(|| "capture".to_string(), |n| n.to_string_lossy().into_owned());
    let parquet = format!("{}.parquet", parquet.rsplit_once('.').map_or(parquet.as_str(), |(stem, _)| stem));
    let episodes = generator.episodes.iter().map(|e| episode(e, &timeline, &parquet)).collect();
    let total = totals.flow_records.max(1) as f64;
    let share = |t: &Tally| (t.records as f64 / total * 1e6).round() / 1e6;
    let truth = &generator.truth;
    Truth {
        truth_version: TRUTH_VERSION,
        scenario: config.scenario.name,
        description: config.scenario.details,
        seed: config.seed,
        format: config.format.name(),
        generator: format!("flowsift {} synth", env!("CARGO_PKG_VERSION")),
        time_range: Span::new(timeline.start_ms, timeline.end_ms),
        maintenance_window: Window {
            span: Span::new(timeline.window.0, timeline.window.1),
            work: vec![
                "drain of core link kestrel-p2 0/2 <-> dunlin-p3 (restored at the end of the window)",
                "line card 2 of osprey-pe1 swapped",
                "software upgrade of plover-m5",
            ],
        },
        sampling_rates: EXPORTERS
            .iter()
            .map(|e| SamplingRate {
                exporter: e.name,
                address: e.address.to_string(),
                observation_domain_ids: e.domains.iter().map(|d| d.id).collect(),
                rate: e.sampling,
            })
            .collect(),
        classes: Classes {
            transient: "starts inside the maintenance window and stops before it ends (converged)",
            persistent: "starts inside the maintenance window and is still dropping after it",
            new: "starts after the maintenance window, unrelated to the planned work",
            background: "present before, during and after the window at a low level",
        },
        records: Records {
            flow: totals.flow_records,
            options: totals.options_records,
            messages: totals.messages,
            capture_bytes: totals.bytes,
            flow_by_domain: domains.iter().map(|d| DomainRecords { observation_domain_id: d.id, flow: d.flow_records, options: d.options_records }).collect(),
        },
        network: network_truth(domains),
        episodes,
        background: Background {
            forwarded: truth.forwarded.into(),
            drops: vec![
                BackgroundDrops { why: reason(status::WRED), forwarding_status: status::WRED, class: "background", counts: truth.wred.into(), record_share: share(&truth.wred) },
                BackgroundDrops { why: reason(status::BAD_TTL), forwarding_status: status::BAD_TTL, class: "background", counts: truth.bad_ttl.into(), record_share: share(&truth.bad_ttl) },
            ],
            note: "WRED drops on every exporter (0.2% of flow records with an egress interface, 0.6% on kestrel-p2 0/3 toward the peering edge); bad-TTL drops on every exporter (0.06%)",
        },
        export_loss: loss
            .and_then(|l| {
                let slot = generator.slots.get(l.slot)?;
                Some(LossTruth {
                    exporter: slot.exporter.name,
                    exporter_address: slot.exporter.address.to_string(),
                    observation_domain_id: slot.spec.id,
                    at: rfc3339(l.at_ms),
                    at_ms: l.at_ms,
                    lost_records: l.records,
                    lost_messages: l.messages,
                    sequence_number: l.sequence_number,
                })
            })
            .into_iter()
            .collect(),
    }
}

fn network_truth(domains: &[DomainCounts]) -> Network {
    Network {
        carrier: CARRIER,
        carrier_as: CARRIER_AS,
        collector: vec![
            format!("{}:{}", network::COLLECTOR_V4, network::COLLECTOR_PORT),
            format!("[{}]:{}", network::COLLECTOR_V6, network::COLLECTOR_PORT),
        ],
        exporters: EXPORTERS
            .iter()
            .map(|e| ExporterTruth {
                name: e.name,
                role: e.role,
                node: e.node,
                address: e.address.to_string(),
                transport: "udp",
                source_port: e.port,
                sampling_rate: e.sampling,
                selector_id: e.selector,
                time_elements: match e.times {
                    TimeStyle::Milliseconds => "flowStartMilliseconds/flowEndMilliseconds",
                    TimeStyle::SysUpTime => "flowStartSysUpTime/flowEndSysUpTime with systemInitTimeMilliseconds in options",
                },
                system_init_time: (e.times == TimeStyle::SysUpTime)
                    .then(|| domains.iter().find(|d| e.domains.iter().any(|s| s.id == d.id)).map(|d| rfc3339(d.init_ms)))
                    .flatten(),
                domains: e
                    .domains
                    .iter()
                    .map(|d| DomainTruth {
                        id: d.id,
                        description: d.description,
                        templates: super::scenario::slots()
                            .iter()
                            .find(|s| s.spec.id == d.id)
                            .map(|s| s.templates().to_vec())
                            .unwrap_or_default(),
                    })
                    .collect(),
                interfaces: e.interfaces.iter().map(|i| Named { id: i.index, name: i.name }).collect(),
            })
            .collect(),
        other_nodes: network::OTHER_NODES.iter().map(|(n, name, role)| format!("{name} (node {n}, 192.0.2.{n}): {role}")).collect(),
        vrfs: network::VRFS.iter().map(|v| Named { id: v.id, name: v.name }).collect(),
        peers: PEERS
            .iter()
            .map(|p| PeerTruth { asn: p.asn, name: p.name, next_hop: p.address.to_string(), next_hop_v6: p.address6.to_string(), interface: p.interface })
            .collect(),
        srv6_policies: POLICIES
            .iter()
            .map(|p| PolicyTruth {
                name: p.name,
                path: p.path.iter().map(ToString::to_string).collect(),
                active_segment: p.path.get(p.active).map(ToString::to_string).unwrap_or_default(),
                behavior: behavior_name(p.behavior),
            })
            .collect(),
        enterprise_elements: vec![format!(
            "PEN {} element {} (tenantTag, 4 octets): customer account of the VRF; column pen{}_ie{}",
            network::PEN,
            network::TENANT_TAG_ID,
            network::PEN,
            network::TENANT_TAG_ID
        )],
    }
}

fn episode(e: &Episode, timeline: &super::scenario::Timeline, parquet: &str) -> EpisodeTruth {
    let exporter = EXPORTERS.get(e.exporter).copied().unwrap_or(EXPORTERS[0]);
    let t = &e.tally;
    let mut place = Where { domain: e.domain, ..Where::default() };
    let mut matching = None;
    let (name, summary, story, code, class, by) = match e.kind {
        EpisodeKind::CoreDrain => {
            place.out_if = Some(if_name(&exporter, network::KESTREL_TO_DUNLIN_A));
            place.next_hop = exporter.interface(network::KESTREL_TO_DUNLIN_A).map(|i| i.next_hop.to_string());
            (
                "core-drain-adjacency",
                "core link drain: stale adjacency until the FIB converges",
                "Five minutes into the window the engineers drain kestrel-p2's first link to dunlin-p3 \
                 (0/2). For about a hundred seconds, prefixes behind dunlin-p3 and curlew-pe8 still point \
                 at the vanished adjacency and kestrel-p2 drops what it sends there; the share falls to \
                 zero as the FIB converges onto the parallel link 0/5. The link comes back when the window \
                 closes.",
                status::ADJACENCY,
                "transient",
                "out-if,next-hop,reason",
            )
        }
        EpisodeKind::Policer => {
            place.out_if = Some(if_name(&exporter, network::OSPREY_QUINCE_B));
            place.in_vrf = Some(vrf_name(102));
            place.next_hop = exporter.interface(network::OSPREY_QUINCE_B).map(|i| i.next_hop.to_string());
            (
                "policer-misbound",
                "policer bound to the wrong port after a line-card swap",
                "Line card 2 of osprey-pe1 is swapped in the window. The restored configuration binds a \
                 low-rate policer meant for the management port to 2/4:cust-quince-b, so about 40% of the \
                 quince-clinics traffic leaving on that port is policed away, from the moment the card \
                 comes back to the end of the capture. Nothing else on the card is affected.",
                status::POLICER,
                "persistent",
                "out-if,in-vrf,reason",
            )
        }
        EpisodeKind::Srv6Behavior => {
            let policy = POLICIES.get(QUINCE_METRO_POLICY);
            place.segments = policy.map(|p| p.path.iter().rev().map(ToString::to_string).collect());
            place.segment = policy.and_then(|p| p.path.get(p.active)).map(ToString::to_string);
            place.behavior = Some(behavior_name(behavior::END_DT46));
            place.in_vrf = Some(vrf_name(102));
            (
                "srv6-missing-behavior",
                "SRv6 End.DT46 SID missing after an upgrade: dropped as unroutable",
                "plover-m5 is upgraded in the window and comes back without the End.DT46 SID \
                 2001:db8:c0:5::d46 that decapsulates quince-clinics traffic into its VRF. Every packet \
                 of the SR policy quince-metro (sandpiper-m6 End, then plover-m5 End.DT46) now arrives \
                 with that SID active and no local behaviour to run, and is dropped as unroutable. The \
                 records keep the behaviour the policy expects of the active segment.",
                status::UNROUTABLE,
                "persistent",
                "segments,behavior,reason",
            )
        }
        EpisodeKind::PeeringAcl => {
            let peer = PEERS.iter().find(|p| p.asn == 64620);
            place.peer_as = Some(64620);
            place.out_if = peer.map(|p| if_name(&exporter, p.interface));
            place.bgp_next_hop = peer.map(|p| p.address.to_string());
            matching = Some(Matching { protocol_identifier: Some(17), destination_transport_port: Some(443), ip_version: Some(4) });
            (
                "peering-acl-deny",
                "outbound ACL change on the peering edge denies UDP/443 toward AS 64620",
                "Twelve minutes after the window closes, an unrelated change adds a line to egret-be4's \
                 outbound IPv4 filter on the exchange LAN. It denies UDP to port 443, so all QUIC toward \
                 exchange peer AS 64620 is dropped from then on; TCP and IPv6 to the same peer still pass.",
                status::ACL_DENY,
                "new",
                "peer-as,out-if,reason",
            )
        }
    };
    let rate = exporter.sampling;
    let ongoing = e.end_ms >= timeline.end_ms;
    let convergence = (class == "transient").then(|| (e.end_ms - e.start_ms) as f64 / 1000.0);
    let drops_query = format!(
        "flowsift drops {parquet} --by {by} --from {} --to {}",
        rfc3339_seconds(e.start_ms),
        rfc3339_seconds(if ongoing { timeline.end_ms } else { e.end_ms + 999 }),
    );
    EpisodeTruth {
        name,
        summary,
        story,
        exporter: exporter.name,
        exporter_address: exporter.address.to_string(),
        observation_domain_id: e.domain,
        place,
        matching,
        why: reason(code),
        forwarding_status: code,
        span: Span::new(e.start_ms, e.end_ms),
        ongoing_at_end: ongoing,
        first_drop: t.first_ms.map(rfc3339),
        last_drop: t.last_ms.map(rfc3339),
        first_drop_ms: t.first_ms,
        last_drop_ms: t.last_ms,
        expected_class: class,
        convergence_seconds: convergence,
        sampling_rate: rate,
        dropped_records: t.records,
        dropped_packets_sampled: t.packets,
        dropped_octets_sampled: t.octets,
        dropped_packets_estimated: t.packets.saturating_mul(u64::from(rate)),
        dropped_octets_estimated: t.octets.saturating_mul(u64::from(rate)),
        passed_records: t.passed_records,
        passed_packets_sampled: t.passed_packets,
        drops_query,
    }
}
