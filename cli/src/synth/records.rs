//! Templates the synthetic exporters announce, and the fast path that
//! writes a [`Flow`] as the octets of one Data Record of such a template
//! (RFC 7011 §3.4.3), ready for `MessageEncoder::push_raw`.

use std::net::{IpAddr, Ipv4Addr, Ipv6Addr};

use ipfix_core::ie::{id, LabelStackEntry};
use ipfix_core::{FieldSpecifier, Template, TemplateId, VARIABLE_LENGTH};

use super::network::{Srv6Policy, PEN, TENANT_TAG_ID};

/// Template ID of the IPv4 flow template (PE, border).
pub(crate) const T_V4: u16 = 256;
/// Template ID of the IPv6 flow template (PE, border, metro edge).
pub(crate) const T_V6: u16 = 257;
/// Template ID of the labelled flow template (SR-MPLS core).
pub(crate) const T_MPLS: u16 = 258;
/// Template ID of the SRv6 flow template (metro).
pub(crate) const T_SRV6: u16 = 259;
/// Options Template: interface names, scoped by ingressInterface.
pub(crate) const T_IF_NAMES: u16 = 300;
/// Options Template: VRF names, scoped by ingressVRFID.
pub(crate) const T_VRF_NAMES: u16 = 301;
/// Options Template: the sampler, scoped by selectorId (RFC 5476 §6.5.2).
pub(crate) const T_SELECTOR: u16 = 302;
/// Options Template: systemInitTimeMilliseconds, scoped by observationDomainId.
pub(crate) const T_INIT_TIME: u16 = 303;

/// basicList semantic "ordered" (RFC 6313 §4.4): a segment list is a path.
const ORDERED: u8 = 0x04;

/// One field of a flow template: which value of a [`Flow`] goes there.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(crate) enum Field {
    SrcV4,
    DstV4,
    SrcV6,
    DstV6,
    Protocol,
    SrcPort,
    DstPort,
    TcpFlags,
    Tos,
    Packets,
    Octets,
    StartMs,
    EndMs,
    StartUpTime,
    EndUpTime,
    InIf,
    OutIf,
    NextHopV4,
    NextHopV6,
    BgpNextHopV4,
    BgpNextHopV6,
    NextAs,
    PrevAs,
    Vrf,
    Status,
    Selector,
    Tenant,
    LabelType,
    Label1,
    Label2,
    Label3,
    ActiveSegment,
    Behavior,
    SegmentList,
}

