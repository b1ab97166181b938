//! Capture readers: from a packet capture or an IPFIX File to a stream of
//! IPFIX Messages tagged with their Transport Session and receive time.
//!
//! [`CaptureReader`] sniffs its input by content ([`detect`]) and reads
//!
//! - classic pcap (both byte orders, micro- and nanosecond timestamps) and
//!   pcapng (several sections and interfaces, each with its own link type
//!   and timestamp resolution; Enhanced and Simple Packet Blocks), framed by
//!   `pcap-parser`;
//! - RFC 5655 IPFIX Files (messages back to back), resynchronising after
//!   damage as RFC 5655 §10.3 describes.
//!
//! Packets go through the link layer (Ethernet II with 802.1Q/802.1ad
//! tags, raw IP, Linux cooked capture v1 and v2, BSD loopback), IPv4 or IPv6
//! with bounded fragment reassembly, then UDP (one datagram = one message,
//! RFC 7011 §10.3) or TCP (per-direction stream reassembly, messages framed
//! by the header Length, RFC 7011 §10.4.3). Header parsing is `etherparse`'s.
//!
//! The reader does not judge message contents: the sans-IO decoder does.
//! It never panics on input, keeps memory bounded ([`CaptureOptions`]),
//! drives every timeout from capture timestamps (never the wall clock), and
//! counts everything it skips, with a reason, in [`CaptureStats`].
//!
//! # Example
//!
//! Build a one-packet pcap in memory (raw IP link type) holding a UDP
//! datagram with a header-only IPFIX Message, and read it back:
//!
//! ```
//! use ipfix_core::capture::{CaptureEvent, CaptureOptions, CaptureReader, InputFormat};
//! use ipfix_core::Transport;
//!
//! // IPFIX Message Header (RFC 7011 §3.1): version 10, length 16, export
//! // time, sequence number, observation domain.
//! let message = [0, 10, 0, 16, 0x65, 0x53, 0xf1, 0, 0, 0, 0, 1, 0, 0, 0, 7];
//! let mut packet = Vec::new();
//! etherparse::PacketBuilder::ipv4([192, 0, 2, 1], [198, 51, 100, 2], 64)
//!     .udp(50000, 4739)
//!     .write(&mut packet, &message)?;
//!
//! // Classic pcap, little endian: file header (magic for microsecond
//! // timestamps, version 2.4, zone, sigfigs, snaplen, LINKTYPE_RAW = 101),
//! // then one record header (seconds, microseconds, captured and original
//! // length) and the packet.
//! let mut pcap = Vec::new();
//! pcap.extend(0xa1b2_c3d4u32.to_le_bytes());
//! pcap.extend(2u16.to_le_bytes());
//! pcap.extend(4u16.to_le_bytes());
//! let len = packet.len() as u32;
//! for v in [0, 0, 65535, 101, 1_700_000_000, 250_000, len, len] {
//!     pcap.extend(u32::to_le_bytes(v));
//! }
//! pcap.extend(&packet);
//!
//! let mut reader = CaptureReader::new(&pcap[..], 0, CaptureOptions::default())?;
//! assert_eq!(reader.format(), InputFormat::Pcap);
//! match reader.next_event() {
//!     Some(Ok(CaptureEvent::Message { session, received, data })) => {
//!         assert_eq!(session.transport, Transport::Udp);
//!         assert_eq!(session.exporter, Some("192.0.2.1:50000".parse()?));
//!         assert_eq!(received.map(|t| t.as_millis()), Some(1_700_000_000_250));
//!         assert_eq!(data, message);
//!     }
//!     other => panic!("unexpected {other:?}"),
//! }
//! assert!(reader.next_event().is_none());
//! assert_eq!(reader.stats().ipfix_payloads, 1);
//! # Ok::<(), Box<dyn std::error::Error>>(())
//! ```

use std::collections::VecDeque;
use std::io::Read;
use std::time::Duration;

use crate::transport::TransportSession;

mod error;
mod frame;
mod input;
mod ip;
mod ipfix_file;
mod link;
mod packet;
mod pcap;
mod sniff;
mod stats;
mod tcp;
#[cfg(test)]
mod test_util;
#[cfg(test)]
mod tests;

pub use error::{CaptureError, Compression};
pub use sniff::{detect, InputFormat, SNIFF_LEN};
pub use stats::{CaptureStats, SkipReason};

use input::Input;
use ipfix_file::IpfixFile;
use packet::PacketDecoder;
use pcap::{PcapFile, PcapNgFile, Record};

/// The IANA-assigned IPFIX port (RFC 7011 §10.1).
pub const IPFIX_PORT: u16 = 4739;

