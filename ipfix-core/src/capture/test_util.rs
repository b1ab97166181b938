//! Test helpers: small container writers and frame builders.
//!
//! The pcap and pcapng writers follow the file format descriptions
//! (draft-ietf-opsawg-pcap §4-5 and draft-ietf-opsawg-pcapng §3-4; layouts
//! written from memory, unconfirmed, but every file they produce is read back
//! by `pcap-parser`, an independent implementation). Frames are built with
//! `etherparse`'s `PacketBuilder` and header writers, never by hand, except
//! the Linux cooked capture v2 header that `etherparse` lacks.
#![allow(clippy::unwrap_used, clippy::indexing_slicing, dead_code)]

use std::net::{IpAddr, SocketAddr};
use std::time::Duration;

use etherparse::{
    EtherType, Ethernet2Header, IpFragOffset, IpNumber, Ipv4Header, Ipv6FragmentHeader, Ipv6Header, PacketBuilder,
    SingleVlanHeader, TcpHeader, VlanId, VlanPcp,
};

/// Writes a classic pcap file.
pub(crate) struct PcapWriter {
    out: Vec<u8>,
    big_endian: bool,
    nanos: bool,
}

impl PcapWriter {
    /// File header: magic, version 2.4, thiszone 0, sigfigs 0, snaplen
    /// 65535, link type.
    pub(crate) fn new(linktype: u32, big_endian: bool, nanos: bool) -> Self {
        let mut w = Self { out: Vec::new(), big_endian, nanos };
        w.u32(if nanos { 0xa1b2_3c4d } else { 0xa1b2_c3d4 });
        w.u16(2);
        w.u16(4);
        w.u32(0);
        w.u32(0);
        w.u32(65535);
        w.u32(linktype);
        w
    }

    fn u16(&mut self, v: u16) {
        self.out.extend_from_slice(&if self.big_endian { v.to_be_bytes() } else { v.to_le_bytes() });
    }

    fn u32(&mut self, v: u32) {
        self.out.extend_from_slice(&if self.big_endian { v.to_be_bytes() } else { v.to_le_bytes() });
    }

    /// Record: ts seconds, ts fraction (µs or ns), captured length, original
    /// length, data.
    pub(crate) fn packet(&mut self, ts: Duration, data: &[u8], orig_len: u32) {
        self.u32(ts.as_secs() as u32);
        self.u32(if self.nanos { ts.subsec_nanos() } else { ts.subsec_micros() });
        self.u32(data.len() as u32);
        self.u32(orig_len);
        self.out.extend_from_slice(data);
    }

    pub(crate) fn finish(self) -> Vec<u8> {
        self.out
    }
}

/// Writes a pcapng file with one section.
pub(crate) struct PcapNgWriter {
    out: Vec<u8>,
    big_endian: bool,
}

impl PcapNgWriter {
    /// Section Header Block: byte-order magic 0x1a2b3c4d, version 1.0,
    /// section length -1 (unknown).
    pub(crate) fn new(big_endian: bool) -> Self {
        let mut w = Self { out: Vec::new(), big_endian };
        let mut body = Vec::new();
        w.put32(&mut body, 0x1a2b_3c4d);
        w.put16(&mut body, 1);
        w.put16(&mut body, 0);
        body.extend_from_slice(&(-1i64).to_le_bytes());
        w.block(0x0a0d_0d0a, &body);
        w
    }

    fn put16(&self, b: &mut Vec<u8>, v: u16) {
        b.extend_from_slice(&if self.big_endian { v.to_be_bytes() } else { v.to_le_bytes() });
    }

    fn put32(&self, b: &mut Vec<u8>, v: u32) {
        b.extend_from_slice(&if self.big_endian { v.to_be_bytes() } else { v.to_le_bytes() });
    }

    /// Generic block: type, total length, body padded to 32 bits, total
    /// length again.
    fn block(&mut self, kind: u32, body: &[u8]) {
        let padded = body.len().div_ceil(4) * 4;
        let total = (12 + padded) as u32;
        let mut b = Vec::new();
        self.put32(&mut b, kind);
        self.put32(&mut b, total);
        b.extend_from_slice(body);
        b.resize(8 + padded, 0);
        self.put32(&mut b, total);
        self.out.extend_from_slice(&b);
    }

