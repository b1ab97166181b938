//! Link layers: from a captured frame to the IP packet it carries.
//!
//! Header parsing is `etherparse`'s (Ethernet II, 802.1Q tags, Linux cooked
//! capture v1); only Linux cooked capture v2 and the 4-octet BSD loopback
//! header, which `etherparse` does not know, are read here.

use etherparse::{EtherType, Ethernet2Slice, LinuxSllProtocolType, LinuxSllSlice, SingleVlanSlice};

use super::stats::SkipReason;

// LINKTYPE_ values (tcpdump.org link-layer header type registry; from
// memory, unconfirmed).
/// BSD loopback: 4-octet host-order address family, then IP.
pub(crate) const LINKTYPE_NULL: u32 = 0;
/// Ethernet II (with optional 802.1Q tags).
pub(crate) const LINKTYPE_ETHERNET: u32 = 1;
/// Raw IP as some systems number DLT_RAW.
pub(crate) const LINKTYPE_RAW_12: u32 = 12;
/// Raw IP as OpenBSD numbers DLT_RAW.
pub(crate) const LINKTYPE_RAW_14: u32 = 14;
/// Raw IPv4 or IPv6, told apart by the version nibble.
pub(crate) const LINKTYPE_RAW: u32 = 101;
/// OpenBSD loopback: like NULL but the family is in network order.
pub(crate) const LINKTYPE_LOOP: u32 = 108;
/// Linux cooked capture v1 (16-octet header).
pub(crate) const LINKTYPE_LINUX_SLL: u32 = 113;
/// Raw IPv4 only.
pub(crate) const LINKTYPE_IPV4: u32 = 228;
/// Raw IPv6 only.
pub(crate) const LINKTYPE_IPV6: u32 = 229;
/// Linux cooked capture v2 (20-octet header).
pub(crate) const LINKTYPE_LINUX_SLL2: u32 = 276;

/// Stacked VLAN tags followed before giving up (QinQ is two).
const MAX_VLAN_TAGS: usize = 8;
/// Linux cooked capture v2 header length; its first two octets are the
/// protocol type (an EtherType) (from memory, unconfirmed).
const SLL2_HEADER_LEN: usize = 20;
/// BSD loopback header length.
const NULL_HEADER_LEN: usize = 4;

/// Returns the IP packet inside `frame`, or why there is none.
pub(crate) fn ip_packet(linktype: u32, frame: &[u8]) -> Result<&[u8], SkipReason> {
    match linktype {
        LINKTYPE_ETHERNET => {
            let eth = Ethernet2Slice::from_slice_without_fcs(frame).map_err(|_| SkipReason::BadLinkHeader)?;
            after_ether_type(eth.ether_type(), eth.payload_slice())
        }
        LINKTYPE_LINUX_SLL => {
            let sll = LinuxSllSlice::from_slice(frame).map_err(|_| SkipReason::BadLinkHeader)?;
            match sll.protocol_type() {
                LinuxSllProtocolType::EtherType(et) => after_ether_type(et, sll.payload_slice()),
                _ => Err(SkipReason::NotIp),
            }
        }
        LINKTYPE_LINUX_SLL2 => {
            let (proto, rest) = match (frame.first_chunk::<2>(), frame.get(SLL2_HEADER_LEN..)) {
                (Some(p), Some(rest)) => (u16::from_be_bytes(*p), rest),
                _ => return Err(SkipReason::BadLinkHeader),
            };
            after_ether_type(EtherType(proto), rest)
        }
        LINKTYPE_RAW | LINKTYPE_RAW_12 | LINKTYPE_RAW_14 => by_version(frame, true, true),
        LINKTYPE_IPV4 => by_version(frame, true, false),
        LINKTYPE_IPV6 => by_version(frame, false, true),
        LINKTYPE_NULL | LINKTYPE_LOOP => {
            // The address family's encoding differs by host; the IP version
            // nibble tells the packet apart just as well.
            let rest = frame.get(NULL_HEADER_LEN..).ok_or(SkipReason::BadLinkHeader)?;
            by_version(rest, true, true)
        }
        _ => Err(SkipReason::UnsupportedLinkType),
    }
}

/// Follows 802.1Q (0x8100), 802.1ad (0x88a8) and the older 0x9100 tags, then
/// accepts IPv4 (0x0800) and IPv6 (0x86dd).
fn after_ether_type(mut ether_type: EtherType, mut rest: &[u8]) -> Result<&[u8], SkipReason> {
    for _ in 0..MAX_VLAN_TAGS {
        match ether_type {
            EtherType::VLAN_TAGGED_FRAME | EtherType::PROVIDER_BRIDGING | EtherType::VLAN_DOUBLE_TAGGED_FRAME => {
                let tag = SingleVlanSlice::from_slice(rest).map_err(|_| SkipReason::BadLinkHeader)?;
                ether_type = tag.ether_type();
                rest = tag.payload_slice();
            }
            EtherType::IPV4 | EtherType::IPV6 => return Ok(rest),
            _ => return Err(SkipReason::NotIp),
        }
    }
    Err(SkipReason::NotIp)
}

