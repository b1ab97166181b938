//! The fictional network behind the `regional-carrier` scenarios.
//!
//! Quillmere Networks is an invented regional carrier (private AS 65010,
//! RFC 6996). Every address is from the documentation ranges (RFC 5737:
//! 192.0.2.0/24 for loopbacks and core links, 198.51.100.0/24 for customer
//! sites, 203.0.113.0/24 for peering and the outside world; RFC 3849:
//! 2001:db8::/32 for IPv6), every peer AS is private (64512-65534) and the
//! one enterprise element uses the documentation PEN 32473 (RFC 5612).
//!
//! ```text
//!   sorrel / quince / wisteria sites          transit AS 64601, AS 64602
//!                |                            exchange: AS 64610, 64620, 64630
//!          osprey-pe1 ---- kestrel-p2 ---- egret-be4
//!                          |   ||   \
//!                          |  dunlin-p3 ---- curlew-pe8
//!                          |
//!          SRv6 metro:  plover-m5 ---- sandpiper-m6 ---- wren-m7
//! ```
//!
//! Node n has loopback 192.0.2.n, SR-MPLS prefix SID 16000+n (IS-IS SR)
//! and SRv6 locator 2001:db8:c0:n::/64. Four routers export: three over
//! IPv4, plover-m5 over IPv6.

use std::net::{IpAddr, Ipv4Addr, Ipv6Addr};

/// The carrier's own AS (RFC 6996 private range).
pub(crate) const CARRIER_AS: u32 = 65010;
/// The carrier's name, invented.
pub(crate) const CARRIER: &str = "Quillmere Networks";
/// Enterprise number for the one enterprise element (RFC 5612 documentation PEN).
pub(crate) const PEN: u32 = 32473;
/// Our enterprise element id under PEN 32473: a 4-octet customer account
/// ("tenant tag") the PE stamps on customer traffic.
pub(crate) const TENANT_TAG_ID: u16 = 1;

/// Collector addresses: one per address family.
pub(crate) const COLLECTOR_V4: IpAddr = IpAddr::V4(Ipv4Addr::new(192, 0, 2, 250));
/// IPv6 collector.
pub(crate) const COLLECTOR_V6: IpAddr = IpAddr::V6(Ipv6Addr::new(0x2001, 0xdb8, 0, 0xff, 0, 0, 0, 0xfa));
/// The IPFIX collector port (RFC 7011 §10.1: default 4739).
pub(crate) const COLLECTOR_PORT: u16 = 4739;
/// The collector's MAC (RFC 7042 documentation range 00-00-5E-00-53-xx).
pub(crate) const COLLECTOR_MAC: [u8; 6] = [0x00, 0x00, 0x5e, 0x00, 0x53, 0xfa];

/// A customer VRF: id, name, tenant tag, VPN service label.
#[derive(Debug, Clone, Copy)]
pub(crate) struct Vrf {
    pub id: u32,
    pub name: &'static str,
    pub tenant: u32,
    pub vpn_label: u32,
    /// Third octet base of the VRF's IPv4 sites in 198.51.100.0/24.
    pub site_base: u8,
}

/// The VRFs. Id 0 is the global table.
pub(crate) const VRFS: [Vrf; 5] = [
    Vrf { id: 0, name: "global", tenant: 0, vpn_label: 0, site_base: 192 },
    Vrf { id: 101, name: "sorrel-retail", tenant: 0x0000_0a11, vpn_label: 24101, site_base: 0 },
    Vrf { id: 102, name: "quince-clinics", tenant: 0x0000_0b22, vpn_label: 24102, site_base: 64 },
    Vrf { id: 103, name: "wisteria-logistics", tenant: 0x0000_0c33, vpn_label: 24103, site_base: 128 },
    Vrf { id: 900, name: "mgmt-oob", tenant: 0, vpn_label: 24900, site_base: 240 },
];

/// The VRF with this id (the global table when unknown).
pub(crate) fn vrf(id: u32) -> Vrf {
    VRFS.iter().copied().find(|v| v.id == id).unwrap_or(VRFS[0])
}

/// What an interface connects to.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(crate) enum Role {
    /// A core link toward node `node`.
    Core { node: u32 },
    /// A customer attachment in VRF `vrf`.
    Customer { vrf: u32 },
    /// A transit or exchange port; peers behind it are in [`PEERS`].
    Peering,
    /// Out-of-band management.
    Management,
}

