//! The scenarios: a timeline over the fictional network (maintenance
//! window, drop episodes, export loss) and the flow generator that plays
//! it, keeping the ground truth as it goes.
//!
//! Times are laid out on a one-hour canvas and scaled to the requested
//! duration, so `--duration 10m` plays the same story ten minutes long.
//! Record `i` of `n` gets its flow end time from a noisy but diurnal-free
//! traffic curve; everything else about it (exporter, addresses, sizes,
//! whether an episode drops it) comes from one seeded PRNG, so a seed and
//! the arguments fix every byte of the output.

use std::net::{IpAddr, Ipv4Addr, Ipv6Addr};

use super::network::{
    behavior, loopback, prefix_sid, vrf, DomainKind, DomainSpec, Exporter, Role, EXPORTERS,
    KESTREL_TO_DUNLIN_A, KESTREL_TO_DUNLIN_B, LABEL_TYPE_ISIS_SR, OSPREY_QUINCE_B, PEERS, POLICIES,
    QUINCE_METRO_POLICY,
};
use super::records::{Flow, T_MPLS, T_SRV6, T_V4, T_V6};

/// Length of the canvas the timeline is drawn on (one hour, in ms).
const CANVAS_MS: u64 = 3_600_000;

/// forwardingStatus codes (IANA "Forwarding Status (Value 89)", facts
/// sheet §5.2), one octet.
pub(crate) mod status {
    /// Forwarded, reason unknown.
    pub(crate) const FORWARDED: u8 = 0x40;
    /// Dropped: ACL deny.
    pub(crate) const ACL_DENY: u8 = 0x81;
    /// Dropped: unroutable.
    pub(crate) const UNROUTABLE: u8 = 0x83;
    /// Dropped: adjacency.
    pub(crate) const ADJACENCY: u8 = 0x84;
    /// Dropped: bad TTL.
    pub(crate) const BAD_TTL: u8 = 0x89;
    /// Dropped: policer.
    pub(crate) const POLICER: u8 = 0x8A;
    /// Dropped: WRED.
    pub(crate) const WRED: u8 = 0x8B;
}

/// A scenario `flowsift synth` can play.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(crate) struct Scenario {
    pub name: &'static str,
    pub summary: &'static str,
    pub details: &'static str,
    /// Whether the drop episodes happen.
    pub episodes: bool,
}

/// Every scenario, for `--list`.
pub(crate) const SCENARIOS: [Scenario; 2] = [
    Scenario {
        name: "regional-carrier",
        summary: "an hour at a fictional regional carrier: a maintenance window and four drop episodes",
        details: "Quillmere Networks (invented; AS 65010): a PE with customer VRFs, an SR-MPLS core router, a \
                  peering edge and an SRv6 metro node export IPFIX (three over IPv4, one over IPv6; six \
                  observation domains; 1-in-1000 and 1-in-500 sampling). Window 00:50-01:10 UTC. Episodes: a core \
                  link drain (adjacency drops, converges in under two minutes), a policer mis-bound after a \
                  line-card swap (one VRF on one port, persists), an SRv6 End.DT46 SID missing after an upgrade \
                  (unroutable, persists), and an ACL change toward peer AS 64620 after the window (acl-deny). \
                  Background: WRED congestion and a trickle of bad-TTL drops; one export message lost.",
        episodes: true,
    },
    Scenario {
        name: "regional-carrier-quiet",
        summary: "the same network and hour with an uneventful window: background drops only",
        details: "Same exporters, traffic mix, window and export loss as regional-carrier, but no episodes: the \
                  only drops are background WRED congestion and bad-TTL. For checking that nothing is reported \
                  where nothing happened.",
        episodes: false,
    },
];

/// The scenario named `name`.
pub(crate) fn scenario(name: &str) -> Option<Scenario> {
    SCENARIOS.iter().copied().find(|s| s.name == name)
}

/// Which episode.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(crate) enum EpisodeKind {
    /// Core link drained: stale adjacency on kestrel-p2 until the FIB converges.
    CoreDrain,
    /// Policer bound to the wrong port after the line-card swap on osprey-pe1.
    Policer,
    /// End.DT46 SID for quince-clinics missing on plover-m5 after its upgrade.
    Srv6Behavior,
    /// New outbound IPv4 ACL on egret-be4 denying UDP/443 toward AS 64620.
    PeeringAcl,
}

/// One episode as played: where, why, when, and what it did.
#[derive(Debug, Clone)]
pub(crate) struct Episode {
    pub kind: EpisodeKind,
    pub start_ms: u64,
    pub end_ms: u64,
    /// Index in [`EXPORTERS`] and the Observation Domain ID.
    pub exporter: usize,
    pub domain: u32,
    /// Share of all records forced into this episode's traffic while active.
    boost: f64,
    pub tally: EpisodeTally,
}

