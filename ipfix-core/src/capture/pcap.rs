//! Packet records of classic pcap and pcapng files, parsed by `pcap-parser`.
//!
//! This module only frames records and turns their timestamps into
//! [`Duration`]s since the UNIX epoch; link layers are decoded in `link`.
//! Records are measured first (so a record that claims more octets than
//! [`CaptureOptions::max_record_bytes`](super::CaptureOptions::max_record_bytes)
//! is refused before it is buffered), then parsed from the buffer.

use std::io::Read;
use std::time::Duration;

use nom::{IResult, Needed};
use pcap_parser::pcapng::{Block, EnhancedPacketBlock, InterfaceDescriptionBlock, SimplePacketBlock};
use pcap_parser::{LegacyPcapBlock, PcapError, PcapHeader};

use super::error::CaptureError;
use super::input::Input;
use super::stats::SkipReason;

/// Interfaces remembered per pcapng section; more are counted and ignored so
/// that a hostile file cannot grow this table without bound.
pub(crate) const MAX_INTERFACES: usize = 4096;

/// One captured packet, borrowed from the input buffer.
#[derive(Debug, Clone, Copy)]
pub(crate) struct Packet<'a> {
    /// pcapng interface id (0 for classic pcap).
    pub(crate) interface: u32,
    /// LINKTYPE_ value of the interface.
    pub(crate) linktype: u32,
    /// Capture time since the UNIX epoch; `None` when the format has none
    /// (pcapng Simple Packet Block) or it does not fit.
    pub(crate) timestamp: Option<Duration>,
    /// The captured octets.
    pub(crate) data: &'a [u8],
    /// True when fewer octets were captured than the packet had.
    pub(crate) cut: bool,
}

/// What one container record turned out to be.
#[derive(Debug)]
pub(crate) enum Record<'a> {
    /// A packet to decode.
    Packet(Packet<'a>),
    /// A packet record that cannot be used, with the reason.
    SkippedPacket(SkipReason),
    /// A record that carries no packet (section or interface description,
    /// statistics, …).
    Other { counted: bool },
}

/// Result of trying a streaming parser on the buffered data.
enum Parsed {
    /// A whole record of this many octets is buffered.
    Len(usize),
    /// The record needs at least this many octets in total.
    Need(usize),
    /// The parser refused the data.
    Bad,
}

fn classify<T>(data: &[u8], r: IResult<&[u8], T, PcapError<&[u8]>>) -> Parsed {
    match r {
        Ok((rest, _)) => Parsed::Len(data.len().saturating_sub(rest.len())),
        Err(nom::Err::Incomplete(Needed::Size(n))) => Parsed::Need(data.len().saturating_add(n.get())),
        Err(nom::Err::Incomplete(Needed::Unknown)) => Parsed::Need(data.len().saturating_add(1)),
        Err(_) => Parsed::Bad,
    }
}

/// Buffers one whole record. `Ok(None)` is a clean end of input.
fn measure<R: Read>(
    input: &mut Input<R>,
    max: usize,
    what: &'static str,
    parse: impl Fn(&[u8]) -> Parsed,
) -> Result<Option<usize>, CaptureError> {
    loop {
        let need = match parse(input.data()) {
            Parsed::Len(n) if n <= max => return Ok(Some(n)),
            Parsed::Len(n) => n,
            Parsed::Need(n) => n,
            Parsed::Bad => {
                return Err(CaptureError::BadHeader { offset: input.offset(), what, reason: "the record is malformed" })
            }
        };
        if need > max {
            return Err(CaptureError::RecordTooLarge { offset: input.offset(), what, length: need as u64, limit: max });
        }
        if !input.fill(need)? {
            if input.data().is_empty() {
                return Ok(None);
            }
            return Err(CaptureError::Truncated { offset: input.offset(), what });
        }
    }
}

/// Nanoseconds to a `Duration` without overflow.
fn duration(secs: u64, nanos: u64) -> Duration {
    Duration::from_secs(secs).saturating_add(Duration::from_nanos(nanos))
}

// ---------------------------------------------------------------- classic pcap

type FrameParser = fn(&[u8]) -> IResult<&[u8], LegacyPcapBlock<'_>, PcapError<&[u8]>>;

/// State of a classic pcap file after its file header.
#[derive(Debug)]
pub(crate) struct PcapFile {
    parse: FrameParser,
    linktype: u32,
    nanos: bool,
}

