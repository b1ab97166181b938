//! From a captured packet to IPFIX Messages: link layer, IP (with
//! reassembly), then UDP or TCP.

use std::collections::VecDeque;
use std::net::SocketAddr;
use std::time::Duration;

use etherparse::{IpNumber, TcpSlice, UdpSlice};

use super::ip::{self, Datagram, Defragmenter, Network};
use super::pcap::Packet;
use super::stats::{CaptureStats, SkipReason};
use super::tcp::{Segment, TcpTracker};
use super::{frame, link, CaptureError, CaptureEvent, CaptureOptions, PortFilter, TransportSession};

type Events = VecDeque<Result<CaptureEvent, CaptureError>>;

/// How often (in capture time) idle state is swept.
const SWEEP_INTERVAL: Duration = Duration::from_secs(1);

/// Decodes packets into events; owns all per-capture protocol state.
#[derive(Debug)]
pub(crate) struct PacketDecoder {
    ports: PortFilter,
    defrag: Defragmenter,
    tcp: TcpTracker,
    /// Latest capture timestamp seen: the clock for every timeout.
    now: Duration,
    next_sweep: Duration,
}

impl PacketDecoder {
    pub(crate) fn new(options: &CaptureOptions) -> Self {
        Self {
            ports: options.ports.clone(),
            defrag: Defragmenter::new(options.max_reassembly_bytes, options.fragment_timeout),
            tcp: TcpTracker::new(options.tcp_max_buffered_bytes, options.tcp_max_streams, options.tcp_idle_timeout),
            now: Duration::ZERO,
            next_sweep: Duration::ZERO,
        }
    }

    /// Decodes one packet.
    pub(crate) fn packet(&mut self, p: &Packet<'_>, events: &mut Events, stats: &mut CaptureStats) {
        stats.packets += 1;
        if let Some(ts) = p.timestamp {
            // Timeouts follow capture time, never the wall clock; a
            // timestamp going backwards does not turn the clock back.
            self.now = self.now.max(ts);
            if self.now >= self.next_sweep {
                self.defrag.expire(self.now, stats);
                self.tcp.expire(self.now, events, stats);
                self.next_sweep = self.now.saturating_add(SWEEP_INTERVAL);
            }
        }
        let ip_bytes = match link::ip_packet(p.linktype, p.data) {
            Ok(b) => b,
            Err(SkipReason::BadLinkHeader) if p.cut => return stats.skip(SkipReason::CutBySnaplen),
            Err(r) => return stats.skip(r),
        };
        let datagram = match ip::parse(p.interface, ip_bytes, p.cut) {
            Ok(Network::Whole(d)) => d,
            Ok(Network::Fragment(f)) => match self.defrag.add(f, self.now, stats) {
                Some(d) => match ip::skip_ipv6_extensions(d) {
                    Ok(d) => d,
                    Err(r) => return stats.skip(r),
                },
                None => return,
            },
            Err(r) => return stats.skip(r),
        };
        // IP lengths were checked against the captured octets, so from here
        // on the datagram is complete even if the frame was cut (e.g. only
        // its FCS was not stored).
        self.transport(&datagram, p.timestamp, events, stats);
    }

    fn transport(&mut self, d: &Datagram<'_>, ts: Option<Duration>, events: &mut Events, stats: &mut CaptureStats) {
        match d.protocol {
            IpNumber::UDP => self.udp(d, ts, events, stats),
            IpNumber::TCP => self.tcp(d, ts, events, stats),
            IpNumber::SCTP => stats.skip(SkipReason::SctpUnsupported),
            _ => stats.skip(SkipReason::NotUdpOrTcp),
        }
    }

    fn udp(&mut self, d: &Datagram<'_>, ts: Option<Duration>, events: &mut Events, stats: &mut CaptureStats) {
        let Ok(udp) = UdpSlice::from_slice(&d.payload) else {
            return stats.skip(SkipReason::BadUdpHeader);
        };
        let src = SocketAddr::new(d.src, udp.source_port());
        let dst = SocketAddr::new(d.dst, udp.destination_port());
        let payload = udp.payload();
        let accept = match &self.ports {
            // Configured ports: pass everything on; the decoder judges and
            // counts malformed messages itself.
            PortFilter::Only(_) if !self.ports.matches(src.port(), dst.port()) => {
                return stats.skip(SkipReason::PortFiltered)
            }
            PortFilter::Only(_) => true,
            // Any port: RFC 7011 §10.3 carries exactly one message per
            // datagram, so version 10 and a Length equal to the payload
            // length (§3.1) identify IPFIX.
            PortFilter::Any => {
                matches!(frame::header(payload), Some((frame::VERSION, len)) if len >= frame::HEADER_LEN && len == payload.len())
            }
        };
        if !accept {
            return stats.skip(SkipReason::NotIpfix);
        }
        stats.ipfix_payloads += 1;
        events.push_back(Ok(CaptureEvent::Message {
            session: TransportSession::udp(src, dst),
            received: ts,
            data: payload.to_vec(),
        }));
    }

    fn tcp(&mut self, d: &Datagram<'_>, ts: Option<Duration>, events: &mut Events, stats: &mut CaptureStats) {
        let Ok(tcp) = TcpSlice::from_slice(&d.payload) else {
            return stats.skip(SkipReason::BadTcpHeader);
        };
        let (sport, dport) = (tcp.source_port(), tcp.destination_port());
        let ipfix = match &self.ports {
            PortFilter::Only(_) if !self.ports.matches(sport, dport) => return stats.skip(SkipReason::PortFiltered),
            PortFilter::Only(_) => true,
            PortFilter::Any => false,
        };
        let seg = Segment {
            src: SocketAddr::new(d.src, sport),
            dst: SocketAddr::new(d.dst, dport),
            seq: tcp.sequence_number(),
            syn: tcp.syn(),
            ack: tcp.ack(),
            fin: tcp.fin(),
            rst: tcp.rst(),
            payload: tcp.payload(),
        };
        self.tcp.segment(seg, ts, self.now, ipfix, events, stats);
    }

    /// End of capture: delivers what is complete and counts the rest.
    pub(crate) fn finish(&mut self, events: &mut Events, stats: &mut CaptureStats) {
        self.defrag.finish(stats);
        self.tcp.finish(events, stats);
    }
}
