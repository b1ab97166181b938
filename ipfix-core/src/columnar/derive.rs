//! Derived columns: values computed from one or more elements of a record,
//! and from what the exporter's options records said.

use arrow::datatypes::{DataType as ArrowType, TimeUnit};

use super::enrich::{DomainInfo, SamplingParams};
use super::schema::timestamp;
use super::utf8::Name;
use super::ColumnarStats;
use crate::ie::{self, id, ForwardingStatus, LabelStackEntry};
use crate::plan::{Decode, Plan};
use crate::record::{DateTime, Value};

/// A derived column of the flows table.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum DerivedColumn {
    /// `forwardingOutcome` (Utf8): `unknown`, `forwarded`, `dropped` or
    /// `consumed`, the status bits 7–6 of forwardingStatus (IE 89)'s
    /// least-significant octet (IANA "Forwarding Status (Value 89)", RFC
    /// 7270 §4.12; the field may be 1, 2 or 4 octets). Null when the record
    /// has no forwardingStatus.
    ForwardingOutcome,
    /// `forwardingReason` (Utf8): the registry's reason for the status and
    /// reason bits, lower case with hyphens (`acl-deny`, `bad-ttl`,
    /// `for-us`). Null without forwardingStatus and for codes the registry
    /// leaves unassigned (the raw value stays in `forwardingStatus`).
    ForwardingReason,
    /// `mplsLabelStack` (`List<UInt32>`): label values, top of the stack
    /// first. From mplsTopLabelStackSection (70) and
    /// mplsLabelStackSection2..10 (71–79), 3-octet label/TC/S entries (RFC
    /// 3032 §2.1 without TTL), read in section order and stopping after the
    /// entry with the bottom-of-stack bit, at the first section the template
    /// lacks, or at an all-zero section (an exporter's "no entry"; an
    /// interpretation); else from mplsLabelStackSection (316), whole 4-octet
    /// entries from the head of the stack. Empty when the template carries
    /// sections but the first holds no entry; null when it carries none.
    MplsLabelStack,
    /// `flowStartTime` (Timestamp(Nanosecond, "UTC")), from the most
    /// precise start element present: flowStartNanoseconds (156),
    /// flowStartMicroseconds (154), flowStartMilliseconds (152),
    /// flowStartSeconds (150); flowStartDeltaMicroseconds (158): Export
    /// Time minus the delta (RFC 7011 §5.1); flowStartSysUpTime (22):
    /// systemInitTimeMilliseconds (160, from the record, else from the
    /// exporter's options records) plus the value in ms.
    FlowStartTime,
    /// `flowEndTime` (Timestamp(Nanosecond, "UTC")): as `flowStartTime`
    /// with the end elements 157, 155, 153, 151, 159 and 21.
    FlowEndTime,
    /// `samplingRate` (UInt32): N of 1-in-N packet sampling. From the
    /// record's own sampling parameters if any (see
    /// [`Enrichment`](super::Enrichment) for the formulas), else the
    /// options records of the sampler (samplerId 48) or selector
    /// (selectorId 302) the record names, else the one rate the exporter's
    /// options records agree on. Null when unknown.
    SamplingRate,
    /// `ingressInterfaceName` (Utf8): interfaceName of the record's
    /// ingressInterface (10), from options records.
    IngressInterfaceName,
    /// `egressInterfaceName` (Utf8): interfaceName of the record's
    /// egressInterface (14), from options records.
    EgressInterfaceName,
    /// `ingressVRFname` (Utf8): VRFname of the record's ingressVRFID (234),
    /// from options records.
    IngressVrfName,
    /// `egressVRFname` (Utf8): VRFname of the record's egressVRFID (235),
    /// from options records.
    EgressVrfName,
    /// `srhEndpointBehaviorName` (Utf8): the IANA "SRv6 Endpoint
    /// Behaviors" name of srhSegmentIPv6EndpointBehavior (502), e.g.
    /// `End.X`; null for unassigned code points.
    SrhEndpointBehaviorName,
}