/// What an episode did, counted as records were generated.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq)]
pub(crate) struct EpisodeTally {
    /// Dropped flow records and their sampled packets and octets.
    pub records: u64,
    pub packets: u64,
    pub octets: u64,
    /// flowEnd of the first and last dropped record (ms).
    pub first_ms: Option<u64>,
    pub last_ms: Option<u64>,
    /// Records matching the episode's where while it was active that got through.
    pub passed_records: u64,
    pub passed_packets: u64,
}

impl EpisodeTally {
    fn drop(&mut self, flow: &Flow) {
        self.records += 1;
        self.packets += flow.packets;
        self.octets += flow.octets;
        self.first_ms = Some(self.first_ms.map_or(flow.end_ms, |t| t.min(flow.end_ms)));
        self.last_ms = Some(self.last_ms.map_or(flow.end_ms, |t| t.max(flow.end_ms)));
    }
}

/// Counts of one kind of record.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq)]
pub(crate) struct Tally {
    pub records: u64,
    /// Sampled packets and octets, as exported.
    pub packets: u64,
    pub octets: u64,
    /// The same scaled by each record's 1-in-N rate.
    pub packets_estimated: u64,
    pub octets_estimated: u64,
}

impl Tally {
    fn add(&mut self, flow: &Flow, rate: u32) {
        self.records += 1;
        self.packets += flow.packets;
        self.octets += flow.octets;
        self.packets_estimated += flow.packets.saturating_mul(u64::from(rate));
        self.octets_estimated += flow.octets.saturating_mul(u64::from(rate));
    }
}

/// The timeline in absolute milliseconds.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(crate) struct Timeline {
    pub start_ms: u64,
    pub end_ms: u64,
    pub window: (u64, u64),
    /// When the planted export loss happens.
    pub loss_ms: u64,
}

impl Timeline {
    /// The timeline of a capture starting at `start_ms` lasting `duration_ms`.
    pub(crate) fn new(start_ms: u64, duration_ms: u64) -> Self {
        let at = |canvas: u64| start_ms + scale(canvas, duration_ms);
        Self {
            start_ms,
            end_ms: start_ms + duration_ms,
            window: (at(20 * 60_000), at(40 * 60_000)),
            loss_ms: at(10 * 60_000 + 48_000),
        }
    }
}

/// `canvas_ms` on the one-hour canvas, scaled to `duration_ms`.
fn scale(canvas_ms: u64, duration_ms: u64) -> u64 {
    let scaled = u128::from(canvas_ms) * u128::from(duration_ms) / u128::from(CANVAS_MS);
    u64::try_from(scaled).unwrap_or(u64::MAX)
}

/// The episodes of the `regional-carrier` scenario on `timeline`.
fn episodes(timeline: &Timeline) -> Vec<Episode> {
    let duration = timeline.end_ms - timeline.start_ms;
    let at = |canvas: u64| timeline.start_ms + scale(canvas, duration);
    let episode = |kind, start_ms, end_ms, exporter, domain, boost| Episode {
        kind,
        start_ms,
        end_ms,
        exporter,
        domain,
        boost,
        tally: EpisodeTally::default(),
    };
    vec![
        // 00:55:00-00:56:40: drained at 5 min into the window, converged 100 s later.
        episode(EpisodeKind::CoreDrain, at(25 * 60_000), at(25 * 60_000 + 100_000), 1, 1201, 0.25),
        // 01:02:00 on: line card 2 back in after the swap, policer on the wrong port.
        episode(EpisodeKind::Policer, at(32 * 60_000), timeline.end_ms, 0, 1102, 0.02),
        // 01:05:00 on: plover-m5 upgraded, one SID lost its behaviour.
        episode(EpisodeKind::Srv6Behavior, at(35 * 60_000), timeline.end_ms, 3, 1501, 0.01),
        // 01:22:00 on: ACL change on the peering edge, 12 minutes after the window.
        episode(EpisodeKind::PeeringAcl, at(52 * 60_000), timeline.end_ms, 2, 1401, 0.035),
    ]
}

/// Maps record number to flow end time along a noisy traffic curve: the
/// capture is cut into at most 86,400 buckets whose weights follow a
/// slowly wandering random walk with rare short bursts (no daily cycle);
/// record `i` of `n` lands at the `(i + 0.5) / n` quantile. Memory is
/// bounded by the bucket count, whatever `n` is.
#[derive(Debug)]
struct Clock {
    start_ms: u64,
    bucket_ms: f64,
    cumulative: Vec<f64>,
    total: f64,
    n: u64,
    cursor: usize,
}