impl Field {
    /// The Field Specifier (RFC 7011 §3.2): IANA element and length.
    /// forwardingStatus goes in one octet, as the IANA registry asks
    /// (facts sheet §5.1); counters in 8, ports in 2.
    pub(crate) const fn spec(self) -> FieldSpecifier {
        use Field as F;
        let (ie, len) = match self {
            F::SrcV4 => (id::SOURCE_IPV4_ADDRESS, 4),
            F::DstV4 => (id::DESTINATION_IPV4_ADDRESS, 4),
            F::SrcV6 => (id::SOURCE_IPV6_ADDRESS, 16),
            F::DstV6 => (id::DESTINATION_IPV6_ADDRESS, 16),
            F::Protocol => (id::PROTOCOL_IDENTIFIER, 1),
            F::SrcPort => (id::SOURCE_TRANSPORT_PORT, 2),
            F::DstPort => (id::DESTINATION_TRANSPORT_PORT, 2),
            F::TcpFlags => (id::TCP_CONTROL_BITS, 2),
            F::Tos => (id::IP_CLASS_OF_SERVICE, 1),
            F::Packets => (id::PACKET_DELTA_COUNT, 8),
            F::Octets => (id::OCTET_DELTA_COUNT, 8),
            F::StartMs => (id::FLOW_START_MILLISECONDS, 8),
            F::EndMs => (id::FLOW_END_MILLISECONDS, 8),
            F::StartUpTime => (id::FLOW_START_SYS_UP_TIME, 4),
            F::EndUpTime => (id::FLOW_END_SYS_UP_TIME, 4),
            F::InIf => (id::INGRESS_INTERFACE, 4),
            F::OutIf => (id::EGRESS_INTERFACE, 4),
            F::NextHopV4 => (id::IP_NEXT_HOP_IPV4_ADDRESS, 4),
            F::NextHopV6 => (id::IP_NEXT_HOP_IPV6_ADDRESS, 16),
            F::BgpNextHopV4 => (id::BGP_NEXT_HOP_IPV4_ADDRESS, 4),
            F::BgpNextHopV6 => (id::BGP_NEXT_HOP_IPV6_ADDRESS, 16),
            F::NextAs => (id::BGP_NEXT_ADJACENT_AS_NUMBER, 4),
            F::PrevAs => (id::BGP_PREV_ADJACENT_AS_NUMBER, 4),
            F::Vrf => (id::INGRESS_VRFID, 4),
            F::Status => (id::FORWARDING_STATUS, 1),
            // selectorId is unsigned64; RFC 5476 §6.5.2.1's example sends it in 4.
            F::Selector => (id::SELECTOR_ID, 4),
            F::Tenant => return FieldSpecifier::enterprise(PEN, TENANT_TAG_ID, 4),
            F::LabelType => (id::MPLS_TOP_LABEL_TYPE, 1),
            F::Label1 => (id::MPLS_TOP_LABEL_STACK_SECTION, 3),
            F::Label2 => (id::MPLS_LABEL_STACK_SECTION2, 3),
            F::Label3 => (id::MPLS_LABEL_STACK_SECTION3, 3),
            F::ActiveSegment => (id::SRH_ACTIVE_SEGMENT_IPV6, 16),
            F::Behavior => (id::SRH_SEGMENT_IPV6_ENDPOINT_BEHAVIOR, 2),
            F::SegmentList => (id::SRH_SEGMENT_IPV6_BASIC_LIST, VARIABLE_LENGTH),
        };
        FieldSpecifier::iana(ie, len)
    }
}

use Field as F;

/// Fields every flow template starts with, after the addresses.
const V4: &[Field] = &[
    F::SrcV4, F::DstV4, F::Protocol, F::SrcPort, F::DstPort, F::TcpFlags, F::Tos, F::Packets, F::Octets,
    F::StartMs, F::EndMs, F::InIf, F::OutIf, F::NextHopV4, F::BgpNextHopV4, F::NextAs, F::PrevAs, F::Vrf,
    F::Status, F::Selector, F::Tenant,
];
const V6: &[Field] = &[
    F::SrcV6, F::DstV6, F::Protocol, F::SrcPort, F::DstPort, F::TcpFlags, F::Tos, F::Packets, F::Octets,
    F::StartMs, F::EndMs, F::InIf, F::OutIf, F::NextHopV6, F::BgpNextHopV6, F::NextAs, F::PrevAs, F::Vrf,
    F::Status, F::Selector, F::Tenant,
];
const MPLS: &[Field] = &[
    F::SrcV4, F::DstV4, F::Protocol, F::SrcPort, F::DstPort, F::TcpFlags, F::Tos, F::Packets, F::Octets,
    F::StartUpTime, F::EndUpTime, F::InIf, F::OutIf, F::NextHopV4, F::BgpNextHopV4, F::Status, F::Selector,
    F::LabelType, F::Label1, F::Label2, F::Label3,
];
const SRV6: &[Field] = &[
    F::SrcV6, F::DstV6, F::Protocol, F::SrcPort, F::DstPort, F::TcpFlags, F::Tos, F::Packets, F::Octets,
    F::StartMs, F::EndMs, F::InIf, F::OutIf, F::NextHopV6, F::Vrf, F::Status, F::Selector, F::Tenant,
    F::ActiveSegment, F::Behavior, F::SegmentList,
];

/// The field list of a flow template.
pub(crate) fn layout(template: u16) -> &'static [Field] {
    match template {
        T_V6 => V6,
        T_MPLS => MPLS,
        T_SRV6 => SRV6,
        _ => V4,
    }
}

/// A flow template as announced.
pub(crate) fn flow_template(template: u16) -> Template {
    Template { id: TemplateId(template), scope_field_count: 0, fields: layout(template).iter().map(|f| f.spec()).collect() }
}