    /// Interface Description Block: link type, reserved, snaplen, options
    /// (if_tsresol = code 9, one octet, padded; then opt_endofopt).
    pub(crate) fn interface(&mut self, linktype: u16, snaplen: u32, tsresol: Option<u8>) {
        let mut body = Vec::new();
        self.put16(&mut body, linktype);
        self.put16(&mut body, 0);
        self.put32(&mut body, snaplen);
        if let Some(r) = tsresol {
            self.put16(&mut body, 9);
            self.put16(&mut body, 1);
            body.extend_from_slice(&[r, 0, 0, 0]);
            self.put16(&mut body, 0);
            self.put16(&mut body, 0);
        }
        self.block(1, &body);
    }

    /// Enhanced Packet Block: interface id, timestamp high and low 32 bits
    /// (in the interface's units), captured and original length, data.
    pub(crate) fn enhanced(&mut self, if_id: u32, ts_units: u64, data: &[u8], orig_len: u32) {
        let mut body = Vec::new();
        self.put32(&mut body, if_id);
        self.put32(&mut body, (ts_units >> 32) as u32);
        self.put32(&mut body, ts_units as u32);
        self.put32(&mut body, data.len() as u32);
        self.put32(&mut body, orig_len);
        body.extend_from_slice(data);
        self.block(6, &body);
    }

    /// Simple Packet Block: original length, data.
    pub(crate) fn simple(&mut self, data: &[u8], orig_len: u32) {
        let mut body = Vec::new();
        self.put32(&mut body, orig_len);
        body.extend_from_slice(data);
        self.block(3, &body);
    }

    /// A block of a type no reader knows, e.g. to test stepping over.
    pub(crate) fn raw_block(&mut self, kind: u32, body: &[u8]) {
        self.block(kind, body);
    }

    pub(crate) fn finish(self) -> Vec<u8> {
        self.out
    }
}

/// An IPFIX Message of `len` octets (RFC 7011 §3.1 header: version 10,
/// length, export time, sequence number, observation domain 1), padded
/// with one Data Set (Set ID 256, RFC 7011 §3.3.2) when `len > 16`.
/// `len` must be 16 or at least 20.
pub(crate) fn ipfix_message(seq: u32, len: u16) -> Vec<u8> {
    assert!(len == 16 || len >= 20, "no room for a set header");
    let mut m = Vec::with_capacity(usize::from(len));
    m.extend_from_slice(&10u16.to_be_bytes());
    m.extend_from_slice(&len.to_be_bytes());
    m.extend_from_slice(&1_700_000_000u32.to_be_bytes());
    m.extend_from_slice(&seq.to_be_bytes());
    m.extend_from_slice(&1u32.to_be_bytes());
    if len > 16 {
        m.extend_from_slice(&256u16.to_be_bytes());
        m.extend_from_slice(&(len - 16).to_be_bytes());
        // Content octets avoid the pattern 00 0a so resync tests stay exact.
        m.extend((0..len - 20).map(|i| 0x41 + (i % 26) as u8));
    }
    m
}

const MAC_A: [u8; 6] = [0x02, 0, 0, 0, 0, 1];
const MAC_B: [u8; 6] = [0x02, 0, 0, 0, 0, 2];

fn v4(a: SocketAddr) -> [u8; 4] {
    match a.ip() {
        IpAddr::V4(ip) => ip.octets(),
        IpAddr::V6(_) => panic!("IPv4 expected"),
    }
}

fn v6(a: SocketAddr) -> [u8; 16] {
    match a.ip() {
        IpAddr::V6(ip) => ip.octets(),
        IpAddr::V4(_) => panic!("IPv6 expected"),
    }
}

/// Ethernet II / IPv4 or IPv6 / UDP frame.
pub(crate) fn udp_frame(src: SocketAddr, dst: SocketAddr, payload: &[u8]) -> Vec<u8> {
    let eth = PacketBuilder::ethernet2(MAC_A, MAC_B);
    let mut out = Vec::new();
    match (src.ip(), dst.ip()) {
        (IpAddr::V4(_), IpAddr::V4(_)) => {
            eth.ipv4(v4(src), v4(dst), 64).udp(src.port(), dst.port()).write(&mut out, payload).unwrap()
        }
        _ => eth.ipv6(v6(src), v6(dst), 64).udp(src.port(), dst.port()).write(&mut out, payload).unwrap(),
    }
    out
}