impl Clock {
    fn new(rng: &mut fastrand::Rng, start_ms: u64, duration_ms: u64, n: u64) -> Self {
        let buckets = (duration_ms / 1000).clamp(1, 86_400);
        let bucket_ms = duration_ms as f64 / buckets as f64;
        let mut cumulative = Vec::with_capacity(usize::try_from(buckets).unwrap_or(0) + 1);
        cumulative.push(0.0);
        let (mut level, mut total) = (0.0f64, 0.0f64);
        for _ in 0..buckets {
            level = 0.985 * level + 0.05 * normal(rng);
            let burst = if rng.f64() < 0.002 { 2.5 } else { 1.0 };
            total += level.exp() * burst;
            cumulative.push(total);
        }
        Self { start_ms, bucket_ms, cumulative, total, n: n.max(1), cursor: 0 }
    }

    /// The flow end time (ms) of record `i`; never decreases with `i`.
    fn time_of(&mut self, i: u64) -> u64 {
        let target = (i as f64 + 0.5) / self.n as f64 * self.total;
        while self.cumulative.get(self.cursor + 1).is_some_and(|c| *c < target) && self.cursor + 2 < self.cumulative.len() {
            self.cursor += 1;
        }
        let lo = self.cumulative.get(self.cursor).copied().unwrap_or(0.0);
        let hi = self.cumulative.get(self.cursor + 1).copied().unwrap_or(self.total);
        let fraction = if hi > lo { ((target - lo) / (hi - lo)).clamp(0.0, 1.0) } else { 0.0 };
        self.start_ms + ((self.cursor as f64 + fraction) * self.bucket_ms) as u64
    }
}

/// A standard normal deviate (Box-Muller).
fn normal(rng: &mut fastrand::Rng) -> f64 {
    let u = rng.f64().max(f64::MIN_POSITIVE);
    let v = rng.f64();
    (-2.0 * u.ln()).sqrt() * (std::f64::consts::TAU * v).cos()
}

/// Picks an item by weight (items of weight 0 never); `None` when no
/// item has a positive weight.
fn pick_weighted<'a, T>(rng: &mut fastrand::Rng, items: &'a [T], weight: impl Fn(&T) -> f64) -> Option<&'a T> {
    let total: f64 = items.iter().map(&weight).sum();
    let mut r = rng.f64() * total;
    for item in items {
        r -= weight(item);
        if r < 0.0 {
            return Some(item);
        }
    }
    // Rounding left a sliver: the last item that can be chosen.
    items.iter().rev().find(|i| weight(i) > 0.0)
}

/// Picks an item uniformly; `None` for an empty list.
fn pick<'a, T>(rng: &mut fastrand::Rng, items: &'a [T]) -> Option<&'a T> {
    if items.is_empty() {
        return None;
    }
    items.get(rng.usize(..items.len()))
}

/// One Observation Domain of one exporter.
#[derive(Debug, Clone, Copy)]
pub(crate) struct Slot {
    pub exporter: &'static Exporter,
    pub spec: &'static DomainSpec,
}

/// Every (exporter, domain), in a fixed order.
pub(crate) fn slots() -> Vec<Slot> {
    EXPORTERS
        .iter()
        .flat_map(|exporter| exporter.domains.iter().map(move |spec| Slot { exporter, spec }))
        .collect()
}

impl Slot {
    /// The flow template a record of this domain uses.
    pub(crate) const fn template_for(&self, flow: &Flow) -> u16 {
        match self.spec.kind {
            DomainKind::Core => T_MPLS,
            DomainKind::Srv6 => T_SRV6,
            _ if flow.is_v6() => T_V6,
            _ => T_V4,
        }
    }

    /// The flow templates this domain announces.
    pub(crate) fn templates(&self) -> &'static [u16] {
        match self.spec.kind {
            DomainKind::Core => &[T_MPLS],
            DomainKind::Srv6 => &[T_SRV6],
            DomainKind::MetroEdge => &[T_V6],
            DomainKind::PeCard { .. } | DomainKind::Border => &[T_V4, T_V6],
        }
    }
}

/// What the generator must produce for one record in a domain.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Force {
    None,
    Episode(EpisodeKind),
}

/// The ground truth the generator keeps.
#[derive(Debug, Clone, Default)]
pub(crate) struct Truth {
    pub forwarded: Tally,
    pub wred: Tally,
    pub bad_ttl: Tally,
    /// Flow records written per Observation Domain ID, in slot order.
    pub flow_records_by_domain: Vec<(u32, u64)>,
}

