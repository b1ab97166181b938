//! IPv4 and IPv6: header parsing (`etherparse`) and bounded fragment
//! reassembly built on `etherparse`'s `IpDefragBuf`.
//!
//! `etherparse`'s own pool is not bounded ("NOT safe against Out of Memory
//! attacks", its docs say), so the bookkeeping is done here: every datagram
//! under reassembly is charged its buffer size plus a fixed overhead against
//! [`CaptureOptions::max_reassembly_bytes`](super::CaptureOptions::max_reassembly_bytes);
//! when the budget is full the oldest datagrams are dropped. Datagrams older
//! than [`CaptureOptions::fragment_timeout`](super::CaptureOptions::fragment_timeout),
//! measured on capture timestamps, expire.

use std::borrow::Cow;
use std::collections::{BTreeMap, HashMap};
use std::net::IpAddr;
use std::time::Duration;

use etherparse::defrag::IpDefragBuf;
use etherparse::{IpFragOffset, IpNumber, IpSlice, Ipv6ExtensionSlice, Ipv6ExtensionsSlice, Ipv6Header};

use super::stats::{CaptureStats, SkipReason};

/// Memory charged per datagram under reassembly on top of its buffer, so
/// that many tiny fragments cannot hide behind a byte budget.
const ENTRY_OVERHEAD: usize = 128;
/// Largest reassembled IP payload: the 16-bit Total Length / fragment offset
/// arithmetic caps it (RFC 791 §3.1, RFC 8200 §4.5).
const MAX_DATAGRAM: usize = 65_535;

/// An IP payload ready for the transport layer.
#[derive(Debug, Clone, PartialEq, Eq)]
pub(crate) struct Datagram<'a> {
    pub(crate) src: IpAddr,
    pub(crate) dst: IpAddr,
    pub(crate) protocol: IpNumber,
    pub(crate) payload: Cow<'a, [u8]>,
}

/// Identifies the datagram a fragment belongs to: source, destination,
/// protocol and identification for IPv4 (RFC 791 §3.2; from memory,
/// unconfirmed), source, destination and identification for IPv6
/// (RFC 8200 §4.5), plus the capture interface.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub(crate) struct FragKey {
    interface: u32,
    src: IpAddr,
    dst: IpAddr,
    id: u32,
    protocol: u8,
}

/// One fragment, borrowed from the packet.
#[derive(Debug, Clone, Copy)]
pub(crate) struct Fragment<'a> {
    key: FragKey,
    offset: IpFragOffset,
    more: bool,
    data: &'a [u8],
}

/// What the IP layer made of a packet.
#[derive(Debug)]
pub(crate) enum Network<'a> {
    /// An unfragmented packet.
    Whole(Datagram<'a>),
    /// One fragment of a larger datagram.
    Fragment(Fragment<'a>),
}

/// Parses an IPv4 or IPv6 packet; `cut` says the capture stored less than
/// the packet had (so a length shortfall is the capture's doing).
pub(crate) fn parse(interface: u32, packet: &[u8], cut: bool) -> Result<Network<'_>, SkipReason> {
    let ip = IpSlice::from_slice(packet).map_err(|e| match e {
        etherparse::err::ip::SliceError::Len(_) if cut => SkipReason::CutBySnaplen,
        etherparse::err::ip::SliceError::Len(_) => SkipReason::IpTruncated,
        etherparse::err::ip::SliceError::IpHeaders(_) => SkipReason::BadIpHeader,
    })?;
    let (src, dst) = (ip.source_addr(), ip.destination_addr());
    let payload = ip.payload();
    if !payload.fragmented {
        return Ok(Network::Whole(Datagram { src, dst, protocol: payload.ip_number, payload: Cow::Borrowed(payload.payload) }));
    }
    match &ip {
        IpSlice::Ipv4(v4) => {
            let h = v4.header();
            // The fragmentable part is everything after the IPv4 header up to
            // Total Length (RFC 791 §3.2), authentication header included.
            let data = packet.get(h.slice().len()..usize::from(h.total_len())).ok_or(SkipReason::IpTruncated)?;
            let key = FragKey { interface, src, dst, id: u32::from(h.identification()), protocol: h.protocol().0 };
            Ok(Network::Fragment(Fragment { key, offset: h.fragments_offset(), more: h.more_fragments(), data }))
        }
        IpSlice::Ipv6(v6) => {
            // RFC 8200 §4.5: the fragmentable part starts right after the
            // Fragment header; find it by summing the headers before it.
            let mut before = 0usize;
            let mut frag = None;
            for ext in v6.extensions().clone() {
                match ext {
                    Ipv6ExtensionSlice::Fragment(f) => {
                        frag = Some(f);
                        break;
                    }
                    Ipv6ExtensionSlice::HopByHop(s)
                    | Ipv6ExtensionSlice::Routing(s)
                    | Ipv6ExtensionSlice::DestinationOptions(s) => before += s.slice().len(),
                    Ipv6ExtensionSlice::Authentication(s) => before += s.slice().len(),
                }
            }
            let frag = frag.ok_or(SkipReason::BadIpHeader)?;
            let start = Ipv6Header::LEN + before + frag.slice().len();
            let declared = usize::from(v6.header().payload_length());
            let end = if declared == 0 { packet.len() } else { Ipv6Header::LEN + declared };
            let data = packet.get(start..end).ok_or(SkipReason::IpTruncated)?;
            let key = FragKey { interface, src, dst, id: frag.identification(), protocol: frag.next_header().0 };
            Ok(Network::Fragment(Fragment { key, offset: frag.fragment_offset(), more: frag.more_fragments(), data }))
        }
    }
}