impl DerivedColumn {
    /// The derived columns in table order.
    pub const ALL: [Self; 11] = [
        Self::ForwardingOutcome,
        Self::ForwardingReason,
        Self::MplsLabelStack,
        Self::FlowStartTime,
        Self::FlowEndTime,
        Self::SamplingRate,
        Self::IngressInterfaceName,
        Self::EgressInterfaceName,
        Self::IngressVrfName,
        Self::EgressVrfName,
        Self::SrhEndpointBehaviorName,
    ];

    /// The column name.
    pub const fn name(self) -> &'static str {
        match self {
            Self::ForwardingOutcome => "forwardingOutcome",
            Self::ForwardingReason => "forwardingReason",
            Self::MplsLabelStack => "mplsLabelStack",
            Self::FlowStartTime => "flowStartTime",
            Self::FlowEndTime => "flowEndTime",
            Self::SamplingRate => "samplingRate",
            Self::IngressInterfaceName => "ingressInterfaceName",
            Self::EgressInterfaceName => "egressInterfaceName",
            Self::IngressVrfName => "ingressVRFname",
            Self::EgressVrfName => "egressVRFname",
            Self::SrhEndpointBehaviorName => "srhEndpointBehaviorName",
        }
    }

    /// The Arrow type.
    pub fn data_type(self) -> ArrowType {
        match self {
            Self::MplsLabelStack => ArrowType::new_list(ArrowType::UInt32, true),
            Self::FlowStartTime | Self::FlowEndTime => timestamp(TimeUnit::Nanosecond),
            Self::SamplingRate => ArrowType::UInt32,
            _ => ArrowType::Utf8,
        }
    }
}

/// Where a record's start or end time comes from.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(crate) enum TimeSource {
    /// A dateTime element (field index, its decoder).
    Absolute(usize, Decode),
    /// flowStart/EndDeltaMicroseconds: before the Export Time.
    DeltaMicros(usize),
    /// flowStart/EndSysUpTime: after systemInitTimeMilliseconds.
    SysUpTime(usize),
}

/// For one plan: which fields feed which derived column (first occurrence
/// of each element only, and only with a usable decoder).
#[derive(Debug, Clone, Default)]
pub(crate) struct DerivedPlan {
    pub fwd: Option<usize>,
    pub mpls_sections: Vec<usize>,
    pub mpls_raw: Option<usize>,
    pub start: Option<TimeSource>,
    pub end: Option<TimeSource>,
    pub init_in_record: Option<usize>,
    pub sampling: Vec<(u16, usize, Decode)>,
    pub sampler_id: Option<usize>,
    pub selector_id: Option<usize>,
    pub ingress_if: Option<usize>,
    pub egress_if: Option<usize>,
    pub ingress_vrf: Option<usize>,
    pub egress_vrf: Option<usize>,
    pub srh: Option<usize>,
}

const START: [u16; 6] = [
    id::FLOW_START_NANOSECONDS,
    id::FLOW_START_MICROSECONDS,
    id::FLOW_START_MILLISECONDS,
    id::FLOW_START_SECONDS,
    id::FLOW_START_DELTA_MICROSECONDS,
    id::FLOW_START_SYS_UP_TIME,
];
const END: [u16; 6] = [
    id::FLOW_END_NANOSECONDS,
    id::FLOW_END_MICROSECONDS,
    id::FLOW_END_MILLISECONDS,
    id::FLOW_END_SECONDS,
    id::FLOW_END_DELTA_MICROSECONDS,
    id::FLOW_END_SYS_UP_TIME,
];