/// Plays a scenario: hands out flow records in time order.
#[derive(Debug)]
pub(crate) struct Generator {
    rng: fastrand::Rng,
    clock: Clock,
    pub timeline: Timeline,
    pub episodes: Vec<Episode>,
    pub slots: Vec<Slot>,
    pub truth: Truth,
}

impl Generator {
    /// A generator of `n` records for `scenario` over `timeline`.
    pub(crate) fn new(scenario: Scenario, seed: u64, timeline: Timeline, n: u64) -> Self {
        let mut rng = fastrand::Rng::with_seed(seed);
        let clock = Clock::new(&mut rng, timeline.start_ms, timeline.end_ms - timeline.start_ms, n);
        let slots = slots();
        let truth = Truth { flow_records_by_domain: slots.iter().map(|s| (s.spec.id, 0)).collect(), ..Truth::default() };
        Self { rng, clock, timeline, episodes: if scenario.episodes { episodes(&timeline) } else { Vec::new() }, slots, truth }
    }

    /// Flow record number `i`: the index of its slot and the flow.
    pub(crate) fn record(&mut self, i: u64) -> (usize, Flow) {
        let t = self.clock.time_of(i);
        // An active episode may claim this record for its own traffic.
        let mut force = Force::None;
        let mut slot = None;
        for episode in &self.episodes {
            if t >= episode.start_ms && t < episode.end_ms && self.rng.f64() < episode.boost {
                force = Force::Episode(episode.kind);
                slot = self.slots.iter().position(|s| s.spec.id == episode.domain);
                break;
            }
        }
        let slot = slot.unwrap_or_else(|| {
            let r = pick_weighted(&mut self.rng, &self.slots, |s| s.spec.weight).map_or(0, |s| s.spec.id);
            self.slots.iter().position(|s| s.spec.id == r).unwrap_or(0)
        });
        let Some(s) = self.slots.get(slot).copied() else {
            return (0, Flow::empty());
        };
        let mut flow = self.flow(&s, t, force);
        self.judge(&s, &mut flow);
        if let Some(count) = self.truth.flow_records_by_domain.get_mut(slot) {
            count.1 += 1;
        }
        (slot, flow)
    }

    /// A forwarded flow of slot `slot` at time `t` that is counted nowhere:
    /// the content of the export message that gets lost.
    pub(crate) fn uncounted(&mut self, slot: usize, t: u64) -> Flow {
        match self.slots.get(slot).copied() {
            Some(s) => {
                let mut flow = self.flow(&s, t, Force::None);
                flow.status = status::FORWARDED;
                flow
            }
            None => Flow::empty(),
        }
    }

    /// Decides the forwarding status: an active episode whose where matches
    /// drops the flow with its reason; else rare background drops.
    fn judge(&mut self, slot: &Slot, flow: &mut Flow) {
        let t = flow.end_ms;
        for episode in &mut self.episodes {
            if episode.domain != slot.spec.id || t < episode.start_ms || t >= episode.end_ms {
                continue;
            }
            let (matches, p, code) = match episode.kind {
                EpisodeKind::CoreDrain => {
                    // The FIB converges linearly over the episode: the
                    // share of traffic still sent to the dead adjacency falls.
                    let progress = (t - episode.start_ms) as f64 / (episode.end_ms - episode.start_ms).max(1) as f64;
                    (flow.out_if == KESTREL_TO_DUNLIN_A, 0.95 * (1.0 - progress), status::ADJACENCY)
                }
                EpisodeKind::Policer => (flow.out_if == OSPREY_QUINCE_B && flow.vrf == 102, 0.4, status::POLICER),
                EpisodeKind::Srv6Behavior => {
                    let quince = POLICIES.get(QUINCE_METRO_POLICY);
                    (flow.policy.is_some_and(|p| quince.is_some_and(|q| std::ptr::eq(p, q))), 1.0, status::UNROUTABLE)
                }
                EpisodeKind::PeeringAcl => {
                    (!flow.is_v6() && flow.next_as == 64620 && flow.protocol == 17 && flow.dst_port == 443, 1.0, status::ACL_DENY)
                }
            };
            if !matches {
                continue;
            }
            if self.rng.f64() < p {
                flow.status = code;
                if episode.kind == EpisodeKind::Srv6Behavior {
                    // Dropped before any egress lookup.
                    flow.out_if = 0;
                    flow.next_hop = IpAddr::V6(Ipv6Addr::UNSPECIFIED);
                }
                episode.tally.drop(flow);
                return;
            }
            episode.tally.passed_records += 1;
            episode.tally.passed_packets += flow.packets;
            if episode.kind == EpisodeKind::CoreDrain {
                // Already reprogrammed: the flow takes the parallel link.
                flow.out_if = KESTREL_TO_DUNLIN_B;
                flow.next_hop = slot.exporter.interface(KESTREL_TO_DUNLIN_B).map_or(flow.next_hop, |i| i.next_hop);
            }
        }
        let r = self.rng.f64();
        let rate = slot.exporter.sampling;
        // Congestion: a little everywhere, more on the core's busiest uplink.
        let wred = if slot.spec.kind == DomainKind::Core && flow.out_if == 3 { 0.006 } else { 0.002 };
        if r < wred && flow.out_if != 0 {
            flow.status = status::WRED;
            self.truth.wred.add(flow, rate);
        } else if r > 1.0 - 0.0006 {
            flow.status = status::BAD_TTL;
            self.truth.bad_ttl.add(flow, rate);
        } else {
            flow.status = status::FORWARDED;
            self.truth.forwarded.add(flow, rate);
        }
    }

