//! Output: IPFIX Messages as UDP datagrams in a classic pcap or a pcapng
//! capture (Ethernet II, IPv4 or IPv6, UDP with checksum, RFC 7011 §10.3:
//! one message per datagram), or back to back in an RFC 5655 IPFIX File.

use std::cell::Cell;
use std::io::Write;
use std::net::{IpAddr, SocketAddr};
use std::rc::Rc;
use std::time::Duration;

use anyhow::Context;
use etherparse::PacketBuilder;
use pcap_file::pcap::{PcapHeader, PcapPacket, PcapWriter};
use pcap_file::pcapng::blocks::enhanced_packet::EnhancedPacketBlock;
use pcap_file::pcapng::blocks::interface_description::{InterfaceDescriptionBlock, InterfaceDescriptionOption};
use pcap_file::pcapng::PcapNgWriter;
use pcap_file::{DataLink, Endianness, TsResolution};

/// The capture formats written.
#[derive(Debug, Clone, Copy, PartialEq, Eq, clap::ValueEnum)]
pub enum Format {
    /// Classic pcap (little-endian, microsecond timestamps, Ethernet).
    Pcap,
    /// pcapng (one Ethernet interface, nanosecond timestamps).
    Pcapng,
    /// RFC 5655 IPFIX File: the messages back to back, no packet headers.
    Ipfix,
}

impl Format {
    /// The format a file name's extension asks for.
    pub(crate) fn from_path(path: &std::path::Path) -> Option<Self> {
        match path.extension()?.to_str()?.to_ascii_lowercase().as_str() {
            "pcap" => Some(Self::Pcap),
            "pcapng" => Some(Self::Pcapng),
            "ipfix" => Some(Self::Ipfix),
            _ => None,
        }
    }

    /// The name used in `--format` and the ground truth.
    pub(crate) const fn name(self) -> &'static str {
        match self {
            Self::Pcap => "pcap",
            Self::Pcapng => "pcapng",
            Self::Ipfix => "ipfix",
        }
    }
}

/// Who sends a message to whom.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(crate) struct Endpoints {
    pub exporter: SocketAddr,
    pub collector: SocketAddr,
    pub exporter_mac: [u8; 6],
    pub collector_mac: [u8; 6],
}

/// Counts the octets that go through into a counter the
/// [`CaptureWriter`] shares (the pcap writer does not lend its writer).
#[derive(Debug)]
struct Counting<W> {
    inner: W,
    bytes: Rc<Cell<u64>>,
}

impl<W: Write> Write for Counting<W> {
    fn write(&mut self, buf: &[u8]) -> std::io::Result<usize> {
        let n = self.inner.write(buf)?;
        self.bytes.set(self.bytes.get() + n as u64);
        Ok(n)
    }
    fn flush(&mut self) -> std::io::Result<()> {
        self.inner.flush()
    }
}

enum Inner<W: Write> {
    Pcap(PcapWriter<Counting<W>>),
    Pcapng(PcapNgWriter<Counting<W>>),
    Ipfix(Counting<W>),
}

/// Writes IPFIX Messages into a capture, streaming.
pub(crate) struct CaptureWriter<W: Write> {
    inner: Inner<W>,
    frame: Vec<u8>,
    bytes: Rc<Cell<u64>>,
    /// Messages written.
    pub messages: u64,
}

/// Snap length: the largest frame is an IPFIX message of at most 65535
/// octets inside UDP, IPv6 and Ethernet headers.
const SNAPLEN: u32 = 65_535 + 14 + 40 + 8;