impl DerivedPlan {
    pub(crate) fn new(plan: &Plan) -> Self {
        // Index of the first occurrence of IANA element `ie` decoded as `want`.
        let find = |ie: u16, want: fn(Decode) -> bool| {
            plan.fields().iter().position(|f| f.spec.element.is_iana(ie) && f.occurrence == 1 && want(f.decode))
        };
        let unsigned = |d: Decode| d == Decode::Unsigned;
        let octets = |d: Decode| d == Decode::Octets;
        let time = |ids: &[u16; 6]| {
            ids.iter().enumerate().find_map(|(k, ie)| match k {
                0..=3 => {
                    let i = find(*ie, |d| {
                        matches!(
                            d,
                            Decode::DateTimeSeconds
                                | Decode::DateTimeMilliseconds
                                | Decode::DateTimeMicroseconds
                                | Decode::DateTimeNanoseconds
                        )
                    })?;
                    Some(TimeSource::Absolute(i, plan.fields().get(i)?.decode))
                }
                4 => find(*ie, unsigned).map(TimeSource::DeltaMicros),
                _ => find(*ie, unsigned).map(TimeSource::SysUpTime),
            })
        };
        let mut mpls_sections = Vec::new();
        for ie in id::MPLS_TOP_LABEL_STACK_SECTION..=id::MPLS_LABEL_STACK_SECTION10 {
            match find(ie, octets) {
                Some(i) => mpls_sections.push(i),
                None => break,
            }
        }
        let sampling = [
            id::SAMPLING_INTERVAL,
            id::SAMPLER_RANDOM_INTERVAL,
            id::SAMPLING_PACKET_INTERVAL,
            id::SAMPLING_PACKET_SPACE,
            id::SAMPLING_SIZE,
            id::SAMPLING_POPULATION,
            id::SAMPLING_PROBABILITY,
        ]
        .into_iter()
        .filter_map(|ie| {
            let i = find(ie, |d| matches!(d, Decode::Unsigned | Decode::Float64 | Decode::Float64From32))?;
            Some((ie, i, plan.fields().get(i)?.decode))
        })
        .collect();
        Self {
            fwd: find(id::FORWARDING_STATUS, unsigned),
            mpls_sections,
            mpls_raw: find(id::MPLS_LABEL_STACK_SECTION, octets),
            start: time(&START),
            end: time(&END),
            init_in_record: find(id::SYSTEM_INIT_TIME_MILLISECONDS, |d| d == Decode::DateTimeMilliseconds),
            sampling,
            sampler_id: find(id::SAMPLER_ID, unsigned),
            selector_id: find(id::SELECTOR_ID, unsigned),
            ingress_if: find(id::INGRESS_INTERFACE, unsigned),
            egress_if: find(id::EGRESS_INTERFACE, unsigned),
            ingress_vrf: find(id::INGRESS_VRFID, unsigned),
            egress_vrf: find(id::EGRESS_VRFID, unsigned),
            srh: find(id::SRH_SEGMENT_IPV6_ENDPOINT_BEHAVIOR, unsigned),
        }
    }
}

/// Groups of derived columns, as bits: a group's columns are computed per
/// record only when the plan (and the set's enrichment) can give a value;
/// otherwise they are constant for the whole set and appended in bulk.
pub(crate) mod group {
    /// forwardingOutcome, forwardingReason.
    pub const FWD: u8 = 1 << 0;
    /// mplsLabelStack.
    pub const MPLS: u8 = 1 << 1;
    /// flowStartTime.
    pub const START: u8 = 1 << 2;
    /// flowEndTime.
    pub const END: u8 = 1 << 3;
    /// samplingRate.
    pub const RATE: u8 = 1 << 4;
    /// ingress/egressInterfaceName.
    pub const IFACE: u8 = 1 << 5;
    /// ingress/egressVRFname.
    pub const VRF: u8 = 1 << 6;
    /// srhEndpointBehaviorName.
    pub const SRH: u8 = 1 << 7;
    /// (group, first column offset from the first derived column, columns).
    pub const COLUMNS: [(u8, usize, usize); 8] =
        [(FWD, 0, 2), (MPLS, 2, 1), (START, 3, 1), (END, 4, 1), (RATE, 5, 1), (IFACE, 6, 2), (VRF, 8, 2), (SRH, 10, 1)];
}

