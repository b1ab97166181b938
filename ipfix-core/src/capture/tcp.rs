//! TCP: per-direction stream reassembly and IPFIX framing.
//!
//! Each direction of a connection is its own stream, keyed by (source,
//! destination) socket address; the side that sends IPFIX bytes is the
//! Exporter (RFC 7011 §2). Bytes are put in sequence order (RFC 9293 §3.4:
//! sequence numbers count octets, the SYN occupies one; from memory,
//! unconfirmed), retransmitted and
//! overlapping bytes are counted and dropped, out-of-order segments wait in
//! a bounded buffer, and messages are cut by the header Length only
//! (RFC 7011 §10.4.3). A gap that cannot be filled is jumped over; the
//! stream then resynchronises on the next plausible header (`frame`
//! module) and the skipped octets are counted.
//!
//! Memory: out-of-order data of all streams together is bounded by
//! [`CaptureOptions::tcp_max_buffered_bytes`](super::CaptureOptions::tcp_max_buffered_bytes);
//! in-order data waiting for the rest of a message is bounded by the largest
//! message (65,535 octets, RFC 7011 §10) per stream, and streams by
//! [`CaptureOptions::tcp_max_streams`](super::CaptureOptions::tcp_max_streams).

use std::collections::{BTreeMap, HashMap, VecDeque};
use std::net::SocketAddr;
use std::time::Duration;

use super::frame::{self, Search};
use super::stats::{CaptureStats, SkipReason};
use super::{CaptureError, CaptureEvent, TransportSession};

/// Memory charged per buffered out-of-order segment on top of its octets.
const SEGMENT_OVERHEAD: usize = 64;
/// How far a stream seen without its SYN, in `PortFilter::Any` mode, is
/// searched for an IPFIX header before it is judged not to carry IPFIX.
const CANDIDATE_SCAN_LIMIT: u64 = 4 * 65_536;

/// One TCP segment, borrowed from its packet.
#[derive(Debug, Clone, Copy)]
pub(crate) struct Segment<'a> {
    pub(crate) src: SocketAddr,
    pub(crate) dst: SocketAddr,
    pub(crate) seq: u32,
    pub(crate) syn: bool,
    pub(crate) ack: bool,
    pub(crate) fin: bool,
    pub(crate) rst: bool,
    pub(crate) payload: &'a [u8],
}

/// What a stream is known to carry.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Kind {
    /// IPFIX: a configured port matched, or a confirmed header was found.
    Ipfix,
    /// Not known yet (`PortFilter::Any`).
    Candidate,
    /// Judged not to carry IPFIX; its segments are counted and dropped.
    NotIpfix,
}

#[derive(Debug)]
struct Stream {
    session: TransportSession,
    /// False once closed by FIN/RST; kept as a marker so late segments are
    /// recognised and a new SYN gets the next instance.
    open: bool,
    kind: Kind,
    /// Sequence number of stream position 0.
    base: u32,
    /// Next expected stream position; everything before it is in `pending`
    /// or already delivered.
    next: u64,
    /// In-order octets not yet delivered.
    pending: Vec<u8>,
    /// Out-of-order segments by stream position.
    ooo: BTreeMap<u64, Vec<u8>>,
    /// Memory charged for `ooo`.
    ooo_charged: usize,
    /// ISN from the SYN, if one was seen.
    isn: Option<u32>,
    /// `pending[0]` is known to be a message boundary.
    synced: bool,
    /// Octets searched without finding a header (candidate streams).
    scanned: u64,
    /// At least one message was delivered.
    delivered: bool,
    last_seen: Duration,
    last_ts: Option<Duration>,
}

impl Stream {
    fn new(src: SocketAddr, dst: SocketAddr, instance: u32, base: u32, isn: Option<u32>, kind: Kind) -> Self {
        let mut session = TransportSession::tcp(src, dst);
        session.instance = instance;
        Self {
            session,
            open: true,
            kind,
            base,
            next: 0,
            pending: Vec::new(),
            ooo: BTreeMap::new(),
            ooo_charged: 0,
            isn,
            synced: isn.is_some(),
            scanned: 0,
            delivered: false,
            last_seen: Duration::ZERO,
            last_ts: None,
        }
    }