/// The Options Templates (RFC 7011 §3.4.2.2); the init-time one only for
/// exporters that write sysUpTime timestamps.
pub(crate) fn options_templates(with_init_time: bool) -> Vec<Template> {
    let iana = FieldSpecifier::iana;
    let mut out = vec![
        Template {
            id: TemplateId(T_IF_NAMES),
            scope_field_count: 1,
            fields: vec![iana(id::INGRESS_INTERFACE, 4), iana(id::INTERFACE_NAME, VARIABLE_LENGTH)],
        },
        Template {
            id: TemplateId(T_VRF_NAMES),
            scope_field_count: 1,
            fields: vec![iana(id::INGRESS_VRFID, 4), iana(id::VRF_NAME, VARIABLE_LENGTH)],
        },
        // Selector Report Interpretation (RFC 5476 §6.5.2): scope selectorId,
        // then selectorAlgorithm 1 (systematic count-based) and its
        // parameters samplingPacketInterval / samplingPacketSpace (§6.5.2.1).
        Template {
            id: TemplateId(T_SELECTOR),
            scope_field_count: 1,
            fields: vec![
                iana(id::SELECTOR_ID, 4),
                iana(id::SELECTOR_ALGORITHM, 2),
                iana(id::SAMPLING_PACKET_INTERVAL, 4),
                iana(id::SAMPLING_PACKET_SPACE, 4),
                iana(id::SELECTOR_NAME, VARIABLE_LENGTH),
            ],
        },
    ];
    if with_init_time {
        out.push(Template {
            id: TemplateId(T_INIT_TIME),
            scope_field_count: 1,
            fields: vec![iana(id::OBSERVATION_DOMAIN_ID, 4), iana(id::SYSTEM_INIT_TIME_MILLISECONDS, 8)],
        });
    }
    out
}

/// One flow record before encoding. Addresses of the other family than
/// the template's are written as zeros.
#[derive(Debug, Clone, Copy)]
pub(crate) struct Flow {
    pub src: IpAddr,
    pub dst: IpAddr,
    pub protocol: u8,
    pub src_port: u16,
    pub dst_port: u16,
    pub tcp_flags: u16,
    pub tos: u8,
    /// Sampled packets and octets (what a sampling exporter reports).
    pub packets: u64,
    pub octets: u64,
    pub start_ms: u64,
    pub end_ms: u64,
    pub in_if: u32,
    pub out_if: u32,
    pub next_hop: IpAddr,
    pub bgp_next_hop: IpAddr,
    pub next_as: u32,
    pub prev_as: u32,
    pub vrf: u32,
    /// forwardingStatus, one octet (IANA codes, facts sheet §5.2).
    pub status: u8,
    pub selector: u32,
    pub tenant: u32,
    /// MPLS label stack, top first; `labels` entries used.
    pub label_stack: [u32; 3],
    pub labels: u8,
    pub label_type: u8,
    /// The SR policy (SRv6 template only).
    pub policy: Option<&'static Srv6Policy>,
}

impl Flow {
    /// An all-zero IPv4 flow.
    pub(crate) const fn empty() -> Self {
        let zero = IpAddr::V4(Ipv4Addr::UNSPECIFIED);
        Self {
            src: zero,
            dst: zero,
            protocol: 0,
            src_port: 0,
            dst_port: 0,
            tcp_flags: 0,
            tos: 0,
            packets: 0,
            octets: 0,
            start_ms: 0,
            end_ms: 0,
            in_if: 0,
            out_if: 0,
            next_hop: zero,
            bgp_next_hop: zero,
            next_as: 0,
            prev_as: 0,
            vrf: 0,
            status: 0,
            selector: 0,
            tenant: 0,
            label_stack: [0; 3],
            labels: 0,
            label_type: 0,
            policy: None,
        }
    }

    /// True when the addresses are IPv6.
    pub(crate) const fn is_v6(&self) -> bool {
        matches!(self.src, IpAddr::V6(_))
    }

    /// Label `i` (0 = top) as a 3-octet section (IEs 70-72), all zero when
    /// the stack is shorter ("no entry").
    fn section(&self, i: usize) -> [u8; 3] {
        match self.label_stack.get(i) {
            Some(label) if i < usize::from(self.labels) => LabelStackEntry {
                label: *label,
                traffic_class: 0,
                bottom_of_stack: i + 1 == usize::from(self.labels),
                ttl: None,
            }
            .to_section(),
            _ => [0; 3],
        }
    }
}