impl DerivedPlan {
    /// The groups whose values vary per record for this plan and set.
    pub(crate) fn per_record(&self, ctx: &SetContext<'_>) -> u8 {
        let has = |b: bool, g: u8| if b { g } else { 0 };
        let ifaces = ctx.info.is_some_and(|i| !i.interfaces.is_empty());
        let vrfs = ctx.info.is_some_and(|i| !i.vrfs.is_empty());
        has(self.fwd.is_some(), group::FWD)
            | has(!self.mpls_sections.is_empty() || self.mpls_raw.is_some(), group::MPLS)
            | has(self.start.is_some(), group::START)
            | has(self.end.is_some(), group::END)
            | has(!self.sampling.is_empty() || self.sampler_id.is_some() || self.selector_id.is_some(), group::RATE)
            | has(ifaces && (self.ingress_if.is_some() || self.egress_if.is_some()), group::IFACE)
            | has(vrfs && (self.ingress_vrf.is_some() || self.egress_vrf.is_some()), group::VRF)
            | has(self.srh.is_some(), group::SRH)
    }
}

/// What is the same for every record of a Data Set.
#[derive(Debug, Clone, Copy)]
pub(crate) struct SetContext<'e> {
    pub export_time: u32,
    pub info: Option<&'e DomainInfo>,
    /// systemInitTimeMilliseconds from options, at this Export Time.
    pub init_ms: Option<i64>,
    /// Rate for records naming no sampler; `Err` when ambiguous.
    pub fallback_rate: Result<Option<u32>, ()>,
}

impl<'e> SetContext<'e> {
    pub(crate) fn new(export_time: u32, info: Option<&'e DomainInfo>) -> Self {
        Self {
            export_time,
            info,
            init_ms: info.and_then(|i| i.init_ms.at(export_time).copied()),
            fallback_rate: info.map_or(Ok(None), |i| i.fallback_rate(export_time)),
        }
    }
}

/// The derived values of one record.
#[derive(Debug, Clone, Copy, Default)]
pub(crate) struct DerivedRow<'e> {
    pub outcome: Option<&'static str>,
    pub reason: Option<&'static str>,
    /// True when the label list is present (its items are in the scratch).
    pub labels: bool,
    pub start_ns: Option<i64>,
    pub end_ns: Option<i64>,
    pub rate: Option<u32>,
    pub ingress_name: Option<&'e str>,
    pub egress_name: Option<&'e str>,
    pub ingress_vrf: Option<&'e str>,
    pub egress_vrf: Option<&'e str>,
    pub srh: Option<&'static str>,
}

/// (outcome, reason) names of each forwardingStatus octet, from
/// [`ForwardingStatus`], computed once.
fn forwarding_names() -> &'static [(&'static str, Option<&'static str>); 256] {
    static NAMES: std::sync::OnceLock<[(&'static str, Option<&'static str>); 256]> = std::sync::OnceLock::new();
    NAMES.get_or_init(|| {
        let mut t = [("unknown", None); 256];
        for (octet, slot) in (0u64..).zip(t.iter_mut()) {
            let s = ForwardingStatus::from_raw(octet);
            *slot = (s.outcome().name(), s.reason_name());
        }
        t
    })
}

/// [`forwarding_names`] padded for fixed-size copies into text columns.
pub(crate) fn forwarding_texts() -> &'static [(Name, Option<Name>); 256] {
    static TEXTS: std::sync::OnceLock<[(Name, Option<Name>); 256]> = std::sync::OnceLock::new();
    TEXTS.get_or_init(|| {
        let names = forwarding_names();
        std::array::from_fn(|i| {
            let (outcome, reason) = names.get(i).copied().unwrap_or(("unknown", None));
            (Name::new(outcome), reason.map(Name::new))
        })
    })
}