/// One interface of an exporting router.
#[derive(Debug, Clone, Copy)]
pub(crate) struct Interface {
    /// ifIndex.
    pub index: u32,
    /// interfaceName as exported in options records.
    pub name: &'static str,
    pub role: Role,
    /// The neighbour's address on this link (the IP next hop).
    pub next_hop: IpAddr,
}

/// An external BGP neighbour of the border router.
#[derive(Debug, Clone, Copy)]
pub(crate) struct Peer {
    pub asn: u32,
    pub name: &'static str,
    pub address: Ipv4Addr,
    pub address6: Ipv6Addr,
    /// ifIndex on egret-be4.
    pub interface: u32,
    /// Share of outside traffic toward this peer.
    pub weight: f64,
}

/// The peers of egret-be4, private AS numbers only.
pub(crate) const PEERS: [Peer; 5] = [
    Peer { asn: 64601, name: "transit-a", address: Ipv4Addr::new(203, 0, 113, 1), address6: v6(0xe0, 0x1, 1), interface: 5, weight: 0.34 },
    Peer { asn: 64602, name: "transit-b", address: Ipv4Addr::new(203, 0, 113, 5), address6: v6(0xe0, 0x5, 1), interface: 6, weight: 0.26 },
    Peer { asn: 64610, name: "exchange-peer-marram", address: Ipv4Addr::new(203, 0, 113, 65), address6: v6(0xe0, 0x40, 0x65), interface: 7, weight: 0.12 },
    Peer { asn: 64620, name: "exchange-peer-saltwort", address: Ipv4Addr::new(203, 0, 113, 66), address6: v6(0xe0, 0x40, 0x66), interface: 7, weight: 0.18 },
    Peer { asn: 64630, name: "exchange-peer-glasswort", address: Ipv4Addr::new(203, 0, 113, 67), address6: v6(0xe0, 0x40, 0x67), interface: 7, weight: 0.10 },
];

/// 2001:db8:`c`:`d`::`h`.
const fn v6(c: u16, d: u16, h: u16) -> Ipv6Addr {
    Ipv6Addr::new(0x2001, 0xdb8, c, d, 0, 0, 0, h)
}

const fn a4(a: u8, b: u8, c: u8, d: u8) -> IpAddr {
    IpAddr::V4(Ipv4Addr::new(a, b, c, d))
}

const fn a6(c: u16, d: u16, h: u16) -> IpAddr {
    IpAddr::V6(v6(c, d, h))
}

/// The loopback of node `n` (192.0.2.n).
pub(crate) const fn loopback(n: u32) -> Ipv4Addr {
    Ipv4Addr::new(192, 0, 2, (n & 0xff) as u8)
}

/// SR-MPLS prefix SID of node `n` (SRGB starting at 16000).
pub(crate) const fn prefix_sid(n: u32) -> u32 {
    16000 + n
}

/// SRv6 SID `func` in node `n`'s locator 2001:db8:c0:n::/64.
pub(crate) const fn srv6_sid(n: u16, func: u16) -> Ipv6Addr {
    Ipv6Addr::new(0x2001, 0xdb8, 0xc0, n, 0, 0, 0, func)
}

/// SRv6 endpoint behaviours used here (IANA "SRv6 Endpoint Behaviors",
/// facts sheet §7.1).
pub(crate) mod behavior {
    /// End.X.
    pub(crate) const END_X: u16 = 5;
    /// End.DT6.
    pub(crate) const END_DT6: u16 = 18;
    /// End.DT4.
    pub(crate) const END_DT4: u16 = 19;
    /// End.DT46.
    pub(crate) const END_DT46: u16 = 20;
}

/// An SR policy over the SRv6 metro, as seen on plover-m5.
#[derive(Debug, Clone, Copy)]
pub(crate) struct Srv6Policy {
    pub name: &'static str,
    /// Segments in travel order (first visited first).
    pub path: &'static [Ipv6Addr],
    /// Index in `path` of the segment active when the packet reaches plover-m5.
    pub active: usize,
    /// Behaviour of the active segment.
    pub behavior: u16,
    /// VRF the policy carries.
    pub vrf: u32,
    /// ifIndex the traffic arrives on and leaves by (0 when it ends here).
    pub in_if: u32,
    pub out_if: u32,
    /// Share of the SRv6 domain's traffic.
    pub weight: f64,
}