fn v4(a: IpAddr) -> [u8; 4] {
    match a {
        IpAddr::V4(a) => a.octets(),
        IpAddr::V6(_) => [0; 4],
    }
}

fn v6(a: IpAddr) -> [u8; 16] {
    match a {
        IpAddr::V6(a) => a.octets(),
        IpAddr::V4(_) => [0; 16],
    }
}

/// Milliseconds since `init_ms`, the flowStart/EndSysUpTime value (IANA
/// IEs 22/21). The 32-bit counter wraps (facts sheet §4c).
fn up_time(ms: u64, init_ms: u64) -> u32 {
    (ms.saturating_sub(init_ms) & 0xffff_ffff) as u32
}

/// Appends the Data Record of `flow` for the field list `fields` to `out`.
/// `init_ms` is the exporter's systemInitTimeMilliseconds.
pub(crate) fn encode(flow: &Flow, fields: &[Field], init_ms: u64, out: &mut Vec<u8>) {
    for field in fields {
        match field {
            F::SrcV4 => out.extend_from_slice(&v4(flow.src)),
            F::DstV4 => out.extend_from_slice(&v4(flow.dst)),
            F::SrcV6 => out.extend_from_slice(&v6(flow.src)),
            F::DstV6 => out.extend_from_slice(&v6(flow.dst)),
            F::Protocol => out.push(flow.protocol),
            F::SrcPort => out.extend_from_slice(&flow.src_port.to_be_bytes()),
            F::DstPort => out.extend_from_slice(&flow.dst_port.to_be_bytes()),
            F::TcpFlags => out.extend_from_slice(&flow.tcp_flags.to_be_bytes()),
            F::Tos => out.push(flow.tos),
            F::Packets => out.extend_from_slice(&flow.packets.to_be_bytes()),
            F::Octets => out.extend_from_slice(&flow.octets.to_be_bytes()),
            F::StartMs => out.extend_from_slice(&flow.start_ms.to_be_bytes()),
            F::EndMs => out.extend_from_slice(&flow.end_ms.to_be_bytes()),
            F::StartUpTime => out.extend_from_slice(&up_time(flow.start_ms, init_ms).to_be_bytes()),
            F::EndUpTime => out.extend_from_slice(&up_time(flow.end_ms, init_ms).to_be_bytes()),
            F::InIf => out.extend_from_slice(&flow.in_if.to_be_bytes()),
            F::OutIf => out.extend_from_slice(&flow.out_if.to_be_bytes()),
            F::NextHopV4 => out.extend_from_slice(&v4(flow.next_hop)),
            F::NextHopV6 => out.extend_from_slice(&v6(flow.next_hop)),
            F::BgpNextHopV4 => out.extend_from_slice(&v4(flow.bgp_next_hop)),
            F::BgpNextHopV6 => out.extend_from_slice(&v6(flow.bgp_next_hop)),
            F::NextAs => out.extend_from_slice(&flow.next_as.to_be_bytes()),
            F::PrevAs => out.extend_from_slice(&flow.prev_as.to_be_bytes()),
            F::Vrf => out.extend_from_slice(&flow.vrf.to_be_bytes()),
            F::Status => out.push(flow.status),
            F::Selector => out.extend_from_slice(&flow.selector.to_be_bytes()),
            F::Tenant => out.extend_from_slice(&flow.tenant.to_be_bytes()),
            F::LabelType => out.push(flow.label_type),
            F::Label1 => out.extend_from_slice(&flow.section(0)),
            F::Label2 => out.extend_from_slice(&flow.section(1)),
            F::Label3 => out.extend_from_slice(&flow.section(2)),
            F::ActiveSegment => {
                let active = flow.policy.and_then(|p| p.path.get(p.active)).copied().unwrap_or(Ipv6Addr::UNSPECIFIED);
                out.extend_from_slice(&active.octets());
            }
            F::Behavior => out.extend_from_slice(&flow.policy.map_or(0, |p| p.behavior).to_be_bytes()),
            F::SegmentList => encode_segment_list(flow.policy, out),
        }
    }
}