/// Big-endian unsigned integer of up to 8 octets (RFC 7011 §6.2 widening).
#[inline]
pub(crate) fn be_uint(b: &[u8]) -> u64 {
    // The usual widths without a byte loop.
    match *b {
        [x] => u64::from(x),
        [a, x] => u64::from(u16::from_be_bytes([a, x])),
        [a, b2, c, x] => u64::from(u32::from_be_bytes([a, b2, c, x])),
        [a, b2, c, d, e, f, g, x] => u64::from_be_bytes([a, b2, c, d, e, f, g, x]),
        _ => b.iter().fold(0u64, |acc, x| (acc << 8) | u64::from(*x)),
    }
}

fn be_u32(b: &[u8]) -> Option<u32> {
    u32::try_from(be_uint(b)).ok().filter(|_| b.len() <= 4)
}

/// Nanoseconds since the UNIX epoch of a dateTime element's octets.
pub(crate) fn absolute_ns(decode: Decode, raw: &[u8]) -> Option<i64> {
    match decode {
        Decode::DateTimeSeconds => Some(i64::from(be_u32(raw)?) * 1_000_000_000),
        Decode::DateTimeMilliseconds => i64::try_from(be_uint(raw)).ok()?.checked_mul(1_000_000),
        Decode::DateTimeMicroseconds | Decode::DateTimeNanoseconds => {
            let (s, f) = raw.split_first_chunk::<4>()?;
            let f: &[u8; 4] = f.try_into().ok()?;
            DateTime::from_ntp(u32::from_be_bytes(*s), u32::from_be_bytes(*f), decode == Decode::DateTimeMicroseconds)
                .unix_nanos()
        }
        _ => None,
    }
}

impl DerivedPlan {
    /// Computes the derived values of one record. `raw(i)` gives the octets
    /// of field `i`; MPLS labels go to `labels` (cleared first).
    pub(crate) fn compute<'a, 'e>(
        &self,
        groups: u8,
        raw: impl Fn(usize) -> Option<&'a [u8]>,
        ctx: &SetContext<'e>,
        labels: &mut Vec<u32>,
        stats: &mut ColumnarStats,
    ) -> DerivedRow<'e> {
        let mut row = DerivedRow::default();
        let uint = |i: Option<usize>| i.and_then(&raw).map(be_uint);

        if let Some(v) = uint(self.fwd).filter(|_| groups & group::FWD != 0) {
            // Only the least-significant octet has a meaning (IANA IE 89).
            let (outcome, reason) = forwarding_names().get(usize::from(ForwardingStatus::from_raw(v).octet())).copied().unwrap_or(("unknown", None));
            row.outcome = Some(outcome);
            row.reason = reason;
        }

        labels.clear();
        if groups & group::MPLS != 0 {
            row.labels = self.labels(&raw, labels);
        }

        let init_ms = || match self.init_in_record.and_then(&raw) {
            Some(b) => i64::try_from(be_uint(b)).ok(),
            None => ctx.init_ms,
        };
        let time = |src: Option<TimeSource>, stats: &mut ColumnarStats| -> Option<i64> {
            let ns = match src? {
                TimeSource::Absolute(i, d) => absolute_ns(d, raw(i)?),
                TimeSource::DeltaMicros(i) => {
                    // RFC 7011 §5.1: a negative offset from the Export Time.
                    let delta = i64::try_from(be_uint(raw(i)?)).ok()?;
                    (i64::from(ctx.export_time) * 1_000_000_000).checked_sub(delta.checked_mul(1000)?)
                }
                TimeSource::SysUpTime(i) => {
                    let up = i64::try_from(be_uint(raw(i)?)).ok()?;
                    let Some(init) = init_ms() else {
                        stats.times_unresolved_sys_up_time += 1;
                        return None;
                    };
                    init.checked_add(up).and_then(|ms| ms.checked_mul(1_000_000))
                }
            };
            if ns.is_none() {
                stats.values_null_out_of_range += 1;
            }
            ns
        };
        if groups & group::START != 0 {
            row.start_ns = time(self.start, stats);
        }
        if groups & group::END != 0 {
            row.end_ns = time(self.end, stats);
        }

        if groups & group::RATE != 0 {
            row.rate = self.rate(&raw, ctx, stats);
        }