/// A datagram under reassembly.
#[derive(Debug)]
struct Pending {
    buf: IpDefragBuf,
    /// Capture time of its first fragment, and arrival order: the key in
    /// `Defragmenter::order`.
    since: (Duration, u64),
    fragments: u64,
    charged: usize,
}

/// Bounded IP fragment reassembly keyed by [`FragKey`].
#[derive(Debug)]
pub(crate) struct Defragmenter {
    active: HashMap<FragKey, Pending>,
    /// Oldest first, for timeouts and eviction.
    order: BTreeMap<(Duration, u64), FragKey>,
    charged: usize,
    limit: usize,
    timeout: Duration,
    arrivals: u64,
}

impl Defragmenter {
    pub(crate) fn new(limit: usize, timeout: Duration) -> Self {
        Self {
            active: HashMap::new(),
            order: BTreeMap::new(),
            charged: 0,
            limit,
            timeout,
            arrivals: 0,
        }
    }

    /// Datagrams under reassembly.
    #[cfg(test)]
    pub(crate) fn pending(&self) -> usize {
        self.active.len()
    }

    /// Drops datagrams whose first fragment is older than the timeout.
    pub(crate) fn expire(&mut self, now: Duration, stats: &mut CaptureStats) {
        while let Some((&(since, n), _)) = self.order.first_key_value() {
            if now.saturating_sub(since) <= self.timeout {
                break;
            }
            if let Some(p) = self.remove((since, n)) {
                stats.fragments_expired += p.fragments;
                stats.skip_n(SkipReason::FragmentExpired, p.fragments);
            }
        }
    }

    /// Counts every datagram still incomplete (end of capture).
    pub(crate) fn finish(&mut self, stats: &mut CaptureStats) {
        for (_, p) in self.active.drain() {
            stats.skip_n(SkipReason::FragmentIncomplete, p.fragments);
        }
        self.order.clear();
        self.charged = 0;
    }

    fn remove(&mut self, since: (Duration, u64)) -> Option<Pending> {
        let key = self.order.remove(&since)?;
        let p = self.active.remove(&key)?;
        self.charged = self.charged.saturating_sub(p.charged);
        Some(p)
    }