/// IPv4 or IPv6 / UDP packet without link layer (LINKTYPE_RAW).
pub(crate) fn udp_packet(src: SocketAddr, dst: SocketAddr, payload: &[u8]) -> Vec<u8> {
    let mut out = Vec::new();
    match (src.ip(), dst.ip()) {
        (IpAddr::V4(_), IpAddr::V4(_)) => PacketBuilder::ipv4(v4(src), v4(dst), 64)
            .udp(src.port(), dst.port())
            .write(&mut out, payload)
            .unwrap(),
        _ => PacketBuilder::ipv6(v6(src), v6(dst), 64).udp(src.port(), dst.port()).write(&mut out, payload).unwrap(),
    }
    out
}

/// TCP flags for [`tcp_frame`].
#[derive(Debug, Clone, Copy, Default)]
pub(crate) struct Flags {
    pub(crate) syn: bool,
    pub(crate) fin: bool,
    pub(crate) rst: bool,
    pub(crate) ack: bool,
}

pub(crate) const SYN: Flags = Flags { syn: true, fin: false, rst: false, ack: false };
pub(crate) const ACK: Flags = Flags { syn: false, fin: false, rst: false, ack: true };
pub(crate) const FIN: Flags = Flags { syn: false, fin: true, rst: false, ack: true };
pub(crate) const RST: Flags = Flags { syn: false, fin: false, rst: true, ack: false };

/// Ethernet II / IPv4 or IPv6 / TCP frame.
pub(crate) fn tcp_frame(src: SocketAddr, dst: SocketAddr, seq: u32, flags: Flags, payload: &[u8]) -> Vec<u8> {
    let mut tcp = TcpHeader::new(src.port(), dst.port(), seq, 65535);
    tcp.syn = flags.syn;
    tcp.fin = flags.fin;
    tcp.rst = flags.rst;
    tcp.ack = flags.ack;
    tcp.psh = !payload.is_empty();
    let eth = PacketBuilder::ethernet2(MAC_A, MAC_B);
    let mut out = Vec::new();
    match (src.ip(), dst.ip()) {
        (IpAddr::V4(_), IpAddr::V4(_)) => {
            eth.ipv4(v4(src), v4(dst), 64).tcp_header(tcp).write(&mut out, payload).unwrap()
        }
        _ => eth.ipv6(v6(src), v6(dst), 64).tcp_header(tcp).write(&mut out, payload).unwrap(),
    }
    out
}

/// Ethernet II with `tags` (TPID, VLAN id) stacked outermost first, then
/// IPv4 / UDP; built from etherparse's header writers.
pub(crate) fn tagged_udp_frame(tags: &[(u16, u16)], src: SocketAddr, dst: SocketAddr, payload: &[u8]) -> Vec<u8> {
    let inner = udp_packet(src, dst, payload);
    let first = tags.first().map_or(EtherType::IPV4, |t| EtherType(t.0));
    let mut out = Ethernet2Header { source: MAC_A, destination: MAC_B, ether_type: first }.to_bytes().to_vec();
    for (i, (_, vid)) in tags.iter().enumerate() {
        let next = tags.get(i + 1).map_or(EtherType::IPV4, |t| EtherType(t.0));
        let tag = SingleVlanHeader {
            pcp: VlanPcp::ZERO,
            drop_eligible_indicator: false,
            vlan_id: VlanId::try_new(*vid).unwrap(),
            ether_type: next,
        };
        out.extend_from_slice(&tag.to_bytes());
    }
    out.extend_from_slice(&inner);
    out
}