/// srhSegmentIPv6BasicList (IANA IE 496): a basicList (RFC 6313 §4.5.1) of
/// srhSegmentIPv6 (IE 494), 16 octets each, in SRH order: element 0 is the
/// **last** segment of the path (facts sheet §7.3). Written with the
/// 3-octet length prefix RFC 6313 §5.1 recommends.
fn encode_segment_list(policy: Option<&Srv6Policy>, out: &mut Vec<u8>) {
    let path = policy.map_or(&[][..], |p| p.path);
    // Semantic (1) + Field ID (2) + Element Length (2) + 16 per element; a
    // path has a handful of segments, far below 65535 octets.
    let len = u16::try_from(5 + 16 * path.len()).unwrap_or(5);
    out.push(0xff);
    out.extend_from_slice(&len.to_be_bytes());
    out.push(ORDERED);
    out.extend_from_slice(&id::SRH_SEGMENT_IPV6.to_be_bytes());
    out.extend_from_slice(&16u16.to_be_bytes());
    for segment in path.iter().rev() {
        out.extend_from_slice(&segment.octets());
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::synth::network::POLICIES;
    use ipfix_core::{Config, Decoder, Event, MessageEncoder, ObservationDomainId, OwnedValue, TransportSession};

    /// Every template's raw records decode to the values put in.
    #[test]
    fn raw_records_decode_back() -> Result<(), Box<dyn std::error::Error>> {
        let mut flow = Flow::empty();
        flow.src = "2001:db8:1101::10".parse()?;
        flow.dst = "2001:db8:1102::20".parse()?;
        flow.packets = 3;
        flow.octets = 4200;
        flow.start_ms = 1_795_998_600_000;
        flow.end_ms = 1_795_998_601_500;
        flow.status = 0x83;
        flow.label_stack = [16008, 24102, 0];
        flow.labels = 2;
        flow.policy = POLICIES.get(3);
        let mut encoder = MessageEncoder::new(ObservationDomainId(9));
        let mut raw = Vec::new();
        for t in [T_V4, T_V6, T_MPLS, T_SRV6] {
            encoder.add_template(flow_template(t))?;
            raw.clear();
            encode(&flow, layout(t), 1_795_000_000_000, &mut raw);
            encoder.push_raw(TemplateId(t), &raw)?;
        }
        let messages = encoder.finish(1_795_998_602);
        let mut decoder = Decoder::new(Config::default());
        let session = TransportSession::file(0);
        let mut seen = 0;
        for m in &messages {
            for event in decoder.decode(&session, None, m)? {
                if let Event::Data(set) = event {
                    for record in set.records() {
                        seen += 1;
                        assert_eq!(record.get_u64(id::FORWARDING_STATUS), Some(0x83));
                        assert_eq!(record.get_u64(id::PACKET_DELTA_COUNT), Some(3));
                        if set.plan().template().id.0 == T_MPLS {
                            let top = record.get(id::MPLS_TOP_LABEL_STACK_SECTION).map(|v| v.to_owned_value());
                            let want = LabelStackEntry { label: 16008, traffic_class: 0, bottom_of_stack: false, ttl: None };
                            assert_eq!(top, Some(OwnedValue::Octets(want.to_section().to_vec())));
                            assert_eq!(record.get_u64(id::FLOW_END_SYS_UP_TIME), Some(998_601_500));
                        }
                        if set.plan().template().id.0 == T_SRV6 {
                            let list = record.get(id::SRH_SEGMENT_IPV6_BASIC_LIST).map(|v| v.to_owned_value());
                            let Some(OwnedValue::BasicList { values, .. }) = list else {
                                return Err("no segment list".into());
                            };
                            // Element 0 is the last segment of the path.
                            let last = POLICIES.get(3).and_then(|p| p.path.last()).copied();
                            assert_eq!(values.first(), last.map(OwnedValue::Ipv6).as_ref());
                            assert_eq!(values.len(), 2);
                        }
                    }
                }
            }
        }
        assert_eq!(seen, 4);
        assert_eq!(decoder.stats().messages_malformed, 0);
        Ok(())
    }
}