    /// A flow of `slot` ending at `t`, shaped for an episode when forced.
    fn flow(&mut self, slot: &Slot, t: u64, force: Force) -> Flow {
        let exporter = slot.exporter;
        let rng = &mut self.rng;
        let mut flow = Flow::empty();
        flow.selector = exporter.selector;
        match slot.spec.kind {
            DomainKind::PeCard { card } => pe_flow(rng, exporter, card, force, &mut flow),
            DomainKind::Core => {
                // The first dunlin link stays drained from the drain to the
                // end of the window.
                let drained = self
                    .episodes
                    .iter()
                    .any(|e| e.kind == EpisodeKind::CoreDrain && t >= e.start_ms && t < self.timeline.window.1);
                core_flow(rng, exporter, drained, force, &mut flow);
            }
            DomainKind::Border => border_flow(rng, exporter, force, &mut flow),
            DomainKind::Srv6 => srv6_flow(rng, exporter, force, &mut flow),
            DomainKind::MetroEdge => metro_edge_flow(rng, exporter, &mut flow),
        }
        if force == Force::Episode(EpisodeKind::PeeringAcl) {
            flow.protocol = 17;
            flow.dst_port = 443;
        } else {
            traffic(rng, &mut flow);
        }
        size(rng, &mut flow);
        flow.end_ms = t;
        flow.start_ms = t.saturating_sub(duration_ms(rng, flow.packets));
        flow
    }
}

/// A host address in a customer site of `vrf_id` behind `iface_hop`.
fn site_host(rng: &mut fastrand::Rng, hop: IpAddr, v6: bool, vrf_id: u32) -> IpAddr {
    if v6 {
        let site = u16::try_from(0x1000 + vrf_id % 0x1000).unwrap_or(0x1000);
        return IpAddr::V6(Ipv6Addr::new(0x2001, 0xdb8, site, rng.u16(1..64), 0, 0, rng.u16(..), rng.u16(1..)));
    }
    match hop {
        IpAddr::V4(a) => {
            let [x, y, z, base] = a.octets();
            // The CE sits at the first address of a /27; hosts follow it.
            IpAddr::V4(Ipv4Addr::new(x, y, z, base.saturating_add(rng.u8(2..30))))
        }
        IpAddr::V6(_) => IpAddr::V4(Ipv4Addr::new(198, 51, 100, rng.u8(2..30))),
    }
}

/// A remote host: other sites and the outside world.
fn remote_host(rng: &mut fastrand::Rng, v6: bool) -> IpAddr {
    if v6 {
        IpAddr::V6(Ipv6Addr::new(0x2001, 0xdb8, rng.u16(0x2000..0x2100), rng.u16(..), 0, 0, 0, rng.u16(1..)))
    } else {
        IpAddr::V4(Ipv4Addr::new(203, 0, 113, rng.u8(128..255)))
    }
}

fn hop_of(exporter: &Exporter, index: u32) -> IpAddr {
    exporter.interface(index).map_or(IpAddr::V4(Ipv4Addr::UNSPECIFIED), |i| i.next_hop)
}

