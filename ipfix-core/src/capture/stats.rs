//! What a capture reader saw, delivered and skipped.

use std::collections::BTreeMap;

/// Why a packet (or a run of stream bytes) was not delivered as an IPFIX
/// Message.
///
/// Serialised as lower-case hyphenated names (see [`SkipReason::name`]).
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash, serde::Serialize)]
#[serde(rename_all = "kebab-case")]
#[non_exhaustive]
pub enum SkipReason {
    /// A pcapng packet names an interface that has no Interface Description
    /// Block (or lies beyond the interface limit).
    UnknownInterface,
    /// The interface's link type is not one this reader decodes.
    UnsupportedLinkType,
    /// A pcapng block that `pcap-parser` refuses but whose length is sane;
    /// it is stepped over.
    BadCaptureBlock,
    /// The link-layer header is shorter than its fixed size.
    BadLinkHeader,
    /// The frame carries something other than IPv4 or IPv6 (ARP, LLDP, …).
    NotIp,
    /// The IP header or its extension headers are malformed.
    BadIpHeader,
    /// The packet is shorter than its IP header says, and the capture did
    /// not cut it (otherwise [`SkipReason::CutBySnaplen`]).
    IpTruncated,
    /// The capture stored fewer octets than the packet had (snapshot length).
    CutBySnaplen,
    /// An IP payload other than UDP, TCP or SCTP.
    NotUdpOrTcp,
    /// SCTP (RFC 7011 §10.2) is recognised but not reassembled here.
    SctpUnsupported,
    /// The UDP header is malformed or longer than the packet.
    BadUdpHeader,
    /// The TCP header is malformed or longer than the packet.
    BadTcpHeader,
    /// Neither port is in [`PortFilter::Only`](super::PortFilter::Only).
    PortFiltered,
    /// With [`PortFilter::Any`](super::PortFilter::Any): a UDP payload that is
    /// not exactly one IPFIX Message, or a TCP stream that does not carry
    /// IPFIX.
    NotIpfix,
    /// An IP fragment that cannot be reassembled (conflicting or misaligned
    /// offsets, oversized datagram).
    FragmentInvalid,
    /// An IP fragment whose datagram did not complete within
    /// [`CaptureOptions::fragment_timeout`](super::CaptureOptions::fragment_timeout).
    FragmentExpired,
    /// An IP fragment dropped because the reassembly memory limit was reached.
    FragmentEvicted,
    /// An IP fragment whose datagram was still incomplete at the end of the
    /// capture.
    FragmentIncomplete,
    /// A TCP segment without payload (SYN, pure ACK, FIN, RST).
    TcpNoPayload,
    /// A TCP segment whose bytes had all been seen before.
    TcpRetransmission,
    /// A TCP segment for a connection already closed by FIN or RST.
    TcpAfterClose,
    /// Stream bytes skipped while looking for the next plausible IPFIX
    /// Message Header (RFC 7011 §3.1) after a gap or a bad header (bytes).
    TcpResync,
    /// Stream bytes of a partial IPFIX Message that a gap made unreadable, or
    /// that were left when the connection ended (bytes).
    TcpIncompleteMessage,
    /// Out-of-order stream bytes dropped because the TCP buffer limit was
    /// reached (bytes).
    TcpBufferFull,
    /// RFC 5655 file bytes skipped while resynchronising (RFC 5655 §10.3)
    /// (bytes).
    FileResync,
}

impl SkipReason {
    /// The lower-case hyphenated name, as serialised.
    pub const fn name(self) -> &'static str {
        match self {
            Self::UnknownInterface => "unknown-interface",
            Self::UnsupportedLinkType => "unsupported-link-type",
            Self::BadCaptureBlock => "bad-capture-block",
            Self::BadLinkHeader => "bad-link-header",
            Self::NotIp => "not-ip",
            Self::BadIpHeader => "bad-ip-header",
            Self::IpTruncated => "ip-truncated",
            Self::CutBySnaplen => "cut-by-snaplen",
            Self::NotUdpOrTcp => "not-udp-or-tcp",
            Self::SctpUnsupported => "sctp-unsupported",
            Self::BadUdpHeader => "bad-udp-header",
            Self::BadTcpHeader => "bad-tcp-header",
            Self::PortFiltered => "port-filtered",
            Self::NotIpfix => "not-ipfix",
            Self::FragmentInvalid => "fragment-invalid",
            Self::FragmentExpired => "fragment-expired",
            Self::FragmentEvicted => "fragment-evicted",
            Self::FragmentIncomplete => "fragment-incomplete",
            Self::TcpNoPayload => "tcp-no-payload",
            Self::TcpRetransmission => "tcp-retransmission",
            Self::TcpAfterClose => "tcp-after-close",
            Self::TcpResync => "tcp-resync",
            Self::TcpIncompleteMessage => "tcp-incomplete-message",
            Self::TcpBufferFull => "tcp-buffer-full",
            Self::FileResync => "file-resync",
        }
    }
}