impl PcapFile {
    /// Reads the 24-octet file header.
    pub(crate) fn open<R: Read>(input: &mut Input<R>) -> Result<Self, CaptureError> {
        const WHAT: &str = "pcap file header";
        if !input.fill(24)? {
            return Err(CaptureError::Truncated { offset: input.offset(), what: WHAT });
        }
        let header: PcapHeader = match pcap_parser::parse_pcap_header(input.data()) {
            Ok((_, h)) => h,
            Err(_) => {
                return Err(CaptureError::BadHeader { offset: input.offset(), what: WHAT, reason: "unknown magic number" })
            }
        };
        let parse: FrameParser = if header.is_modified_format() {
            pcap_parser::parse_pcap_frame_modified
        } else if header.is_bigendian() {
            pcap_parser::parse_pcap_frame_be
        } else {
            pcap_parser::parse_pcap_frame
        };
        input.consume(header.size());
        // The link type field keeps the LINKTYPE_ value in its low 16 bits;
        // the upper bits may describe an FCS (draft-ietf-opsawg-pcap §4;
        // from memory, unconfirmed).
        let linktype = (header.network.0 as u32) & 0xffff;
        Ok(Self { parse, linktype, nanos: header.is_nanosecond_precision() })
    }

    /// Buffers the next packet record; returns its length, `None` at the end.
    pub(crate) fn next_len<R: Read>(&self, input: &mut Input<R>, max: usize) -> Result<Option<usize>, CaptureError> {
        let parse = self.parse;
        measure(input, max, "pcap packet record", |d| classify(d, parse(d)))
    }

    /// Parses a record that `next_len` measured.
    pub(crate) fn record<'a>(&self, data: &'a [u8], offset: u64) -> Result<Record<'a>, CaptureError> {
        let (_, frame) = (self.parse)(data).map_err(|_| CaptureError::BadHeader {
            offset,
            what: "pcap packet record",
            reason: "the record is malformed",
        })?;
        let frac = u64::from(frame.ts_usec);
        let nanos = if self.nanos { frac } else { frac.saturating_mul(1000) };
        Ok(Record::Packet(Packet {
            interface: 0,
            linktype: self.linktype,
            timestamp: Some(duration(u64::from(frame.ts_sec), nanos)),
            data: frame.data,
            cut: frame.origlen > frame.caplen,
        }))
    }
}

// ---------------------------------------------------------------------- pcapng

/// What a pcapng reader keeps of an Interface Description Block.
#[derive(Debug, Clone, Copy)]
struct Interface {
    linktype: u32,
    snaplen: u32,
    /// Timestamp units per second (`if_tsresol`), `None` if invalid.
    units_per_sec: Option<u64>,
    /// `if_tsoffset`: seconds added to every timestamp.
    offset_secs: i64,
}

/// Timestamp units per second from `if_tsresol` (draft-ietf-opsawg-pcapng
/// §4.2; from memory, unconfirmed): top bit clear = 10^-n s, top bit set =
/// 2^-n s. Computed here because pcap-parser 0.17's helper refuses every
/// value with the top bit set.
fn units_per_sec(tsresol: u8) -> Option<u64> {
    let n = u32::from(tsresol & 0x7f);
    if tsresol & 0x80 == 0 {
        10u64.checked_pow(n)
    } else {
        1u64.checked_shl(n).filter(|_| n < 64)
    }
}

/// State of a pcapng file: current section byte order and its interfaces.
#[derive(Debug, Default)]
pub(crate) struct PcapNgFile {
    big_endian: bool,
    interfaces: Vec<Interface>,
}

fn parse_block(big_endian: bool, data: &[u8]) -> IResult<&[u8], Block<'_>, PcapError<&[u8]>> {
    if big_endian {
        pcap_parser::pcapng::parse_block_be(data)
    } else {
        pcap_parser::pcapng::parse_block_le(data)
    }
}

impl PcapNgFile {
    pub(crate) fn new() -> Self {
        Self::default()
    }

    /// Buffers the next block; returns its length, `None` at the end.
    ///
    /// A block that `pcap-parser` refuses but whose generic header (type and
    /// Block Total Length, draft-ietf-opsawg-pcapng §3.1; from memory,
    /// unconfirmed) is sane is still measured, so the caller can step over it.
    pub(crate) fn next_len<R: Read>(&self, input: &mut Input<R>, max: usize) -> Result<Option<usize>, CaptureError> {
        let be = self.big_endian;
        measure(input, max, "pcapng block", |d| match classify(d, parse_block(be, d)) {
            Parsed::Bad => match self.generic_len(d) {
                Some(n) if n <= d.len() => Parsed::Len(n),
                Some(n) => Parsed::Need(n),
                None => Parsed::Bad,
            },
            // pcap-parser also answers "incomplete" for a block whose fields
            // point past its own end; once the whole block is buffered that
            // means damage.
            Parsed::Need(n) => match self.generic_len(d) {
                Some(g) if g <= d.len() => Parsed::Len(g),
                _ => Parsed::Need(n),
            },
            other => other,
        })
    }