/// osprey-pe1: a customer port of `card` to the core or back.
fn pe_flow(rng: &mut fastrand::Rng, exporter: &Exporter, card: u32, force: Force, flow: &mut Flow) {
    let policer = force == Force::Episode(EpisodeKind::Policer);
    let port = if policer {
        exporter.interface(OSPREY_QUINCE_B)
    } else {
        // The customer ports of this card, management seldom.
        pick_weighted(rng, exporter.interfaces, |i| match i.role {
            _ if i.index / 10 != card => 0.0,
            Role::Customer { .. } => 1.0,
            Role::Management => 0.05,
            _ => 0.0,
        })
    };
    let Some(port) = port else { return };
    let vrf_id = match port.role {
        Role::Customer { vrf } => vrf,
        Role::Management => 900,
        _ => 0,
    };
    let v6 = !policer && port.role != Role::Management && rng.f64() < 0.22;
    let core = if rng.f64() < 0.65 { 11 } else { 12 };
    let site = site_host(rng, port.next_hop, v6, vrf_id);
    let remote = remote_host(rng, v6);
    let upstream = !policer && rng.f64() < 0.55;
    if upstream {
        flow.src = site;
        flow.dst = remote;
        flow.in_if = port.index;
        flow.out_if = core;
        flow.next_hop = v6_if(v6, hop_of(exporter, core), 0xa12);
        let remote_pe = if rng.f64() < 0.7 { 8 } else { 5 };
        flow.bgp_next_hop = v6_if(v6, IpAddr::V4(loopback(remote_pe)), 0xff);
    } else {
        flow.src = remote;
        flow.dst = site;
        flow.in_if = core;
        flow.out_if = port.index;
        flow.next_hop = v6_if(v6, port.next_hop, 0xc);
    }
    flow.vrf = vrf_id;
    flow.tenant = vrf(vrf_id).tenant;
}

/// The IPv6 counterpart of an IPv4 address used as a next hop: the same
/// last octet in 2001:db8:0:`net`::/64.
fn v6_if(v6: bool, a: IpAddr, net: u16) -> IpAddr {
    match (v6, a) {
        (true, IpAddr::V4(a)) => {
            let [.., last] = a.octets();
            IpAddr::V6(Ipv6Addr::new(0x2001, 0xdb8, 0, net, 0, 0, 0, u16::from(last)))
        }
        _ => a,
    }
}

/// kestrel-p2: labelled transit between core links.
fn core_flow(rng: &mut fastrand::Rng, exporter: &Exporter, drained: bool, force: Force, flow: &mut Flow) {
    // Destination node: osprey 1, dunlin 3, egret 4, plover 5, curlew 8.
    let drain = force == Force::Episode(EpisodeKind::CoreDrain);
    let dest = if drain {
        if rng.f64() < 0.7 { 8 } else { 3 }
    } else {
        *pick_weighted(rng, &[(1u32, 0.25), (3, 0.08), (8, 0.22), (4, 0.30), (5, 0.15)], |d| d.1).map_or(&4, |d| &d.0)
    };
    let out_if = match dest {
        1 => 1,
        4 => 3,
        5 => 4,
        // Two parallel links to dunlin-p3: ECMP, except that the first is
        // drained for the maintenance window (the episode's records are
        // the ones the FIB still sends there).
        _ if drain => KESTREL_TO_DUNLIN_A,
        _ if drained => KESTREL_TO_DUNLIN_B,
        _ if rng.bool() => KESTREL_TO_DUNLIN_A,
        _ => KESTREL_TO_DUNLIN_B,
    };
    // Any other core port (the drained one sends nothing in).
    flow.in_if = loop {
        let i = *pick(rng, &[1, 3, 4, KESTREL_TO_DUNLIN_B]).unwrap_or(&1);
        if i != out_if {
            break i;
        }
    };
    flow.out_if = out_if;
    flow.next_hop = hop_of(exporter, out_if);
    flow.bgp_next_hop = IpAddr::V4(loopback(dest));
    // Label stack, top first: prefix SID of the egress node, then the VPN
    // service label (none for global traffic to the peering edge); one in
    // ten stacks carries a repair segment on top.
    let service = if dest == 4 { None } else { pick(rng, &[101u32, 102, 103]).map(|v| vrf(*v)) };
    let repair = rng.f64() < 0.1 && dest != 3;
    let labels = [repair.then_some(prefix_sid(3)), Some(prefix_sid(dest)), service.map(|v| v.vpn_label)];
    flow.labels = 0;
    for label in labels.into_iter().flatten() {
        if let Some(slot) = flow.label_stack.get_mut(usize::from(flow.labels)) {
            *slot = label;
            flow.labels += 1;
        }
    }
    flow.label_type = LABEL_TYPE_ISIS_SR;
    let v_site = service.map_or(0, |v| v.id);
    flow.src = site_host(rng, IpAddr::V4(Ipv4Addr::new(198, 51, 100, vrf(v_site).site_base)), false, v_site);
    flow.dst = remote_host(rng, false);
}