    /// Stream position of sequence number `seq`, unwrapped near `next`
    /// (sequence arithmetic is modulo 2^32, RFC 9293 §3.4; from memory,
    /// unconfirmed).
    fn position(&self, seq: u32) -> i64 {
        let rel = seq.wrapping_sub(self.base);
        let diff = rel.wrapping_sub(self.next as u32) as i32;
        (self.next as i64).saturating_add(i64::from(diff))
    }
}

type Key = (SocketAddr, SocketAddr);
type Events = VecDeque<Result<CaptureEvent, CaptureError>>;

/// All TCP streams of a capture.
#[derive(Debug)]
pub(crate) struct TcpTracker {
    streams: HashMap<Key, Stream>,
    ooo_charged: usize,
    max_buffered: usize,
    max_streams: usize,
    idle_timeout: Duration,
}

impl TcpTracker {
    pub(crate) fn new(max_buffered: usize, max_streams: usize, idle_timeout: Duration) -> Self {
        Self { streams: HashMap::new(), ooo_charged: 0, max_buffered, max_streams: max_streams.max(1), idle_timeout }
    }

    /// Handles one segment. `ipfix` is true when a configured port matched
    /// (the stream is IPFIX by configuration); otherwise the stream must
    /// show a plausible header first.
    pub(crate) fn segment(
        &mut self,
        seg: Segment<'_>,
        ts: Option<Duration>,
        now: Duration,
        ipfix: bool,
        events: &mut Events,
        stats: &mut CaptureStats,
    ) {
        let key = (seg.src, seg.dst);
        let kind = if ipfix { Kind::Ipfix } else { Kind::Candidate };
        if seg.syn {
            let existing = self.streams.get(&key);
            let repeated = existing.is_some_and(|s| s.open && s.isn == Some(seg.seq));
            if !repeated {
                // A new connection on this 4-tuple: the old one is over
                // (RFC 7011 §8: templates never outlive their session).
                let mut instance = existing.map_or(0, |s| s.session.instance.wrapping_add(1));
                self.end(key, events, stats);
                if !seg.ack {
                    let reverse = (seg.dst, seg.src);
                    if let Some(r) = self.streams.get(&reverse) {
                        instance = instance.max(r.session.instance.wrapping_add(1));
                    }
                    self.end(reverse, events, stats);
                }
                self.make_room(key, events, stats);
                let stream = Stream::new(seg.src, seg.dst, instance, seg.seq.wrapping_add(1), Some(seg.seq), kind);
                self.streams.insert(key, stream);
            }
        }
        let Some(stream) = self.streams.get_mut(&key) else {
            if seg.payload.is_empty() {
                stats.skip(SkipReason::TcpNoPayload);
                return;
            }
            // First sight of this stream mid-connection: position 0 is this
            // segment, and framing is unknown until a header is found.
            self.make_room(key, events, stats);
            let stream = Stream::new(seg.src, seg.dst, 0, seg.seq, None, kind);
            self.streams.insert(key, stream);
            return self.segment(seg, ts, now, ipfix, events, stats);
        };
        if !stream.open {
            stats.skip(SkipReason::TcpAfterClose);
            return;
        }
        stream.last_seen = now;
        if ts.is_some() {
            stream.last_ts = ts;
        }
        if seg.payload.is_empty() {
            stats.skip(SkipReason::TcpNoPayload);
        } else if stream.kind == Kind::NotIpfix {
            stats.skip(SkipReason::NotIpfix);
        } else {
            let data_seq = seg.seq.wrapping_add(u32::from(seg.syn));
            self.insert(key, data_seq, seg.payload, events, stats);
        }
        if seg.fin || seg.rst {
            self.end(key, events, stats);
            self.end((seg.dst, seg.src), events, stats);
        }
    }