/// Splits a UDP datagram into IPv4 fragments (RFC 791 §2.3, §3.2: offset in
/// 8-octet units, More Fragments flag, same Identification), each in an
/// Ethernet II frame. `chunk` must be a multiple of 8.
pub(crate) fn ipv4_udp_fragments(
    src: SocketAddr,
    dst: SocketAddr,
    id: u16,
    payload: &[u8],
    chunk: usize,
) -> Vec<Vec<u8>> {
    assert_eq!(chunk % 8, 0);
    let whole = udp_packet(src, dst, payload);
    let transport = &whole[Ipv4Header::MIN_LEN..];
    let pieces: Vec<&[u8]> = transport.chunks(chunk).collect();
    let n = pieces.len();
    pieces
        .into_iter()
        .enumerate()
        .map(|(i, piece)| {
            let mut ip = Ipv4Header::new(piece.len() as u16, 64, IpNumber::UDP, v4(src), v4(dst)).unwrap();
            ip.identification = id;
            ip.more_fragments = i + 1 < n;
            ip.fragment_offset = IpFragOffset::try_new((i * chunk / 8) as u16).unwrap();
            ip.header_checksum = ip.calc_header_checksum();
            let mut out = Ethernet2Header { source: MAC_A, destination: MAC_B, ether_type: EtherType::IPV4 }
                .to_bytes()
                .to_vec();
            out.extend_from_slice(&ip.to_bytes());
            out.extend_from_slice(piece);
            out
        })
        .collect()
}

/// Splits a UDP datagram into IPv6 fragments (RFC 8200 §4.5: Fragment
/// header with offset in 8-octet units, M flag, Identification), each
/// in an Ethernet II frame. `chunk` must be a multiple of 8.
pub(crate) fn ipv6_udp_fragments(
    src: SocketAddr,
    dst: SocketAddr,
    id: u32,
    payload: &[u8],
    chunk: usize,
) -> Vec<Vec<u8>> {
    assert_eq!(chunk % 8, 0);
    let whole = udp_packet(src, dst, payload);
    let transport = &whole[Ipv6Header::LEN..];
    let pieces: Vec<&[u8]> = transport.chunks(chunk).collect();
    let n = pieces.len();
    pieces
        .into_iter()
        .enumerate()
        .map(|(i, piece)| {
            let ip = Ipv6Header {
                traffic_class: 0,
                flow_label: Default::default(),
                payload_length: (Ipv6FragmentHeader::LEN + piece.len()) as u16,
                next_header: IpNumber::IPV6_FRAGMENTATION_HEADER,
                hop_limit: 64,
                source: v6(src),
                destination: v6(dst),
            };
            let frag = Ipv6FragmentHeader::new(
                IpNumber::UDP,
                IpFragOffset::try_new((i * chunk / 8) as u16).unwrap(),
                i + 1 < n,
                id,
            );
            let mut out = Ethernet2Header { source: MAC_A, destination: MAC_B, ether_type: EtherType::IPV6 }
                .to_bytes()
                .to_vec();
            out.extend_from_slice(&ip.to_bytes());
            out.extend_from_slice(&frag.to_bytes());
            out.extend_from_slice(piece);
            out
        })
        .collect()
}

/// Linux cooked capture v1 frame built by etherparse.
pub(crate) fn sll_v1_udp_frame(src: SocketAddr, dst: SocketAddr, payload: &[u8]) -> Vec<u8> {
    let mut out = Vec::new();
    PacketBuilder::linux_sll(etherparse::LinuxSllPacketType::HOST, 6, [2, 0, 0, 0, 0, 1, 0, 0])
        .ipv4(v4(src), v4(dst), 64)
        .udp(src.port(), dst.port())
        .write(&mut out, payload)
        .unwrap();
    out
}

/// Linux cooked capture v2 frame: the 20-octet header (protocol type,
/// reserved, interface index, ARPHRD type, packet type, address length,
/// 8 address octets; from memory, unconfirmed) before an etherparse packet.
pub(crate) fn sll_v2_udp_frame(src: SocketAddr, dst: SocketAddr, payload: &[u8]) -> Vec<u8> {
    let inner = udp_packet(src, dst, payload);
    let proto: u16 = if src.is_ipv4() { 0x0800 } else { 0x86dd };
    let mut out = Vec::new();
    out.extend_from_slice(&proto.to_be_bytes());
    out.extend_from_slice(&[0, 0]);
    out.extend_from_slice(&3u32.to_be_bytes());
    out.extend_from_slice(&1u16.to_be_bytes());
    out.push(0);
    out.push(6);
    out.extend_from_slice(&[2, 0, 0, 0, 0, 1, 0, 0]);
    out.extend_from_slice(&inner);
    out
}

/// A socket address from a literal.
pub(crate) fn sa(s: &str) -> SocketAddr {
    s.parse().unwrap()
}