    /// Block Total Length from the generic block header, if plausible
    /// (at least 12 octets and a multiple of 4).
    fn generic_len(&self, d: &[u8]) -> Option<usize> {
        let raw: [u8; 4] = d.get(4..8)?.try_into().ok()?;
        let n = if self.big_endian { u32::from_be_bytes(raw) } else { u32::from_le_bytes(raw) };
        (n >= 12 && n % 4 == 0).then_some(n as usize)
    }

    /// Parses a block that `next_len` measured.
    pub(crate) fn record<'a>(&mut self, data: &'a [u8]) -> Record<'a> {
        let block = match parse_block(self.big_endian, data) {
            Ok((_, b)) => b,
            // Measured by its generic header only: a damaged block.
            Err(_) => return Record::SkippedPacket(SkipReason::BadCaptureBlock),
        };
        match block {
            Block::SectionHeader(shb) => {
                self.big_endian = shb.big_endian();
                self.interfaces.clear();
                Record::Other { counted: false }
            }
            Block::InterfaceDescription(idb) => {
                self.add_interface(&idb);
                Record::Other { counted: false }
            }
            Block::EnhancedPacket(epb) => self.enhanced(&epb),
            Block::SimplePacket(spb) => self.simple(&spb),
            _ => Record::Other { counted: true },
        }
    }

    fn add_interface(&mut self, idb: &InterfaceDescriptionBlock<'_>) {
        if self.interfaces.len() < MAX_INTERFACES {
            self.interfaces.push(Interface {
                linktype: (idb.linktype.0 as u32) & 0xffff,
                snaplen: idb.snaplen,
                units_per_sec: units_per_sec(idb.if_tsresol),
                offset_secs: idb.ts_offset(),
            });
        }
    }

    fn enhanced<'a>(&self, epb: &EnhancedPacketBlock<'a>) -> Record<'a> {
        let Some(ifc) = usize::try_from(epb.if_id).ok().and_then(|i| self.interfaces.get(i)) else {
            return Record::SkippedPacket(SkipReason::UnknownInterface);
        };
        // draft-ietf-opsawg-pcapng §4.3 (from memory, unconfirmed): the
        // 64-bit timestamp counts if_tsresol units since 1970, plus
        // if_tsoffset seconds.
        let ts = (u64::from(epb.ts_high) << 32) | u64::from(epb.ts_low);
        let timestamp = ifc.units_per_sec.and_then(|units| {
            let secs = ts / units;
            let nanos = (u128::from(ts % units) * 1_000_000_000 / u128::from(units)) as u64;
            let secs = secs.checked_add_signed(ifc.offset_secs)?;
            Some(duration(secs, nanos))
        });
        // Captured octets without the 32-bit padding.
        let raw: &'a [u8] = epb.data;
        let data = raw.get(..epb.caplen as usize).unwrap_or(raw);
        Record::Packet(Packet {
            interface: epb.if_id,
            linktype: ifc.linktype,
            timestamp,
            data,
            cut: epb.origlen as usize > data.len(),
        })
    }

    fn simple<'a>(&self, spb: &SimplePacketBlock<'a>) -> Record<'a> {
        // draft-ietf-opsawg-pcapng §4.4 (from memory, unconfirmed): an SPB
        // belongs to the first interface and carries min(original length,
        // snaplen) octets, then padding; it has no timestamp.
        let Some(ifc) = self.interfaces.first() else {
            return Record::SkippedPacket(SkipReason::UnknownInterface);
        };
        let raw: &'a [u8] = spb.data;
        let mut keep = raw.len().min(spb.origlen as usize);
        if ifc.snaplen > 0 {
            keep = keep.min(ifc.snaplen as usize);
        }
        let data = raw.get(..keep).unwrap_or(raw);
        Record::Packet(Packet {
            interface: 0,
            linktype: ifc.linktype,
            timestamp: None,
            data,
            cut: spb.origlen as usize > data.len(),
        })
    }
}

#[cfg(test)]
#[allow(clippy::indexing_slicing, clippy::unwrap_used)]
mod tests {
    use super::*;
    use crate::capture::test_util::{PcapNgWriter, PcapWriter};

    fn records_pcap(bytes: &[u8]) -> Vec<(Option<Duration>, Vec<u8>, bool)> {
        let mut input = Input::new(bytes);
        let pcap = PcapFile::open(&mut input).expect("header");
        let mut out = Vec::new();
        while let Some(n) = pcap.next_len(&mut input, 1 << 20).expect("record") {
            let rec = pcap.record(input.data().get(..n).expect("measured"), input.offset()).expect("parse");
            if let Record::Packet(p) = rec {
                out.push((p.timestamp, p.data.to_vec(), p.cut));
            }
            input.consume(n);
        }
        out
    }