    /// Puts payload octets in place and delivers what became complete.
    fn insert(&mut self, key: Key, seq: u32, payload: &[u8], events: &mut Events, stats: &mut CaptureStats) {
        let Some(stream) = self.streams.get_mut(&key) else { return };
        let pos = stream.position(seq);
        let len = payload.len() as i64;
        let next = stream.next as i64;
        if pos.saturating_add(len) <= next {
            stats.tcp_retransmitted_bytes += payload.len() as u64;
            stats.skip(SkipReason::TcpRetransmission);
            return;
        }
        if pos <= next {
            let seen = (next - pos) as usize;
            stats.tcp_retransmitted_bytes += seen as u64;
            stream.pending.extend_from_slice(payload.get(seen..).unwrap_or(&[]));
            stream.next = (pos + len) as u64;
            drain_ooo(stream, &mut self.ooo_charged, stats);
        } else {
            let pos = pos as u64;
            let cost = payload.len() + SEGMENT_OVERHEAD;
            if self.ooo_charged + cost > self.max_buffered {
                // No room to wait for the hole: give up on it.
                skip_gap(stream, &mut self.ooo_charged, Some(pos), stats);
                let st = stream.next;
                if pos == st {
                    stream.pending.extend_from_slice(payload);
                    stream.next = pos + payload.len() as u64;
                    drain_ooo(stream, &mut self.ooo_charged, stats);
                } else if self.ooo_charged + cost > self.max_buffered {
                    stats.skip_bytes(SkipReason::TcpBufferFull, payload.len() as u64);
                } else {
                    store_ooo(stream, &mut self.ooo_charged, pos, payload, stats);
                }
            } else {
                store_ooo(stream, &mut self.ooo_charged, pos, payload, stats);
            }
        }
        deliver(stream, false, events, stats);
    }

    /// Closes the stream `key` if open: flushes it, emits `SessionEnded`
    /// when it carried IPFIX, and leaves a closed marker.
    fn end(&mut self, key: Key, events: &mut Events, stats: &mut CaptureStats) {
        if let Some(stream) = self.streams.get_mut(&key) {
            if stream.open {
                close(stream, &mut self.ooo_charged, events, stats);
            }
        }
    }

    /// Evicts the least recently seen stream when the table is full.
    fn make_room(&mut self, keep: Key, events: &mut Events, stats: &mut CaptureStats) {
        while self.streams.len() >= self.max_streams {
            // Closed markers go first, then the stream idle longest.
            let victim = self
                .streams
                .iter()
                .filter(|(k, _)| **k != keep)
                .min_by_key(|(_, s)| (s.open, s.last_seen))
                .map(|(k, _)| *k);
            let Some(victim) = victim else { return };
            if let Some(mut s) = self.streams.remove(&victim) {
                if s.open {
                    stats.tcp_streams_evicted += 1;
                    close(&mut s, &mut self.ooo_charged, events, stats);
                }
            }
        }
    }

    /// Drops streams idle for longer than the idle timeout (capture time).
    pub(crate) fn expire(&mut self, now: Duration, events: &mut Events, stats: &mut CaptureStats) {
        let idle: Vec<Key> = self
            .streams
            .iter()
            .filter(|(_, s)| now.saturating_sub(s.last_seen) > self.idle_timeout)
            .map(|(k, _)| *k)
            .collect();
        for k in idle {
            if let Some(mut s) = self.streams.remove(&k) {
                if s.open {
                    stats.tcp_streams_evicted += 1;
                    close(&mut s, &mut self.ooo_charged, events, stats);
                }
            }
        }
    }

    /// End of capture: delivers what can still be framed and counts the
    /// rest. Connections are not ended (the capture stopped, they did not).
    pub(crate) fn finish(&mut self, events: &mut Events, stats: &mut CaptureStats) {
        let mut keys: Vec<Key> = self.streams.keys().copied().collect();
        keys.sort();
        for k in keys {
            if let Some(mut s) = self.streams.remove(&k) {
                if s.open {
                    flush(&mut s, &mut self.ooo_charged, events, stats);
                }
            }
        }
    }
}

fn store_ooo(stream: &mut Stream, charged: &mut usize, pos: u64, payload: &[u8], stats: &mut CaptureStats) {
    match stream.ooo.get_mut(&pos) {
        Some(old) if old.len() >= payload.len() => {
            stats.tcp_retransmitted_bytes += payload.len() as u64;
            stats.skip(SkipReason::TcpRetransmission);
        }
        Some(old) => {
            stats.tcp_retransmitted_bytes += old.len() as u64;
            *charged += payload.len() - old.len();
            stream.ooo_charged += payload.len() - old.len();
            *old = payload.to_vec();
        }
        None => {
            let cost = payload.len() + SEGMENT_OVERHEAD;
            *charged += cost;
            stream.ooo_charged += cost;
            stream.ooo.insert(pos, payload.to_vec());
        }
    }
}