const SANDPIPER_END: Ipv6Addr = srv6_sid(6, 0x1);
const SANDPIPER_DT6: Ipv6Addr = srv6_sid(6, 0xd6);
const PLOVER_END_X_WREN: Ipv6Addr = srv6_sid(5, 0xe7);
const PLOVER_DT4: Ipv6Addr = srv6_sid(5, 0xd4);
const PLOVER_DT46: Ipv6Addr = srv6_sid(5, 0xd46);
const WREN_END: Ipv6Addr = srv6_sid(7, 0x1);
const WREN_DT46: Ipv6Addr = srv6_sid(7, 0xd46);

/// Index in [`POLICIES`] of the policy whose last segment loses its
/// behaviour on plover-m5 in the `srv6-missing-behavior` episode.
pub(crate) const QUINCE_METRO_POLICY: usize = 3;

/// The SR policies through plover-m5.
pub(crate) const POLICIES: [Srv6Policy; 5] = [
    Srv6Policy { name: "sorrel-metro-west", path: &[SANDPIPER_END, PLOVER_END_X_WREN, WREN_DT46], active: 1, behavior: behavior::END_X, vrf: 101, in_if: 2, out_if: 3, weight: 0.30 },
    Srv6Policy { name: "wisteria-metro", path: &[WREN_END, SANDPIPER_DT6], active: 1, behavior: behavior::END_DT6, vrf: 103, in_if: 1, out_if: 2, weight: 0.20 },
    Srv6Policy { name: "sorrel-metro-home", path: &[SANDPIPER_END, PLOVER_DT4], active: 1, behavior: behavior::END_DT4, vrf: 101, in_if: 2, out_if: 5, weight: 0.22 },
    Srv6Policy { name: "quince-metro", path: &[SANDPIPER_END, PLOVER_DT46], active: 1, behavior: behavior::END_DT46, vrf: 102, in_if: 2, out_if: 4, weight: 0.18 },
    Srv6Policy { name: "core-to-wren", path: &[PLOVER_END_X_WREN, WREN_END], active: 0, behavior: behavior::END_X, vrf: 0, in_if: 1, out_if: 3, weight: 0.10 },
];

/// What kind of traffic an Observation Domain meters.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(crate) enum DomainKind {
    /// A PE line card: customer interfaces of the card toward the core and back.
    PeCard { card: u32 },
    /// The SR-MPLS core router: labelled transit.
    Core,
    /// The peering edge.
    Border,
    /// The SRv6 metro: SR policies (records carry the SRH elements).
    Srv6,
    /// Plain IPv6 customer edge of the metro node.
    MetroEdge,
}

/// One Observation Domain of an exporter.
#[derive(Debug, Clone, Copy)]
pub(crate) struct DomainSpec {
    /// Observation Domain ID, unique over all exporters (so RFC 5655 files,
    /// which carry no exporter address, keep them apart).
    pub id: u32,
    pub kind: DomainKind,
    /// Share of all flow records.
    pub weight: f64,
    pub description: &'static str,
}

/// How an exporter writes flow times.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(crate) enum TimeStyle {
    /// flowStartMilliseconds / flowEndMilliseconds (IEs 152/153).
    Milliseconds,
    /// flowStartSysUpTime / flowEndSysUpTime (IEs 22/21) with
    /// systemInitTimeMilliseconds (IE 160) in an options record.
    SysUpTime,
}

/// An exporting router.
#[derive(Debug, Clone, Copy)]
pub(crate) struct Exporter {
    pub name: &'static str,
    pub role: &'static str,
    /// Node index (loopback 192.0.2.n, prefix SID 16000+n).
    pub node: u32,
    /// Export source address (IPv4 or IPv6) and UDP port.
    pub address: IpAddr,
    pub port: u16,
    pub mac: [u8; 6],
    /// 1-in-N packet sampling (selectorAlgorithm 1, RFC 5476 §6.5.2.1).
    pub sampling: u32,
    /// selectorId of the sampler (RFC 5477 §8.2.1).
    pub selector: u32,
    pub times: TimeStyle,
    /// How long the router had been up when the capture starts (ms), for
    /// sysUpTime timestamps.
    pub uptime_ms: u64,
    pub interfaces: &'static [Interface],
    pub domains: &'static [DomainSpec],
}