/// egret-be4: to and from the peers.
fn border_flow(rng: &mut fastrand::Rng, exporter: &Exporter, force: Force, flow: &mut Flow) {
    let acl = force == Force::Episode(EpisodeKind::PeeringAcl);
    let peer = if acl { PEERS.iter().find(|p| p.asn == 64620) } else { pick_weighted(rng, &PEERS, |p| p.weight) };
    let Some(peer) = peer else { return };
    let v6 = !acl && rng.f64() < 0.3;
    let core = if rng.f64() < 0.7 { 1 } else { 2 };
    let inside = site_host(rng, IpAddr::V4(Ipv4Addr::new(198, 51, 100, 192)), v6, 0);
    let outside = if v6 {
        IpAddr::V6(Ipv6Addr::new(0x2001, 0xdb8, 0xf000 + u16::try_from(peer.asn % 100).unwrap_or(0), rng.u16(..), 0, 0, 0, rng.u16(1..)))
    } else {
        IpAddr::V4(Ipv4Addr::new(203, 0, 113, rng.u8(128..255)))
    };
    let peer_hop = if v6 { IpAddr::V6(peer.address6) } else { IpAddr::V4(peer.address) };
    if acl || rng.f64() < 0.55 {
        flow.src = inside;
        flow.dst = outside;
        flow.in_if = core;
        flow.out_if = peer.interface;
        flow.next_hop = peer_hop;
        flow.bgp_next_hop = peer_hop;
        flow.next_as = peer.asn;
    } else {
        flow.src = outside;
        flow.dst = inside;
        flow.in_if = peer.interface;
        flow.out_if = core;
        flow.next_hop = v6_if(v6, hop_of(exporter, core), 0xa24);
        flow.bgp_next_hop = v6_if(v6, IpAddr::V4(loopback(if rng.bool() { 1 } else { 8 })), 0xff);
        flow.prev_as = peer.asn;
    }
}

/// plover-m5, SRv6 domain: a flow on one of the SR policies.
fn srv6_flow(rng: &mut fastrand::Rng, exporter: &Exporter, force: Force, flow: &mut Flow) {
    let policy = if force == Force::Episode(EpisodeKind::Srv6Behavior) {
        POLICIES.get(QUINCE_METRO_POLICY)
    } else {
        pick_weighted(rng, &POLICIES, |p| p.weight)
    };
    let Some(policy) = policy else { return };
    flow.policy = Some(policy);
    flow.in_if = policy.in_if;
    flow.out_if = policy.out_if;
    flow.next_hop = hop_of(exporter, policy.out_if);
    flow.vrf = policy.vrf;
    flow.tenant = vrf(policy.vrf).tenant;
    let hop = IpAddr::V4(Ipv4Addr::UNSPECIFIED);
    flow.src = site_host(rng, hop, true, policy.vrf);
    flow.dst = if policy.behavior == behavior::END_X { remote_host(rng, true) } else { site_host(rng, hop, true, policy.vrf) };
}

/// plover-m5, IPv6 edge domain: customer ports to the core or the metro.
fn metro_edge_flow(rng: &mut fastrand::Rng, exporter: &Exporter, flow: &mut Flow) {
    let port = if rng.bool() { 4 } else { 5 };
    let vrf_id = if port == 4 { 102 } else { 101 };
    let uplink = *pick(rng, &[1u32, 2, 3]).unwrap_or(&1);
    let site = site_host(rng, IpAddr::V4(Ipv4Addr::UNSPECIFIED), true, vrf_id);
    let remote = remote_host(rng, true);
    if rng.f64() < 0.5 {
        flow.src = site;
        flow.dst = remote;
        flow.in_if = port;
        flow.out_if = uplink;
        flow.next_hop = hop_of(exporter, uplink);
    } else {
        flow.src = remote;
        flow.dst = site;
        flow.in_if = uplink;
        flow.out_if = port;
        flow.next_hop = hop_of(exporter, port);
    }
    flow.vrf = vrf_id;
    flow.tenant = vrf(vrf_id).tenant;
}