/// Moves out-of-order segments that now touch `next` into `pending`.
fn drain_ooo(stream: &mut Stream, charged: &mut usize, stats: &mut CaptureStats) {
    while let Some(entry) = stream.ooo.first_entry() {
        let pos = *entry.key();
        if pos > stream.next {
            break;
        }
        let data = entry.remove();
        let cost = data.len() + SEGMENT_OVERHEAD;
        *charged = charged.saturating_sub(cost);
        stream.ooo_charged = stream.ooo_charged.saturating_sub(cost);
        let end = pos + data.len() as u64;
        if end <= stream.next {
            stats.tcp_retransmitted_bytes += data.len() as u64;
            continue;
        }
        let seen = (stream.next - pos) as usize;
        stats.tcp_retransmitted_bytes += seen as u64;
        stream.pending.extend_from_slice(data.get(seen..).unwrap_or(&[]));
        stream.next = end;
    }
}

/// Jumps over the hole before the first buffered segment (or `upto` when
/// nothing is buffered). The partial message before the hole cannot be
/// completed: it is counted and dropped, and framing must be found again.
fn skip_gap(stream: &mut Stream, charged: &mut usize, upto: Option<u64>, stats: &mut CaptureStats) {
    let target = match (stream.ooo.keys().next().copied(), upto) {
        (Some(a), Some(b)) => a.min(b),
        (Some(a), None) | (None, Some(a)) => a,
        (None, None) => return,
    };
    if target <= stream.next {
        return;
    }
    stats.tcp_gaps += 1;
    stats.tcp_gap_bytes += target - stream.next;
    drop_pending(stream, stats);
    stream.synced = false;
    stream.next = target;
    drain_ooo(stream, charged, stats);
}

/// Counts and drops undelivered in-order octets.
fn drop_pending(stream: &mut Stream, stats: &mut CaptureStats) {
    let n = stream.pending.len() as u64;
    let reason = match stream.kind {
        // A candidate never delivered anything: not shown to be IPFIX.
        Kind::NotIpfix | Kind::Candidate => SkipReason::NotIpfix,
        _ if stream.synced => SkipReason::TcpIncompleteMessage,
        _ => SkipReason::TcpResync,
    };
    stats.skip_bytes(reason, n);
    stream.pending.clear();
}

/// Cuts complete messages off `pending`. `at_end`: the stream ends at the
/// buffered data (connection closed or capture over).
fn deliver(stream: &mut Stream, at_end: bool, events: &mut Events, stats: &mut CaptureStats) {
    loop {
        match stream.kind {
            Kind::NotIpfix => {
                drop_pending(stream, stats);
                return;
            }
            Kind::Ipfix | Kind::Candidate => {}
        }
        if stream.synced {
            let Some((version, len)) = frame::header(&stream.pending) else { return };
            if version == frame::VERSION && len >= frame::HEADER_LEN {
                if stream.pending.len() < len {
                    return;
                }
                let data: Vec<u8> = stream.pending.drain(..len).collect();
                emit(stream, data, events, stats);
                continue;
            }
            if stream.kind == Kind::Candidate {
                // The connection's first octets are not an IPFIX header.
                stream.kind = Kind::NotIpfix;
                continue;
            }
            // RFC 7011 §10.4.3 framing lost (bad Version or Length):
            // resynchronise after this octet.
            stats.tcp_resyncs += 1;
            stream.synced = false;
            stats.skip_bytes(SkipReason::TcpResync, 1);
            stream.pending.drain(..1);
            continue;
        }
        // An octet boundary is unknown: search (RFC 5655 §10.3 check).
        // A message ending exactly where the data ends is accepted only for
        // streams already known to carry IPFIX, or at the very end.
        let weak = at_end || stream.kind == Kind::Ipfix;
        let found = frame::resync(&stream.pending, weak);
        let skip = match found {
            Search::Found(k) | Search::NeedMore(k) => k,
        };
        stats.skip_bytes(SkipReason::TcpResync, skip as u64);
        stream.pending.drain(..skip);
        stream.scanned += skip as u64;
        match found {
            Search::Found(_) => stream.synced = true,
            Search::NeedMore(_) => {
                if stream.kind == Kind::Candidate && stream.scanned > CANDIDATE_SCAN_LIMIT {
                    stream.kind = Kind::NotIpfix;
                    continue;
                }
                return;
            }
        }
    }
}

fn emit(stream: &mut Stream, data: Vec<u8>, events: &mut Events, stats: &mut CaptureStats) {
    if stream.kind == Kind::Candidate {
        stream.kind = Kind::Ipfix;
    }
    if !stream.delivered {
        stream.delivered = true;
        stats.tcp_sessions += 1;
    }
    stats.ipfix_payloads += 1;
    events.push_back(Ok(CaptureEvent::Message { session: stream.session, received: stream.last_ts, data }));
}