        if let Some(info) = ctx.info.filter(|_| groups & (group::IFACE | group::VRF) != 0) {
            let name = |i: Option<usize>, map: &'e super::enrich::IdMap<u32, super::enrich::Timeline<std::sync::Arc<str>>>| {
                let key = u32::try_from(uint(i)?).ok()?;
                map.get(&key)?.at(ctx.export_time).map(|s| &**s)
            };
            if !info.interfaces.is_empty() {
                row.ingress_name = name(self.ingress_if, &info.interfaces);
                row.egress_name = name(self.egress_if, &info.interfaces);
            }
            if !info.vrfs.is_empty() {
                row.ingress_vrf = name(self.ingress_vrf, &info.vrfs);
                row.egress_vrf = name(self.egress_vrf, &info.vrfs);
            }
        }

        row.srh = uint(self.srh).and_then(|v| u16::try_from(v).ok()).and_then(ie::srv6_endpoint_behavior_name);
        row
    }

    /// The record's MPLS label values, top first, into `labels` (cleared
    /// first; see [`DerivedColumn::MplsLabelStack`]). False when the plan
    /// carries no label stack element, so the column is null.
    pub(crate) fn labels<'a>(&self, raw: &impl Fn(usize) -> Option<&'a [u8]>, labels: &mut Vec<u32>) -> bool {
        labels.clear();
        if !self.mpls_sections.is_empty() {
            for i in &self.mpls_sections {
                // 3 octets: label (20 bits), TC (3), S (1); IANA IE 70-79.
                let Some(b) = raw(*i) else { break };
                if b.iter().all(|x| *x == 0) {
                    break;
                }
                let Some(entry) = LabelStackEntry::from_section(b) else { break };
                labels.push(entry.label);
                if entry.bottom_of_stack {
                    break;
                }
            }
            true
        } else if let Some(b) = self.mpls_raw.and_then(raw) {
            // Whole 4-octet entries from the head of the stack (IANA IE 316).
            for chunk in b.chunks_exact(4) {
                let Some(entry) = LabelStackEntry::from_section(chunk) else { break };
                labels.push(entry.label);
                if entry.bottom_of_stack {
                    break;
                }
            }
            true
        } else {
            false
        }
    }

    fn rate<'a>(&self, raw: &impl Fn(usize) -> Option<&'a [u8]>, ctx: &SetContext<'_>, stats: &mut ColumnarStats) -> Option<u32> {
        if !self.sampling.is_empty() {
            let mut params = SamplingParams::default();
            for (ie, i, decode) in &self.sampling {
                let Some(b) = raw(*i) else { continue };
                let value = match decode {
                    Decode::Unsigned => Value::Unsigned(be_uint(b)),
                    Decode::Float64 => Value::Float(b.first_chunk::<8>().map_or(f64::NAN, |a| f64::from_be_bytes(*a))),
                    _ => Value::Float(b.first_chunk::<4>().map_or(f64::NAN, |a| f64::from(f32::from_be_bytes(*a)))),
                };
                params.take(*ie, &value);
            }
            if let Some(n) = params.rate() {
                return Some(n);
            }
        }
        let uint = |i: Option<usize>| i.and_then(raw).map(be_uint);
        let named = match (uint(self.sampler_id), uint(self.selector_id)) {
            (Some(s), _) => Some(ctx.info.and_then(|d| d.samplers.get(&s)).and_then(|t| t.at(ctx.export_time))),
            (None, Some(s)) => Some(ctx.info.and_then(|d| d.selectors.get(&s)).and_then(|t| t.at(ctx.export_time))),
            (None, None) => None,
        };
        match named {
            Some(Some(n)) => Some(*n),
            Some(None) => {
                stats.sampling_unresolved += 1;
                None
            }
            None => match ctx.fallback_rate {
                Ok(r) => r,
                Err(()) => {
                    stats.sampling_unresolved += 1;
                    None
                }
            },
        }
    }
}
