//! Recognises the input format by its first octets, never by file name.

use super::error::{CaptureError, Compression};

/// A container format the capture reader understands.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, serde::Serialize)]
#[serde(rename_all = "kebab-case")]
pub enum InputFormat {
    /// Classic pcap (either byte order, micro- or nanosecond timestamps).
    Pcap,
    /// pcapng (any number of sections and interfaces).
    PcapNg,
    /// An uncompressed IPFIX File (RFC 5655): IPFIX Messages back to back.
    IpfixFile,
}

impl InputFormat {
    /// Lower-case name.
    pub const fn name(self) -> &'static str {
        match self {
            Self::Pcap => "pcap",
            Self::PcapNg => "pcapng",
            Self::IpfixFile => "ipfix-file",
        }
    }
}

/// Octets `detect` looks at; fewer are enough when the input is shorter.
pub const SNIFF_LEN: usize = 8;

// Classic pcap magic numbers as they appear in the first four octets
// (file header, draft-ietf-opsawg-pcap §4; from memory, unconfirmed):
// a1b2c3d4 = microseconds, a1b23c4d = nanoseconds, each in either byte order;
// a1b2cd34 is the "modified" variant some old capture tools wrote
// (pcap-parser reads it in little-endian order only).
const PCAP_MAGICS: [[u8; 4]; 5] = [
    [0xa1, 0xb2, 0xc3, 0xd4],
    [0xd4, 0xc3, 0xb2, 0xa1],
    [0xa1, 0xb2, 0x3c, 0x4d],
    [0x4d, 0x3c, 0xb2, 0xa1],
    [0x34, 0xcd, 0xb2, 0xa1],
];
// pcapng Section Header Block type, a palindrome so it reads the same in both
// byte orders (draft-ietf-opsawg-pcapng §4.1; from memory, unconfirmed).
const PCAPNG_SHB: [u8; 4] = [0x0a, 0x0d, 0x0d, 0x0a];

/// Recognises the input format from its first octets (up to [`SNIFF_LEN`]).
///
/// Detection is by content, as RFC 5655 §10.1 asks of IPFIX File readers:
/// an uncompressed IPFIX file starts with the Version field 0x000a of its
/// first Message Header (RFC 7011 §3.1) followed by a Length of at least 16;
/// gzip (`1f 8b`) and bzip2 (`BZh`) are recognised and refused with
/// [`CaptureError::CompressedIpfixFile`] (RFC 5655 §10.2). Anything else is
/// [`CaptureError::UnknownFormat`] with a short description of what the
/// octets look like.
///
/// ```
/// use ipfix_core::capture::{detect, InputFormat};
/// assert_eq!(detect(&[0xd4, 0xc3, 0xb2, 0xa1]).unwrap(), InputFormat::Pcap);
/// assert_eq!(detect(&[0x00, 0x0a, 0x00, 0x10]).unwrap(), InputFormat::IpfixFile);
/// assert!(detect(b"hello").unwrap_err().to_string().contains("looks like text"));
/// ```
pub fn detect(first_bytes: &[u8]) -> Result<InputFormat, CaptureError> {
    let head = first_bytes.get(..4);
    if let Some(head) = head {
        if PCAP_MAGICS.iter().any(|m| m == head) {
            return Ok(InputFormat::Pcap);
        }
        if head == PCAPNG_SHB {
            return Ok(InputFormat::PcapNg);
        }
    }
    if let Some(kind) = compression(first_bytes) {
        return Err(CaptureError::CompressedIpfixFile { kind });
    }
    if let Some(&[0x00, 0x0a, hi, lo]) = head {
        // RFC 7011 §3.1: Length counts the whole message, header included,
        // so anything below 16 cannot be a first message.
        if u16::from_be_bytes([hi, lo]) >= 16 {
            return Ok(InputFormat::IpfixFile);
        }
        return Err(unknown(first_bytes, "starts with IPFIX version 10 but a message length below 16"));
    }
    Err(unknown(first_bytes, looks_like(first_bytes)))
}