/// Delivers everything still deliverable, jumping remaining holes, and
/// counts what is left.
fn flush(stream: &mut Stream, charged: &mut usize, events: &mut Events, stats: &mut CaptureStats) {
    while !stream.ooo.is_empty() {
        let before = (stream.ooo.len(), stream.next);
        skip_gap(stream, charged, None, stats);
        drain_ooo(stream, charged, stats);
        deliver(stream, false, events, stats);
        if (stream.ooo.len(), stream.next) == before {
            break; // cannot happen (keys stay above `next`); never spin
        }
    }
    deliver(stream, true, events, stats);
    drop_pending(stream, stats);
    *charged = charged.saturating_sub(stream.ooo_charged);
    stream.ooo_charged = 0;
}

/// Flushes, ends the session (RFC 7011 §8: its templates must go) and
/// marks the stream closed.
fn close(stream: &mut Stream, charged: &mut usize, events: &mut Events, stats: &mut CaptureStats) {
    flush(stream, charged, events, stats);
    stream.open = false;
    if stream.delivered {
        stats.sessions_ended += 1;
        events.push_back(Ok(CaptureEvent::SessionEnded { session: stream.session }));
    }
    stream.pending = Vec::new();
    stream.ooo = BTreeMap::new();
}

#[cfg(test)]
#[allow(clippy::indexing_slicing, clippy::unwrap_used)]
mod tests {
    use super::*;
    use crate::capture::test_util::{ipfix_message, sa};

    struct Harness {
        t: TcpTracker,
        events: Events,
        stats: CaptureStats,
        now: u64,
    }

    impl Harness {
        fn new(max_buffered: usize) -> Self {
            Self {
                t: TcpTracker::new(max_buffered, 16, Duration::from_secs(600)),
                events: VecDeque::new(),
                stats: CaptureStats::default(),
                now: 0,
            }
        }

        fn seg(&mut self, seq: u32, flags: &str, payload: &[u8], ipfix: bool) {
            self.now += 1;
            let s = Segment {
                src: sa("192.0.2.1:40000"),
                dst: sa("198.51.100.1:4739"),
                seq,
                syn: flags.contains('S'),
                ack: flags.contains('A'),
                fin: flags.contains('F'),
                rst: flags.contains('R'),
                payload,
            };
            let ts = Some(Duration::from_secs(self.now));
            self.t.segment(s, ts, Duration::from_secs(self.now), ipfix, &mut self.events, &mut self.stats);
        }

        fn messages(&mut self) -> Vec<Vec<u8>> {
            let mut out = Vec::new();
            while let Some(Ok(CaptureEvent::Message { data, .. })) = self.events.front().cloned() {
                self.events.pop_front();
                out.push(data);
            }
            out
        }
    }

    fn stream_of(msgs: &[Vec<u8>]) -> Vec<u8> {
        msgs.concat()
    }

    #[test]
    fn split_retransmitted_and_reordered() {
        // RFC 7011 §10.4.3: messages framed by Length across segments.
        let msgs = vec![ipfix_message(1, 100), ipfix_message(2, 60), ipfix_message(3, 16)];
        let s = stream_of(&msgs);
        let isn = 0xffff_ff00; // wraps during the stream (modulo 2^32)
        let mut h = Harness::new(1 << 20);
        h.seg(isn, "S", &[], true);
        let base = isn.wrapping_add(1);
        h.seg(base, "A", &s[..70], true); // first half of message 1
        h.seg(base.wrapping_add(120), "A", &s[120..], true); // out of order
        h.seg(base, "A", &s[..70], true); // retransmission
        assert!(h.messages().is_empty());
        h.seg(base.wrapping_add(60), "A", &s[60..130], true); // overlaps both sides
        assert_eq!(h.messages(), msgs);
        assert_eq!(h.stats.tcp_retransmitted_bytes, 70 + 10 + 10);
        h.seg(base.wrapping_add(s.len() as u32), "AF", &[], true);
        match h.events.pop_front() {
            Some(Ok(CaptureEvent::SessionEnded { session })) => {
                assert_eq!(session.exporter, Some(sa("192.0.2.1:40000")));
                assert_eq!(session.collector, Some(sa("198.51.100.1:4739")));
            }
            other => panic!("unexpected {other:?}"),
        }
        assert_eq!(h.stats.tcp_gaps, 0);
        assert!(h.stats.skipped_bytes.is_empty(), "{:?}", h.stats.skipped_bytes);
    }