impl<W: Write> CaptureWriter<W> {
    /// Starts a capture of `format` on `out` (writing the file header).
    pub(crate) fn new(format: Format, out: W) -> anyhow::Result<Self> {
        let bytes = Rc::new(Cell::new(0));
        let out = Counting { inner: out, bytes: bytes.clone() };
        let inner = match format {
            Format::Pcap => {
                let header = PcapHeader {
                    version_major: 2,
                    version_minor: 4,
                    ts_correction: 0,
                    ts_accuracy: 0,
                    snaplen: SNAPLEN,
                    datalink: DataLink::ETHERNET,
                    ts_resolution: TsResolution::MicroSecond,
                    endianness: Endianness::Little,
                };
                Inner::Pcap(PcapWriter::with_header(out, header).context("writing the pcap header")?)
            }
            Format::Pcapng => {
                let mut writer = PcapNgWriter::with_endianness(out, Endianness::Little).context("writing the pcapng section header")?;
                // pcap-file writes Enhanced Packet Block timestamps in
                // nanoseconds, so the interface says so (if_tsresol = 9).
                let interface = InterfaceDescriptionBlock {
                    linktype: DataLink::ETHERNET,
                    snaplen: SNAPLEN,
                    options: vec![
                        InterfaceDescriptionOption::IfName("collector0".into()),
                        InterfaceDescriptionOption::IfDescription("flowsift synth: IPFIX over UDP toward the collector".into()),
                        InterfaceDescriptionOption::IfTsResol(9),
                    ],
                };
                writer.write_pcapng_block(interface).context("writing the pcapng interface block")?;
                Inner::Pcapng(writer)
            }
            Format::Ipfix => Inner::Ipfix(out),
        };
        Ok(Self { inner, frame: Vec::with_capacity(1600), bytes, messages: 0 })
    }

    /// Writes one message sent at `time_ns` (since the UNIX epoch).
    pub(crate) fn write_message(&mut self, endpoints: &Endpoints, time_ns: u64, message: &[u8]) -> anyhow::Result<()> {
        self.messages += 1;
        if let Inner::Ipfix(out) = &mut self.inner {
            return out.write_all(message).context("writing the ipfix file");
        }
        self.frame.clear();
        let link = PacketBuilder::ethernet2(endpoints.exporter_mac, endpoints.collector_mac);
        let (sport, dport) = (endpoints.exporter.port(), endpoints.collector.port());
        match (endpoints.exporter.ip(), endpoints.collector.ip()) {
            (IpAddr::V4(src), IpAddr::V4(dst)) => {
                link.ipv4(src.octets(), dst.octets(), 64).udp(sport, dport).write(&mut self.frame, message)
            }
            (src, dst) => link.ipv6(v6(src), v6(dst), 64).udp(sport, dport).write(&mut self.frame, message),
        }
        .context("building the packet")?;
        let timestamp = Duration::from_nanos(time_ns);
        let len = u32::try_from(self.frame.len()).context("frame too large")?;
        match &mut self.inner {
            Inner::Pcap(w) => {
                w.write_packet(&PcapPacket::new(timestamp, len, &self.frame)).context("writing a pcap record")?;
            }
            Inner::Pcapng(w) => {
                let block = EnhancedPacketBlock { interface_id: 0, timestamp, original_len: len, data: self.frame.as_slice().into(), options: vec![] };
                w.write_pcapng_block(block).context("writing a pcapng block")?;
            }
            Inner::Ipfix(_) => {}
        }
        Ok(())
    }

    /// Octets written so far.
    pub(crate) fn bytes(&self) -> u64 {
        self.bytes.get()
    }

    /// Flushes and returns the underlying writer.
    pub(crate) fn finish(self) -> anyhow::Result<W> {
        let mut out = match self.inner {
            Inner::Pcap(w) => w.into_writer(),
            Inner::Pcapng(w) => w.into_inner(),
            Inner::Ipfix(w) => w,
        };
        out.flush().context("flushing the capture")?;
        Ok(out.inner)
    }
}

fn v6(a: IpAddr) -> [u8; 16] {
    match a {
        IpAddr::V6(a) => a.octets(),
        IpAddr::V4(a) => a.to_ipv6_mapped().octets(),
    }
}