/// Which UDP and TCP traffic is taken as IPFIX.
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub enum PortFilter {
    /// Any port. A UDP datagram is IPFIX if its payload is exactly one
    /// message (version 10 and header Length equal to the payload length,
    /// RFC 7011 §3.1, §10.3); a TCP stream if it starts with a plausible
    /// Message Header (or, seen without its SYN, contains confirmed ones).
    #[default]
    Any,
    /// Only traffic to or from these ports; it is passed on even when
    /// malformed, for the decoder to judge and count.
    Only(Vec<u16>),
}

impl PortFilter {
    /// The IANA port only: `Only(vec![4739])` (RFC 7011 §10.1).
    pub fn ipfix_port() -> Self {
        Self::Only(vec![IPFIX_PORT])
    }

    /// True if either port passes the filter.
    pub fn matches(&self, a: u16, b: u16) -> bool {
        match self {
            Self::Any => true,
            Self::Only(ports) => ports.contains(&a) || ports.contains(&b),
        }
    }
}

/// Limits and filters of a [`CaptureReader`]. All memory the reader uses
/// is bounded by these numbers.
#[derive(Debug, Clone, PartialEq, Eq)]
#[non_exhaustive]
pub struct CaptureOptions {
    /// Which traffic is IPFIX.
    pub ports: PortFilter,
    /// Memory for IP datagrams under reassembly, all together (each is
    /// charged its buffer plus a small overhead). When full, the oldest are
    /// dropped and counted as `fragment-evicted`.
    pub max_reassembly_bytes: usize,
    /// An IP datagram still incomplete this long (capture time) after its
    /// first fragment is dropped and counted as `fragment-expired`.
    pub fragment_timeout: Duration,
    /// Memory for out-of-order TCP segments of all streams together. When a
    /// segment does not fit, the stream's first hole is given up as lost.
    /// (Each stream also holds at most one incomplete message, at most
    /// 65,535 octets, in order.)
    pub tcp_max_buffered_bytes: usize,
    /// TCP streams (connection directions) tracked at once; the least
    /// recently active is dropped, with a `SessionEnded`, to make room.
    pub tcp_max_streams: usize,
    /// A TCP stream silent this long (capture time) is dropped, with a
    /// `SessionEnded` if it carried IPFIX.
    pub tcp_idle_timeout: Duration,
    /// Largest container record (pcap record, pcapng block) accepted; a
    /// larger one ends reading with [`CaptureError::RecordTooLarge`].
    pub max_record_bytes: usize,
}

impl Default for CaptureOptions {
    fn default() -> Self {
        Self {
            ports: PortFilter::Any,
            max_reassembly_bytes: 8 << 20,
            fragment_timeout: Duration::from_secs(30),
            tcp_max_buffered_bytes: 32 << 20,
            tcp_max_streams: 4096,
            tcp_idle_timeout: Duration::from_secs(3600),
            max_record_bytes: 16 << 20,
        }
    }
}

impl CaptureOptions {
    /// Replaces the port filter.
    pub fn with_ports(mut self, ports: PortFilter) -> Self {
        self.ports = ports;
        self
    }
}

/// What a [`CaptureReader`] yields.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum CaptureEvent {
    /// Exactly one candidate IPFIX Message: one UDP datagram payload
    /// (RFC 7011 §10.3), one message framed by the header Length on a TCP
    /// stream (RFC 7011 §10.4.3), or one message of an RFC 5655 file.
    Message {
        /// Exporter, collector and protocol (RFC 7011 §2); for a file,
        /// `TransportSession::file(file_instance)`.
        session: TransportSession,
        /// Capture time since the UNIX epoch of the packet that completed
        /// the message; `None` for RFC 5655 files and for packets without a
        /// timestamp (pcapng Simple Packet Blocks).
        received: Option<Duration>,
        /// The message octets.
        data: Vec<u8>,
    },
    /// A TCP connection ended (FIN or RST), was replaced (a new SYN on the
    /// same addresses and ports) or was dropped by a limit: the session's
    /// templates must be dropped (RFC 7011 §8). Only sent for sessions that
    /// delivered at least one message.
    SessionEnded {
        /// The session that ended.
        session: TransportSession,
    },
}

impl CaptureEvent {
    /// The Transport Session the event belongs to.
    pub fn session(&self) -> &TransportSession {
        match self {
            Self::Message { session, .. } | Self::SessionEnded { session } => session,
        }
    }
}

#[derive(Debug)]
enum Source {
    Pcap(PcapFile),
    PcapNg(PcapNgFile),
    Ipfix(IpfixFile),
}