    /// Adds a fragment; returns the datagram when it is complete.
    pub(crate) fn add(&mut self, frag: Fragment<'_>, now: Duration, stats: &mut CaptureStats) -> Option<Datagram<'static>> {
        self.expire(now, stats);
        let end = usize::from(frag.offset.byte_offset()).saturating_add(frag.data.len());
        if end > MAX_DATAGRAM {
            self.drop_datagram(frag.key, 1, SkipReason::FragmentInvalid, stats);
            return None;
        }
        // Make room: what this datagram will be charged after the fragment.
        let current = self.active.get(&frag.key).map_or(0, |p| p.charged);
        let buffered = self.active.get(&frag.key).map_or(0, |p| p.buf.data().len());
        let wanted = ENTRY_OVERHEAD + buffered.max(end);
        while self.charged.saturating_sub(current) + wanted > self.limit {
            let oldest = self.order.iter().map(|(k, v)| (*k, *v)).find(|(_, key)| *key != frag.key);
            let Some((since, _)) = oldest else { break };
            if let Some(p) = self.remove(since) {
                stats.skip_n(SkipReason::FragmentEvicted, p.fragments);
            }
        }
        if self.charged.saturating_sub(current) + wanted > self.limit {
            // This datagram alone is larger than the whole budget.
            self.drop_datagram(frag.key, 1, SkipReason::FragmentEvicted, stats);
            return None;
        }
        if !self.active.contains_key(&frag.key) {
            self.arrivals += 1;
            let since = (now, self.arrivals);
            self.order.insert(since, frag.key);
            let buf = IpDefragBuf::new(IpNumber(frag.key.protocol), Vec::new(), Vec::new());
            self.active.insert(frag.key, Pending { buf, since, fragments: 0, charged: 0 });
        }
        let pending = self.active.get_mut(&frag.key)?;
        if pending.buf.add(frag.offset, frag.more, frag.data).is_err() {
            // Conflicting ends or a misaligned middle fragment: the datagram
            // cannot be rebuilt (RFC 791 §3.2 needs 8-octet multiples).
            self.drop_datagram(frag.key, 1, SkipReason::FragmentInvalid, stats);
            return None;
        }
        pending.fragments += 1;
        let charge = ENTRY_OVERHEAD + pending.buf.data().len();
        self.charged = self.charged.saturating_sub(pending.charged) + charge;
        pending.charged = charge;
        if !pending.buf.is_complete() {
            return None;
        }
        let since = pending.since;
        let done = self.remove(since)?;
        stats.fragments_reassembled += 1;
        let (data, _) = done.buf.take_bufs();
        Some(Datagram { src: frag.key.src, dst: frag.key.dst, protocol: IpNumber(frag.key.protocol), payload: Cow::Owned(data) })
    }

    /// Drops a datagram and counts its fragments plus `extra` more.
    fn drop_datagram(&mut self, key: FragKey, extra: u64, reason: SkipReason, stats: &mut CaptureStats) {
        let mut n = extra;
        if let Some(since) = self.active.get(&key).map(|p| p.since) {
            if let Some(p) = self.remove(since) {
                n += p.fragments;
            }
        }
        stats.skip_n(reason, n);
    }
}

/// Skips IPv6 extension headers at the start of a reassembled payload (they
/// may follow the Fragment header in the first fragment, RFC 8200 §4.5).
pub(crate) fn skip_ipv6_extensions(d: Datagram<'static>) -> Result<Datagram<'static>, SkipReason> {
    if !d.dst.is_ipv6() {
        return Ok(d);
    }
    let (exts, protocol, rest) =
        Ipv6ExtensionsSlice::from_slice(d.protocol, &d.payload).map_err(|_| SkipReason::BadIpHeader)?;
    if exts.is_empty() {
        return Ok(d);
    }
    let payload = rest.to_vec();
    Ok(Datagram { src: d.src, dst: d.dst, protocol, payload: Cow::Owned(payload) })
}

#[cfg(test)]
#[allow(clippy::indexing_slicing, clippy::unwrap_used)]
mod tests {
    use super::*;
    use crate::capture::link::{ip_packet, LINKTYPE_ETHERNET};
    use crate::capture::test_util::*;

    fn fragments_of(frames: &[Vec<u8>]) -> Vec<Fragment<'_>> {
        frames
            .iter()
            .map(|f| {
                let ip = ip_packet(LINKTYPE_ETHERNET, f).expect("ip");
                match parse(0, ip, false).expect("parse") {
                    Network::Fragment(fr) => fr,
                    Network::Whole(_) => panic!("fragment expected"),
                }
            })
            .collect()
    }

    fn udp_payload_of(d: &Datagram<'_>) -> Vec<u8> {
        assert_eq!(d.protocol, IpNumber::UDP);
        etherparse::UdpSlice::from_slice(&d.payload).expect("udp").payload().to_vec()
    }

    #[test]
    fn ipv4_fragments_out_of_order() {
        // RFC 791 §3.2 (from memory, unconfirmed): fragments may arrive in
        // any order; offsets in 8-octet units rebuild the datagram.
        let (s, d) = (sa("192.0.2.10:50000"), sa("198.51.100.20:4739"));
        let msg = ipfix_message(7, 100);
        let frames = ipv4_udp_fragments(s, d, 0x1234, &msg, 32);
        assert_eq!(frames.len(), 4); // 8 UDP + 100 payload = 108 octets
        let frags = fragments_of(&frames);
        let mut stats = CaptureStats::default();
        let mut defrag = Defragmenter::new(1 << 20, Duration::from_secs(30));
        let t = Duration::from_secs(100);
        let mut out = None;
        for i in [2, 0, 3, 1] {
            assert!(out.is_none());
            out = defrag.add(frags[i], t, &mut stats);
        }
        let dgram = out.expect("complete");
        assert_eq!(dgram.src, s.ip());
        assert_eq!(udp_payload_of(&dgram), msg);
        assert_eq!(stats.fragments_reassembled, 1);
        assert_eq!(defrag.pending(), 0);
    }

    #[test]
    fn ipv6_fragments() {
        // RFC 8200 §4.5 Fragment header.
        let (s, d) = (sa("[2001:db8::1]:50000"), sa("[2001:db8::2]:4739"));
        let msg = ipfix_message(1, 200);
        let frames = ipv6_udp_fragments(s, d, 0xdead_beef, &msg, 64);
        let frags = fragments_of(&frames);
        let mut stats = CaptureStats::default();
        let mut defrag = Defragmenter::new(1 << 20, Duration::from_secs(30));
        let mut out = None;
        for f in frags.iter().rev() {
            out = defrag.add(*f, Duration::ZERO, &mut stats);
        }
        let dgram = skip_ipv6_extensions(out.expect("complete")).expect("exts");
        assert_eq!(udp_payload_of(&dgram), msg);
    }

    #[test]
    fn timeout_and_budget_are_counted() {
        let (s, d) = (sa("192.0.2.10:50000"), sa("198.51.100.20:4739"));
        let msg = ipfix_message(7, 100);
        let frames = ipv4_udp_fragments(s, d, 1, &msg, 32);
        let frags = fragments_of(&frames);
        let mut stats = CaptureStats::default();
        let mut defrag = Defragmenter::new(1 << 20, Duration::from_secs(30));
        defrag.add(frags[0], Duration::from_secs(10), &mut stats);
        defrag.add(frags[1], Duration::from_secs(20), &mut stats);
        // 31 s after the first fragment: the datagram has expired.
        defrag.add(frags[2], Duration::from_secs(41), &mut stats);
        assert_eq!(stats.fragments_expired, 2);
        assert_eq!(stats.skipped(SkipReason::FragmentExpired), 2);
        defrag.finish(&mut stats);
        assert_eq!(stats.skipped(SkipReason::FragmentIncomplete), 1);

        // A budget smaller than one datagram: every fragment is evicted.
        let mut stats = CaptureStats::default();
        let mut small = Defragmenter::new(ENTRY_OVERHEAD + 40, Duration::from_secs(30));
        for f in &frags {
            assert!(small.add(*f, Duration::ZERO, &mut stats).is_none());
        }
        assert_eq!(stats.skipped(SkipReason::FragmentEvicted), 4);
        assert_eq!(small.pending(), 0);
    }

    #[test]
    fn misaligned_middle_fragment_is_invalid() {
        let (s, d) = (sa("192.0.2.10:50000"), sa("198.51.100.20:4739"));
        let frames = ipv4_udp_fragments(s, d, 9, &ipfix_message(1, 100), 32);
        let mut frags = fragments_of(&frames);
        let mut stats = CaptureStats::default();
        let mut defrag = Defragmenter::new(1 << 20, Duration::from_secs(30));
        defrag.add(frags[0], Duration::ZERO, &mut stats);
        frags[1].data = frags[1].data.get(..30).expect("shorter");
        assert!(defrag.add(frags[1], Duration::ZERO, &mut stats).is_none());
        assert_eq!(stats.skipped(SkipReason::FragmentInvalid), 2);
    }
}