/// Protocol, ports, TCP flags and class of service: a web-heavy mix.
fn traffic(rng: &mut fastrand::Rng, flow: &mut Flow) {
    let v6 = flow.is_v6();
    let r = rng.f64();
    let ephemeral = rng.u16(32768..61000);
    let (protocol, sport, dport) = if r < 0.46 {
        (6, ephemeral, 443)
    } else if r < 0.54 {
        (6, ephemeral, 80)
    } else if r < 0.58 {
        (6, ephemeral, *pick(rng, &[22u16, 25, 179, 993, 3389, 8443]).unwrap_or(&22))
    } else if r < 0.66 {
        // Server to client direction of a TCP connection.
        (6, 443, ephemeral)
    } else if r < 0.80 {
        (17, ephemeral, 443)
    } else if r < 0.87 {
        (17, ephemeral, 53)
    } else if r < 0.90 {
        (17, 123, 123)
    } else if r < 0.94 {
        (17, ephemeral, *pick(rng, &[500u16, 4500, 3478, 5060, 1194]).unwrap_or(&4500))
    } else if r < 0.97 {
        (if v6 { 58 } else { 1 }, 0, 0)
    } else if r < 0.99 {
        (50, 0, 0)
    } else {
        (47, 0, 0)
    };
    flow.protocol = protocol;
    flow.src_port = sport;
    flow.dst_port = dport;
    // ICMP carries type/code where the ports would be (echo request 8 / 128).
    if protocol == 1 || protocol == 58 {
        flow.dst_port = if protocol == 1 { 0x0800 } else { 0x8000 };
    }
    flow.tcp_flags = if protocol == 6 {
        // ACK always; SYN/FIN/PSH in many flows.
        0x10 | if rng.f64() < 0.6 { 0x08 } else { 0 } | if rng.f64() < 0.3 { 0x02 } else { 0 } | if rng.f64() < 0.3 { 0x01 } else { 0 }
    } else {
        0
    };
    let c = rng.f64();
    flow.tos = if c < 0.78 {
        0
    } else if c < 0.88 {
        0x28
    } else if c < 0.95 {
        0x48
    } else {
        0xb8
    };
}

/// Sampled packets (heavy-tailed: most flows have one sampled packet, a few
/// elephants thousands) and octets from a per-protocol packet size.
fn size(rng: &mut fastrand::Rng, flow: &mut Flow) {
    let r = rng.f64();
    flow.packets = if r < 0.62 {
        1
    } else if r < 0.82 {
        rng.u64(2..4)
    } else {
        ((1.3 + 1.4 * normal(rng)).exp().ceil() as u64).clamp(2, 250_000)
    };
    let (lo, hi) = match (flow.protocol, flow.dst_port) {
        (6, 443 | 80) => (700, 1460),
        (6, _) if flow.src_port == 443 => (60, 600),
        (6, _) => (60, 900),
        (17, 443) => (1100, 1350),
        (17, 53) => (60, 300),
        (17, 123) => (76, 90),
        (17, _) => (120, 1300),
        (1 | 58, _) => (64, 128),
        _ => (100, 1400),
    };
    let mean = rng.u64(lo..=hi);
    flow.octets = flow.packets.saturating_mul(mean);
}

/// Flow duration: up to the 60 s active timeout, longer for bigger flows.
fn duration_ms(rng: &mut fastrand::Rng, packets: u64) -> u64 {
    let base = (7.5 + 1.2 * normal(rng) + (packets as f64).ln() * 0.6).exp();
    (base as u64).min(60_000)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn clock_is_monotonic_and_inside_the_capture() {
        let mut rng = fastrand::Rng::with_seed(3);
        let mut clock = Clock::new(&mut rng, 1_000_000, 3_600_000, 10_000);
        let mut last = 0;
        for i in 0..10_000 {
            let t = clock.time_of(i);
            assert!(t >= last && (1_000_000..4_600_000).contains(&t), "record {i} at {t}");
            last = t;
        }
    }

    #[test]
    fn timeline_scales_with_duration() {
        let t = Timeline::new(0, 600_000);
        assert_eq!(t.window, (200_000, 400_000));
        let e = episodes(&t);
        assert_eq!(e.first().map(|e| (e.start_ms, e.end_ms)), Some((250_000, 266_666)));
    }

    #[test]
    fn episodes_only_in_their_domain_and_time() {
        let timeline = Timeline::new(1_795_998_600_000, 3_600_000);
        let scenario = SCENARIOS[0];
        let mut generator = Generator::new(scenario, 11, timeline, 30_000);
        for i in 0..30_000 {
            let (slot, flow) = generator.record(i);
            let domain = generator.slots.get(slot).map(|s| s.spec.id);
            match flow.status {
                status::ADJACENCY => assert_eq!(domain, Some(1201)),
                status::POLICER => assert_eq!((domain, flow.out_if, flow.vrf), (Some(1102), OSPREY_QUINCE_B, 102)),
                status::UNROUTABLE => assert_eq!(domain, Some(1501)),
                status::ACL_DENY => assert_eq!((domain, flow.next_as), (Some(1401), 64620)),
                _ => {}
            }
        }
        for e in &generator.episodes {
            assert!(e.tally.records > 0, "{:?} dropped nothing", e.kind);
            let (first, last) = (e.tally.first_ms.unwrap_or(0), e.tally.last_ms.unwrap_or(0));
            assert!(first >= e.start_ms && last < e.end_ms, "{:?}", e.kind);
        }
    }
}