/// Reads a capture or IPFIX File and yields [`CaptureEvent`]s.
///
/// Errors that end reading are yielded once, after every event that came
/// before them; then the reader ends. A truncated input thus yields all it
/// could, then one [`CaptureError::Truncated`] naming the offset of the cut.
#[derive(Debug)]
pub struct CaptureReader<R: Read> {
    input: Input<R>,
    format: InputFormat,
    source: Source,
    decoder: PacketDecoder,
    session: TransportSession,
    max_record_bytes: usize,
    queue: VecDeque<Result<CaptureEvent, CaptureError>>,
    stats: CaptureStats,
    done: bool,
}

impl<R: Read> CaptureReader<R> {
    /// Sniffs the format from the first octets (see [`detect`]) and reads
    /// any file header. `file_instance` becomes the
    /// [`TransportSession::instance`] of an RFC 5655 file's messages, so
    /// that several files never share template state.
    pub fn new(reader: R, file_instance: u32, options: CaptureOptions) -> Result<Self, CaptureError> {
        let mut input = Input::new(reader);
        input.fill(SNIFF_LEN)?;
        let format = detect(input.data().get(..SNIFF_LEN).unwrap_or(input.data()))?;
        let source = match format {
            InputFormat::Pcap => Source::Pcap(PcapFile::open(&mut input)?),
            InputFormat::PcapNg => Source::PcapNg(PcapNgFile::new()),
            InputFormat::IpfixFile => Source::Ipfix(IpfixFile::new()),
        };
        Ok(Self {
            input,
            format,
            source,
            decoder: PacketDecoder::new(&options),
            session: TransportSession::file(file_instance),
            max_record_bytes: options.max_record_bytes,
            queue: VecDeque::new(),
            stats: CaptureStats::default(),
            done: false,
        })
    }

    /// The detected input format.
    pub fn format(&self) -> InputFormat {
        self.format
    }

    /// Counters so far.
    pub fn stats(&self) -> &CaptureStats {
        &self.stats
    }

    /// Octets read from the input so far (for progress reporting).
    pub fn bytes_read(&self) -> u64 {
        self.input.bytes_read()
    }

    /// The next event; `None` once the input is exhausted (or after an
    /// error that ends reading).
    pub fn next_event(&mut self) -> Option<Result<CaptureEvent, CaptureError>> {
        loop {
            if let Some(e) = self.queue.pop_front() {
                return Some(e);
            }
            if self.done {
                return None;
            }
            self.step();
        }
    }

    /// Reads one record (or one file message) and queues what it yields.
    fn step(&mut self) {
        let Self { input, source, decoder, queue, stats, max_record_bytes, session, .. } = self;
        let result = match source {
            Source::Pcap(pcap) => match pcap.next_len(input, *max_record_bytes) {
                Ok(Some(n)) => {
                    let offset = input.offset();
                    let r = pcap.record(input.data().get(..n).unwrap_or(&[]), offset).map(|rec| {
                        if let Record::Packet(p) = rec {
                            decoder.packet(&p, queue, stats);
                        }
                    });
                    input.consume(n);
                    r.map(|()| true)
                }
                Ok(None) => Ok(false),
                Err(e) => Err(e),
            },
            Source::PcapNg(ng) => match ng.next_len(input, *max_record_bytes) {
                Ok(Some(n)) => {
                    match ng.record(input.data().get(..n).unwrap_or(&[])) {
                        Record::Packet(p) => decoder.packet(&p, queue, stats),
                        Record::SkippedPacket(reason) => {
                            stats.packets += 1;
                            stats.skip(reason);
                        }
                        Record::Other { counted } => stats.other_blocks += u64::from(counted),
                    }
                    input.consume(n);
                    Ok(true)
                }
                Ok(None) => Ok(false),
                Err(e) => Err(e),
            },
            Source::Ipfix(file) => match file.next_message(input, stats) {
                Ok(Some(data)) => {
                    stats.ipfix_payloads += 1;
                    queue.push_back(Ok(CaptureEvent::Message { session: *session, received: None, data }));
                    Ok(true)
                }
                Ok(None) => Ok(false),
                Err(e) => Err(e),
            },
        };
        match result {
            Ok(true) => {}
            Ok(false) => {
                self.decoder.finish(&mut self.queue, &mut self.stats);
                self.done = true;
            }
            Err(e) => {
                // Deliver everything that came before the error, then it.
                self.decoder.finish(&mut self.queue, &mut self.stats);
                if let CaptureError::Truncated { offset, .. } = &e {
                    self.stats.truncated_at = Some(*offset);
                }
                self.queue.push_back(Err(e));
                self.done = true;
            }
        }
    }
}

impl<R: Read> Iterator for CaptureReader<R> {
    type Item = Result<CaptureEvent, CaptureError>;

    fn next(&mut self) -> Option<Self::Item> {
        self.next_event()
    }
}