fn compression(b: &[u8]) -> Option<Compression> {
    if b.starts_with(&[0x1f, 0x8b]) {
        Some(Compression::Gzip)
    } else if b.starts_with(b"BZh") {
        Some(Compression::Bzip2)
    } else if b.starts_with(&[0xfd, 0x37, 0x7a, 0x58, 0x5a, 0x00]) {
        Some(Compression::Xz)
    } else if b.starts_with(&[0x28, 0xb5, 0x2f, 0xfd]) {
        Some(Compression::Zstd)
    } else {
        None
    }
}

fn looks_like(b: &[u8]) -> &'static str {
    match b {
        [] => "the input is empty",
        [_] | [_, _] | [_, _, _] => "too short to tell (fewer than 4 octets)",
        [0x00, 0x01..=0x09, ..] => "looks like a flow export with a version before 10 (not IPFIX)",
        [b'P', b'K', 0x03, 0x04, ..] => "looks like a zip archive",
        [0x7f, b'E', b'L', b'F', ..] => "looks like an executable",
        _ if b.iter().all(|&c| c.is_ascii_graphic() || c.is_ascii_whitespace()) => "looks like text",
        _ => "unrecognised binary data",
    }
}

fn unknown(b: &[u8], looks_like: &'static str) -> CaptureError {
    let mut first_bytes = [0u8; SNIFF_LEN];
    let n = b.len().min(SNIFF_LEN);
    for (dst, src) in first_bytes.iter_mut().zip(b.iter()) {
        *dst = *src;
    }
    CaptureError::UnknownFormat { first_bytes, len: n as u8, looks_like }
}

#[cfg(test)]
#[allow(clippy::indexing_slicing, clippy::unwrap_used)]
mod tests {
    use super::*;

    #[test]
    fn pcap_magics_both_byte_orders_and_resolutions() {
        // draft-ietf-opsawg-pcap §4 magic numbers (from memory, unconfirmed),
        // cross-checked below against pcap-parser's own header parser.
        for m in PCAP_MAGICS {
            assert_eq!(detect(&m).expect("pcap"), InputFormat::Pcap);
            let mut hdr = m.to_vec();
            hdr.extend_from_slice(&[0u8; 20]);
            assert!(pcap_parser::parse_pcap_header(&hdr).is_ok(), "pcap-parser accepts {m:02x?}");
        }
    }

    #[test]
    fn pcapng_and_ipfix_file() {
        assert_eq!(detect(&PCAPNG_SHB).expect("pcapng"), InputFormat::PcapNg);
        // RFC 5655 §10.1: an uncompressed IPFIX file starts 0x00 0x0a.
        assert_eq!(detect(&[0, 10, 0, 16, 0, 0, 0, 0]).expect("ipfix"), InputFormat::IpfixFile);
        let e = detect(&[0, 10, 0, 8]).expect_err("short length");
        assert!(e.to_string().contains("below 16"), "{e}");
    }

    #[test]
    fn compressed_inputs_are_named() {
        // RFC 5655 §10.2: gzip 1f 8b, bzip2 "BZh".
        assert!(matches!(
            detect(&[0x1f, 0x8b, 8, 0]),
            Err(CaptureError::CompressedIpfixFile { kind: Compression::Gzip })
        ));
        assert!(matches!(detect(b"BZh91AY&"), Err(CaptureError::CompressedIpfixFile { kind: Compression::Bzip2 })));
        let msg = detect(&[0x1f, 0x8b]).expect_err("gzip").to_string();
        assert!(msg.contains("decompress it first"), "{msg}");
    }

    #[test]
    fn unknown_inputs_say_what_they_look_like() {
        let e = detect(b"# a text file\n").expect_err("text");
        match e {
            CaptureError::UnknownFormat { first_bytes, len, looks_like } => {
                assert_eq!(&first_bytes, b"# a text");
                assert_eq!(len, 8);
                assert_eq!(looks_like, "looks like text");
            }
            other => panic!("unexpected {other:?}"),
        }
        assert!(detect(&[]).expect_err("empty").to_string().contains("empty"));
        assert!(detect(&[0, 9, 0, 1]).expect_err("v9").to_string().contains("before 10"));
        assert!(detect(&[1, 2, 3, 0xff, 0xfe]).expect_err("bin").to_string().contains("binary"));
    }
}