/// Raw IP: the version nibble (RFC 791 §3.1, RFC 8200 §3) must be allowed.
fn by_version(packet: &[u8], v4: bool, v6: bool) -> Result<&[u8], SkipReason> {
    match packet.first().map(|b| b >> 4) {
        Some(4) if v4 => Ok(packet),
        Some(6) if v6 => Ok(packet),
        Some(_) => Err(SkipReason::NotIp),
        None => Err(SkipReason::BadLinkHeader),
    }
}

#[cfg(test)]
#[allow(clippy::indexing_slicing, clippy::unwrap_used)]
mod tests {
    use super::*;
    use crate::capture::test_util::*;

    const PAYLOAD: &[u8] = b"payload";

    fn ip_of(linktype: u32, frame: &[u8]) -> Result<Vec<u8>, SkipReason> {
        ip_packet(linktype, frame).map(<[u8]>::to_vec)
    }

    #[test]
    fn ethernet_single_and_stacked_tags() {
        let (s, d) = (sa("192.0.2.1:1000"), sa("198.51.100.2:4739"));
        let want = udp_packet(s, d, PAYLOAD);
        // IEEE 802.1Q C-tag, 802.1ad S-tag + C-tag (QinQ), legacy 0x9100.
        for tags in [
            vec![],
            vec![(0x8100, 10)],
            vec![(0x88a8, 100), (0x8100, 10)],
            vec![(0x9100, 100), (0x8100, 10)],
        ] {
            let frame = tagged_udp_frame(&tags, s, d, PAYLOAD);
            assert_eq!(ip_of(LINKTYPE_ETHERNET, &frame), Ok(want.clone()), "{tags:?}");
        }
        // etherparse's own QinQ writer (outer 0x88a8, inner 0x8100).
        let mut frame = Vec::new();
        etherparse::PacketBuilder::ethernet2([2, 0, 0, 0, 0, 1], [2, 0, 0, 0, 0, 2])
            .double_vlan(etherparse::VlanId::try_new(5).expect("vid"), etherparse::VlanId::try_new(6).expect("vid"))
            .ipv4([192, 0, 2, 1], [198, 51, 100, 2], 64)
            .udp(1000, 4739)
            .write(&mut frame, PAYLOAD)
            .expect("write");
        assert_eq!(ip_of(LINKTYPE_ETHERNET, &frame), Ok(want));
    }

    #[test]
    fn cooked_captures_and_raw() {
        let (s, d) = (sa("203.0.113.9:2055"), sa("192.0.2.7:4739"));
        let want = udp_packet(s, d, PAYLOAD);
        assert_eq!(ip_of(LINKTYPE_LINUX_SLL, &sll_v1_udp_frame(s, d, PAYLOAD)), Ok(want.clone()));
        assert_eq!(ip_of(LINKTYPE_LINUX_SLL2, &sll_v2_udp_frame(s, d, PAYLOAD)), Ok(want.clone()));
        for lt in [LINKTYPE_RAW, LINKTYPE_RAW_12, LINKTYPE_RAW_14, LINKTYPE_IPV4] {
            assert_eq!(ip_of(lt, &want), Ok(want.clone()));
        }
        assert_eq!(ip_of(LINKTYPE_IPV6, &want), Err(SkipReason::NotIp));
        let v6 = udp_packet(sa("[2001:db8::1]:1"), sa("[2001:db8::2]:4739"), PAYLOAD);
        assert_eq!(ip_of(LINKTYPE_RAW, &v6), Ok(v6.clone()));
        let mut null = vec![2, 0, 0, 0];
        null.extend_from_slice(&want);
        assert_eq!(ip_of(LINKTYPE_NULL, &null), Ok(want));
    }

    #[test]
    fn refusals_carry_reasons() {
        assert_eq!(ip_of(LINKTYPE_ETHERNET, &[0; 5]), Err(SkipReason::BadLinkHeader));
        let mut arp = vec![0u8; 12];
        arp.extend_from_slice(&[0x08, 0x06]);
        arp.extend_from_slice(&[0; 28]);
        assert_eq!(ip_of(LINKTYPE_ETHERNET, &arp), Err(SkipReason::NotIp));
        assert_eq!(ip_of(147, &[0; 40]), Err(SkipReason::UnsupportedLinkType));
        assert_eq!(ip_of(LINKTYPE_LINUX_SLL2, &[0x08, 0x00]), Err(SkipReason::BadLinkHeader));
        assert_eq!(ip_of(LINKTYPE_RAW, &[]), Err(SkipReason::BadLinkHeader));
    }
}