impl Exporter {
    /// The interface with ifIndex `index`.
    pub(crate) fn interface(&self, index: u32) -> Option<&Interface> {
        self.interfaces.iter().find(|i| i.index == index)
    }

    /// The collector this exporter sends to (same address family).
    pub(crate) const fn collector(&self) -> IpAddr {
        match self.address {
            IpAddr::V4(_) => COLLECTOR_V4,
            IpAddr::V6(_) => COLLECTOR_V6,
        }
    }
}

/// osprey-pe1 ifIndex of the customer port the policer episode hits.
pub(crate) const OSPREY_QUINCE_B: u32 = 24;
/// kestrel-p2 ifIndex of the core link drained in the maintenance window.
pub(crate) const KESTREL_TO_DUNLIN_A: u32 = 2;
/// kestrel-p2 ifIndex of the parallel link that takes over.
pub(crate) const KESTREL_TO_DUNLIN_B: u32 = 5;

/// The four exporting routers.
pub(crate) const EXPORTERS: [Exporter; 4] = [
    Exporter {
        name: "osprey-pe1",
        role: "provider edge: customer VRFs on two line cards",
        node: 1,
        address: a4(192, 0, 2, 1),
        port: 50001,
        mac: [0x00, 0x00, 0x5e, 0x00, 0x53, 0x01],
        sampling: 1000,
        selector: 11,
        times: TimeStyle::Milliseconds,
        uptime_ms: 0,
        interfaces: &[
            Interface { index: 11, name: "1/1:core-kestrel-p2", role: Role::Core { node: 2 }, next_hop: a4(192, 0, 2, 129) },
            Interface { index: 12, name: "1/2:core-dunlin-p3", role: Role::Core { node: 3 }, next_hop: a4(192, 0, 2, 145) },
            Interface { index: 13, name: "1/3:cust-sorrel-a", role: Role::Customer { vrf: 101 }, next_hop: a4(198, 51, 100, 1) },
            Interface { index: 14, name: "1/4:cust-wisteria-a", role: Role::Customer { vrf: 103 }, next_hop: a4(198, 51, 100, 129) },
            Interface { index: 21, name: "2/1:cust-sorrel-b", role: Role::Customer { vrf: 101 }, next_hop: a4(198, 51, 100, 33) },
            Interface { index: 22, name: "2/2:cust-quince-a", role: Role::Customer { vrf: 102 }, next_hop: a4(198, 51, 100, 65) },
            Interface { index: OSPREY_QUINCE_B, name: "2/4:cust-quince-b", role: Role::Customer { vrf: 102 }, next_hop: a4(198, 51, 100, 97) },
            Interface { index: 25, name: "2/5:mgmt-oob", role: Role::Management, next_hop: a4(198, 51, 100, 241) },
        ],
        domains: &[
            DomainSpec { id: 1101, kind: DomainKind::PeCard { card: 1 }, weight: 0.18, description: "line card 1 (sorrel-a, wisteria-a)" },
            DomainSpec { id: 1102, kind: DomainKind::PeCard { card: 2 }, weight: 0.16, description: "line card 2 (sorrel-b, quince-a, quince-b, mgmt), swapped in the window" },
        ],
    },
    Exporter {
        name: "kestrel-p2",
        role: "SR-MPLS core router",
        node: 2,
        address: a4(192, 0, 2, 2),
        port: 50002,
        mac: [0x00, 0x00, 0x5e, 0x00, 0x53, 0x02],
        sampling: 1000,
        selector: 12,
        times: TimeStyle::SysUpTime,
        // 17 days, 6 hours, 11 minutes: well inside the 49.7-day wrap of
        // the 32-bit millisecond counters.
        uptime_ms: ((17 * 24 + 6) * 60 + 11) * 60_000,
        interfaces: &[
            Interface { index: 1, name: "0/1:core-osprey-pe1", role: Role::Core { node: 1 }, next_hop: a4(192, 0, 2, 128) },
            Interface { index: KESTREL_TO_DUNLIN_A, name: "0/2:core-dunlin-p3-a", role: Role::Core { node: 3 }, next_hop: a4(192, 0, 2, 131) },
            Interface { index: 3, name: "0/3:core-egret-be4", role: Role::Core { node: 4 }, next_hop: a4(192, 0, 2, 135) },
            Interface { index: 4, name: "0/4:metro-plover-m5", role: Role::Core { node: 5 }, next_hop: a4(192, 0, 2, 139) },
            Interface { index: KESTREL_TO_DUNLIN_B, name: "0/5:core-dunlin-p3-b", role: Role::Core { node: 3 }, next_hop: a4(192, 0, 2, 143) },
        ],
        domains: &[DomainSpec { id: 1201, kind: DomainKind::Core, weight: 0.26, description: "all ports (labelled transit)" }],
    },
    Exporter {
        name: "egret-be4",
        role: "peering edge: two transits and an exchange LAN",
        node: 4,
        address: a4(192, 0, 2, 4),
        port: 50004,
        mac: [0x00, 0x00, 0x5e, 0x00, 0x53, 0x04],
        sampling: 1000,
        selector: 14,
        times: TimeStyle::Milliseconds,
        uptime_ms: 0,
        interfaces: &[
            Interface { index: 1, name: "0/1:core-kestrel-p2", role: Role::Core { node: 2 }, next_hop: a4(192, 0, 2, 134) },
            Interface { index: 2, name: "0/2:core-dunlin-p3", role: Role::Core { node: 3 }, next_hop: a4(192, 0, 2, 147) },
            Interface { index: 5, name: "1/1:transit-as64601", role: Role::Peering, next_hop: a4(203, 0, 113, 1) },
            Interface { index: 6, name: "1/2:transit-as64602", role: Role::Peering, next_hop: a4(203, 0, 113, 5) },
            Interface { index: 7, name: "1/3:exchange-lan", role: Role::Peering, next_hop: a4(203, 0, 113, 64) },
        ],
        domains: &[DomainSpec { id: 1401, kind: DomainKind::Border, weight: 0.18, description: "all ports" }],
    },
    Exporter {
        name: "plover-m5",
        role: "SRv6 metro node (exports over IPv6)",
        node: 5,
        address: a6(0, 0xff, 5),
        port: 50005,
        mac: [0x00, 0x00, 0x5e, 0x00, 0x53, 0x05],
        sampling: 500,
        selector: 15,
        times: TimeStyle::Milliseconds,
        uptime_ms: 0,
        interfaces: &[
            Interface { index: 1, name: "0/1:core-kestrel-p2", role: Role::Core { node: 2 }, next_hop: a6(0xa25, 0, 2) },
            Interface { index: 2, name: "0/2:metro-sandpiper-m6", role: Role::Core { node: 6 }, next_hop: a6(0xa56, 0, 6) },
            Interface { index: 3, name: "0/3:metro-wren-m7", role: Role::Core { node: 7 }, next_hop: a6(0xa57, 0, 7) },
            Interface { index: 4, name: "0/4:cust-quince-c", role: Role::Customer { vrf: 102 }, next_hop: a6(0x1102, 0xc, 1) },
            Interface { index: 5, name: "0/5:cust-sorrel-c", role: Role::Customer { vrf: 101 }, next_hop: a6(0x1101, 0xc, 1) },
        ],
        domains: &[
            DomainSpec { id: 1501, kind: DomainKind::Srv6, weight: 0.12, description: "SRv6 policies (segment routing header elements)" },
            DomainSpec { id: 1502, kind: DomainKind::MetroEdge, weight: 0.10, description: "IPv6 customer edge" },
        ],
    },
];

/// Non-exporting nodes, for the story and the label/SID plan.
pub(crate) const OTHER_NODES: [(u32, &str, &str); 4] = [
    (3, "dunlin-p3", "SR-MPLS core router (does not export)"),
    (6, "sandpiper-m6", "SRv6 metro node (does not export)"),
    (7, "wren-m7", "SRv6 metro node (does not export)"),
    (8, "curlew-pe8", "remote provider edge (does not export)"),
];

/// IS-IS Segment Routing (IANA "IPFIX MPLS label type", facts sheet §6.1).
pub(crate) const LABEL_TYPE_ISIS_SR: u8 = 9;
