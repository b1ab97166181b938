//! Errors of the capture readers.

use std::fmt;
use std::sync::Arc;

/// A compression format recognised by its leading octets.
///
/// RFC 5655 §10.2 lets IPFIX files be compressed with bzip2 or gzip; the
/// readers here do not decompress, they say what they saw.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
#[non_exhaustive]
pub enum Compression {
    /// gzip: starts `1f 8b` (RFC 5655 §10.2).
    Gzip,
    /// bzip2: starts `BZh` (RFC 5655 §10.2).
    Bzip2,
    /// xz: starts `fd 37 7a 58 5a 00` (from memory, unconfirmed).
    Xz,
    /// Zstandard: starts `28 b5 2f fd` (from memory, unconfirmed).
    Zstd,
}

impl Compression {
    /// Lower-case name.
    pub const fn name(self) -> &'static str {
        match self {
            Self::Gzip => "gzip",
            Self::Bzip2 => "bzip2",
            Self::Xz => "xz",
            Self::Zstd => "zstd",
        }
    }
}

impl fmt::Display for Compression {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.name())
    }
}

/// Why a capture could not be read (further).
///
/// Errors that end reading (`Io`, `Truncated`, `BadHeader`, `RecordTooLarge`)
/// are yielded once, after every event that came before them; the reader then
/// ends. Damage that can be stepped over (a packet that is not IPFIX, a gap in
/// a TCP stream, garbage between messages of an IPFIX file) is never an error:
/// it is counted in [`CaptureStats`](super::CaptureStats) with its reason.
#[derive(Debug, Clone, thiserror::Error)]
#[non_exhaustive]
pub enum CaptureError {
    /// Reading the underlying input failed.
    #[error("cannot read the input: {source}")]
    Io {
        /// The I/O error (shared so the error stays cheap to clone).
        #[source]
        source: Arc<std::io::Error>,
    },
    /// The input is none of the supported formats (classic pcap, pcapng,
    /// uncompressed RFC 5655 IPFIX file).
    #[error("unknown input format: {looks_like} (first bytes {})", hex(first_bytes.get(..usize::from(*len)).unwrap_or(first_bytes)))]
    UnknownFormat {
        /// Up to the first 8 octets of the input.
        first_bytes: [u8; 8],
        /// How many of `first_bytes` were present.
        len: u8,
        /// What the bytes look like, e.g. "looks like text".
        looks_like: &'static str,
    },
    /// The input is compressed (RFC 5655 §10.2 allows compressed IPFIX
    /// files); it must be decompressed first.
    #[error("input is {kind}-compressed (e.g. a compressed IPFIX file, RFC 5655 §10.2): decompress it first")]
    CompressedIpfixFile {
        /// The compression recognised.
        kind: Compression,
    },
    /// The input ends in the middle of something; everything before `offset`
    /// was delivered.
    #[error("input truncated: incomplete {what} at byte {offset}")]
    Truncated {
        /// Byte offset (from the start of the input) of the incomplete item.
        offset: u64,
        /// What was cut, e.g. "pcap packet record".
        what: &'static str,
    },
    /// A container header or block is malformed so that reading cannot go on.
    #[error("bad {what} at byte {offset}: {reason}")]
    BadHeader {
        /// Byte offset of the header or block.
        offset: u64,
        /// Which header, e.g. "pcapng block".
        what: &'static str,
        /// What is wrong with it.
        reason: &'static str,
    },
    /// A container record claims more octets than the configured limit
    /// ([`CaptureOptions::max_record_bytes`](super::CaptureOptions::max_record_bytes)).
    #[error("{what} at byte {offset} claims {length} octets, more than the limit of {limit}")]
    RecordTooLarge {
        /// Byte offset of the record.
        offset: u64,
        /// Which record.
        what: &'static str,
        /// The claimed length.
        length: u64,
        /// The limit in force.
        limit: usize,
    },
}

impl From<std::io::Error> for CaptureError {
    fn from(source: std::io::Error) -> Self {
        Self::Io { source: Arc::new(source) }
    }
}

/// Space-separated lower-case hex.
fn hex(bytes: &[u8]) -> String {
    let mut out = String::with_capacity(bytes.len() * 3);
    for (i, b) in bytes.iter().enumerate() {
        if i > 0 {
            out.push(' ');
        }
        out.push_str(&format!("{b:02x}"));
    }
    out
}

#[cfg(test)]
#[allow(clippy::indexing_slicing, clippy::unwrap_used)]
mod tests {
    use super::*;

    #[test]
    fn display_is_lower_case_without_period() {
        let e = CaptureError::UnknownFormat { first_bytes: *b"hello wo", len: 8, looks_like: "looks like text" };
        let s = e.to_string();
        assert_eq!(s, "unknown input format: looks like text (first bytes 68 65 6c 6c 6f 20 77 6f)");
        let e = CaptureError::Truncated { offset: 40, what: "pcap packet record" };
        assert_eq!(e.to_string(), "input truncated: incomplete pcap packet record at byte 40");
        let e = CaptureError::CompressedIpfixFile { kind: Compression::Gzip };
        assert!(e.to_string().starts_with("input is gzip-compressed"));
        assert!(!e.to_string().ends_with('.'));
    }
}