impl std::fmt::Display for SkipReason {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(self.name())
    }
}

/// Counters of a [`CaptureReader`](super::CaptureReader); `Serialize` so a
/// command-line tool can print them as JSON.
///
/// Nothing is dropped silently: every packet that did not end up in a
/// delivered message, or in a buffer still waiting for more data, is counted
/// in `skipped` under its reason; stream and file octets that were stepped
/// over are counted in `skipped_bytes`.
#[derive(Debug, Clone, Default, PartialEq, Eq, serde::Serialize)]
#[non_exhaustive]
pub struct CaptureStats {
    /// Packet records read (pcap records, pcapng Enhanced and Simple Packet
    /// Blocks). Zero for RFC 5655 files.
    pub packets: u64,
    /// IPFIX Messages delivered as [`CaptureEvent::Message`](super::CaptureEvent::Message).
    pub ipfix_payloads: u64,
    /// Packets not delivered, by reason.
    pub skipped: BTreeMap<SkipReason, u64>,
    /// Stream or file octets stepped over, by reason.
    pub skipped_bytes: BTreeMap<SkipReason, u64>,
    /// pcapng blocks that carry no packet (statistics, name resolution, …).
    pub other_blocks: u64,
    /// IP datagrams rebuilt from fragments.
    pub fragments_reassembled: u64,
    /// Fragments dropped because their datagram timed out (also counted in
    /// `skipped` as `fragment-expired`).
    pub fragments_expired: u64,
    /// TCP connections (per direction) that carried IPFIX.
    pub tcp_sessions: u64,
    /// [`CaptureEvent::SessionEnded`](super::CaptureEvent::SessionEnded) events emitted.
    pub sessions_ended: u64,
    /// Holes in TCP streams jumped over (lost segments).
    pub tcp_gaps: u64,
    /// Octets missing in those holes.
    pub tcp_gap_bytes: u64,
    /// TCP payload octets seen more than once (retransmissions, overlaps).
    pub tcp_retransmitted_bytes: u64,
    /// Times a TCP stream lost IPFIX framing and had to resynchronise.
    pub tcp_resyncs: u64,
    /// TCP streams dropped by the stream limit or the idle timeout.
    pub tcp_streams_evicted: u64,
    /// Times an RFC 5655 file had to be resynchronised (RFC 5655 §10.3).
    pub file_resyncs: u64,
    /// Offset at which the input was found truncated, if it was.
    pub truncated_at: Option<u64>,
}

impl CaptureStats {
    /// Counts one skipped packet.
    pub(crate) fn skip(&mut self, reason: SkipReason) {
        self.skip_n(reason, 1);
    }

    /// Counts `n` skipped packets.
    pub(crate) fn skip_n(&mut self, reason: SkipReason, n: u64) {
        if n > 0 {
            *self.skipped.entry(reason).or_insert(0) += n;
        }
    }

    /// Counts `n` skipped stream or file octets.
    pub(crate) fn skip_bytes(&mut self, reason: SkipReason, n: u64) {
        if n > 0 {
            *self.skipped_bytes.entry(reason).or_insert(0) += n;
        }
    }

    /// Packets skipped for `reason` (0 if none).
    pub fn skipped(&self, reason: SkipReason) -> u64 {
        self.skipped.get(&reason).copied().unwrap_or(0)
    }

    /// Octets skipped for `reason` (0 if none).
    pub fn skipped_bytes(&self, reason: SkipReason) -> u64 {
        self.skipped_bytes.get(&reason).copied().unwrap_or(0)
    }
}

#[cfg(test)]
#[allow(clippy::indexing_slicing, clippy::unwrap_used)]
mod tests {
    use super::*;

    #[test]
    fn serialises_reasons_as_kebab_case_names() {
        let mut s = CaptureStats::default();
        s.skip(SkipReason::NotIpfix);
        s.skip_bytes(SkipReason::TcpResync, 5);
        let json = serde_json::to_value(&s).expect("serialise");
        assert_eq!(json["skipped"]["not-ipfix"], 1);
        assert_eq!(json["skipped_bytes"]["tcp-resync"], 5);
        // Every name matches its serde spelling.
        for r in [SkipReason::UnknownInterface, SkipReason::CutBySnaplen, SkipReason::FileResync, SkipReason::NotUdpOrTcp] {
            assert_eq!(serde_json::to_value(r).expect("serialise"), r.name());
        }
    }
}