    #[test]
    fn pcap_both_byte_orders_and_resolutions() {
        // Classic pcap file header and record header layout
        // (draft-ietf-opsawg-pcap §4, §5; from memory, unconfirmed).
        for big_endian in [false, true] {
            for nanos in [false, true] {
                let mut w = PcapWriter::new(1, big_endian, nanos);
                w.packet(Duration::new(1_700_000_000, 123_456_789), b"abc", 3);
                w.packet(Duration::new(1_700_000_001, 5_000), b"defg", 10);
                let recs = records_pcap(&w.finish());
                assert_eq!(recs.len(), 2, "be={big_endian} ns={nanos}");
                let want_ns = if nanos { 123_456_789 } else { 123_456_000 };
                assert_eq!(recs[0].0, Some(Duration::new(1_700_000_000, want_ns)));
                assert_eq!(recs[0].1, b"abc");
                assert!(!recs[0].2);
                assert_eq!(recs[1].0, Some(Duration::new(1_700_000_001, 5_000)));
                assert!(recs[1].2, "origlen 10 > caplen 4 means cut");
            }
        }
    }

    #[test]
    fn pcap_truncated_record_reports_offset() {
        let mut w = PcapWriter::new(1, false, false);
        w.packet(Duration::from_secs(1), &[1; 20], 20);
        w.packet(Duration::from_secs(2), &[2; 20], 20);
        let mut bytes = w.finish();
        bytes.truncate(bytes.len() - 5);
        let mut input = Input::new(&bytes[..]);
        let pcap = PcapFile::open(&mut input).expect("header");
        let n = pcap.next_len(&mut input, 1 << 20).expect("first").expect("some");
        input.consume(n);
        match pcap.next_len(&mut input, 1 << 20) {
            Err(CaptureError::Truncated { offset, .. }) => assert_eq!(offset, 24 + 16 + 20),
            other => panic!("unexpected {other:?}"),
        }
    }

    #[test]
    fn pcap_record_too_large_is_refused() {
        let mut w = PcapWriter::new(1, false, false);
        w.packet(Duration::from_secs(1), &[0; 100], 100);
        let bytes = w.finish();
        let mut input = Input::new(&bytes[..]);
        let pcap = PcapFile::open(&mut input).expect("header");
        assert!(matches!(pcap.next_len(&mut input, 64), Err(CaptureError::RecordTooLarge { length: 116, .. })));
    }

    #[test]
    fn pcapng_interfaces_resolutions_and_spb() {
        for big_endian in [false, true] {
            let mut w = PcapNgWriter::new(big_endian);
            w.interface(1, 0, None); // default if_tsresol: microseconds
            w.interface(101, 0, Some(9)); // nanoseconds
            w.interface(113, 8, Some(0x80 | 10)); // 2^-10 s units, snaplen 8
            w.enhanced(0, 1_700_000_000_250_000, b"one", 3);
            w.enhanced(1, 1_700_000_000_000_000_123, b"two", 3);
            w.enhanced(2, 5 * 1024 + 512, b"three", 5);
            w.simple(b"0123456789", 10);
            w.enhanced(7, 0, b"none", 4);
            let bytes = w.finish();
            let mut input = Input::new(&bytes[..]);
            let mut ng = PcapNgFile::new();
            let mut out = Vec::new();
            while let Some(n) = ng.next_len(&mut input, 1 << 20).expect("block") {
                match ng.record(input.data().get(..n).expect("measured")) {
                    Record::Packet(p) => out.push(Ok((p.linktype, p.timestamp, p.data.to_vec()))),
                    Record::SkippedPacket(r) => out.push(Err(r)),
                    Record::Other { .. } => {}
                }
                input.consume(n);
            }
            assert_eq!(out.len(), 5, "be={big_endian}");
            assert_eq!(out[0], Ok((1, Some(Duration::new(1_700_000_000, 250_000_000)), b"one".to_vec())));
            assert_eq!(out[1], Ok((101, Some(Duration::new(1_700_000_000, 123)), b"two".to_vec())));
            assert_eq!(out[2], Ok((113, Some(Duration::new(5, 500_000_000)), b"three".to_vec())));
            // SPB: first interface, no timestamp; limited by its snaplen (0 = none).
            assert_eq!(out[3], Ok((1, None, b"0123456789".to_vec())));
            assert_eq!(out[4], Err(SkipReason::UnknownInterface));
        }
    }
}