    #[test]
    fn gap_forces_resync_and_counts() {
        let msgs: Vec<Vec<u8>> = (0..6).map(|i| ipfix_message(i, 40)).collect();
        let s = stream_of(&msgs);
        // Tiny buffer: one out-of-order segment fits, the second does not.
        let mut h = Harness::new(60 + SEGMENT_OVERHEAD);
        h.seg(1000, "A", &s[..40], true); // mid-stream start at a boundary
        assert_eq!(h.messages().len(), 1);
        // 40..70 lost; 70..120 and 120..240 arrive.
        h.seg(1070, "A", &s[70..120], true);
        h.seg(1120, "A", &s[120..], true);
        let got = h.messages();
        // 70..80 is the tail of message 1 (skipped), 80..240 are messages 2-5.
        assert_eq!(got, msgs[2..].to_vec());
        assert_eq!(h.stats.tcp_gaps, 1);
        assert_eq!(h.stats.tcp_gap_bytes, 30);
        assert_eq!(h.stats.skipped_bytes(SkipReason::TcpResync), 10);
    }

    #[test]
    fn new_syn_ends_session_and_bumps_instance() {
        let m = ipfix_message(1, 16);
        let mut h = Harness::new(1 << 20);
        h.seg(100, "S", &[], false);
        h.seg(101, "A", &m, false);
        let first = match h.events.pop_front() {
            Some(Ok(CaptureEvent::Message { session, .. })) => session,
            other => panic!("unexpected {other:?}"),
        };
        h.seg(5000, "S", &[], false);
        h.seg(5001, "A", &m, false);
        assert!(matches!(h.events.pop_front(), Some(Ok(CaptureEvent::SessionEnded { session })) if session == first));
        match h.events.pop_front() {
            Some(Ok(CaptureEvent::Message { session, .. })) => assert_eq!(session.instance, first.instance + 1),
            other => panic!("unexpected {other:?}"),
        }
        h.seg(5001 + 16, "R", &[], false);
        assert!(matches!(h.events.pop_front(), Some(Ok(CaptureEvent::SessionEnded { .. }))));
        h.seg(5001 + 16, "A", &m, false);
        assert_eq!(h.stats.skipped(SkipReason::TcpAfterClose), 1);
    }

    #[test]
    fn non_ipfix_stream_in_any_mode() {
        let mut h = Harness::new(1 << 20);
        h.seg(1, "S", &[], false);
        h.seg(2, "A", b"GET / HTTP/1.1\r\nHost: example\r\n\r\n", false);
        h.seg(40, "A", b"more", false);
        assert!(h.events.is_empty());
        assert_eq!(h.stats.skipped(SkipReason::NotIpfix), 1);
        assert!(h.stats.skipped_bytes(SkipReason::NotIpfix) > 0);
    }

    #[test]
    fn bad_header_resyncs_in_ipfix_mode() {
        let m1 = ipfix_message(1, 30);
        let m2 = ipfix_message(2, 20);
        let mut bytes = b"\x00\x09junk".to_vec();
        bytes.extend(&m1);
        bytes.extend(&m2);
        let mut h = Harness::new(1 << 20);
        h.seg(9, "S", &[], true);
        h.seg(10, "A", &bytes, true);
        assert_eq!(h.messages(), vec![m1, m2]);
        assert_eq!(h.stats.tcp_resyncs, 1);
        assert_eq!(h.stats.skipped_bytes(SkipReason::TcpResync), 6);
    }

    #[test]
    fn finish_delivers_after_trailing_gap() {
        let m = ipfix_message(1, 40);
        let mut h = Harness::new(1 << 20);
        h.seg(1, "S", &[], true);
        h.seg(2, "A", &m[..10], true);
        h.seg(2 + 50, "A", &m, true); // after a 40-octet hole
        h.t.finish(&mut h.events, &mut h.stats);
        assert_eq!(h.messages(), vec![m]);
        assert_eq!(h.stats.skipped_bytes(SkipReason::TcpIncompleteMessage), 10);
        assert_eq!(h.stats.tcp_gaps, 1);
    }
}
