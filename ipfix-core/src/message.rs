//! The Message Header (RFC 7011 §3.1).

use nom::number::complete::{be_u16, be_u32};
use nom::Parser;

use crate::error::Malformed;
use crate::field::ObservationDomainId;

/// The IPFIX version number (RFC 7011 §3.1).
pub const VERSION: u16 = 10;
/// Octets in a Message Header (RFC 7011 §3.1).
pub const HEADER_LEN: usize = 16;

/// A decoded Message Header (RFC 7011 §3.1).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, serde::Serialize)]
#[serde(rename_all = "camelCase")]
pub struct MessageHeader {
    /// Version: 10.
    pub version: u16,
    /// Total length of the message in octets, header included.
    pub length: u16,
    /// Seconds since the UNIX epoch when the message left the exporter.
    pub export_time: u32,
    /// Data Records sent in this stream from this Observation Domain before
    /// this message, modulo 2^32 (RFC 7011 §3.1, Errata EID 4396).
    pub sequence_number: u32,
    /// The Observation Domain ID.
    pub observation_domain_id: ObservationDomainId,
}

impl MessageHeader {
    /// Decodes a Message Header (RFC 7011 §3.1) from the start of `msg`
    /// without checking version or length.
    pub fn parse(msg: &[u8]) -> Result<Self, Malformed> {
        let parsed: nom::IResult<&[u8], (u16, u16, u32, u32, u32)> =
            (be_u16, be_u16, be_u32, be_u32, be_u32).parse(msg);
        match parsed {
            Ok((_, (version, length, export_time, sequence_number, domain))) => Ok(Self {
                version,
                length,
                export_time,
                sequence_number,
                observation_domain_id: ObservationDomainId(domain),
            }),
            Err(_) => Err(Malformed::Truncated { offset: 0, needed: HEADER_LEN, available: msg.len() }),
        }
    }

    /// Decodes and checks a Message Header: version 10, and a Length that is
    /// at least 16 and equals the octets received (RFC 7011 §3.1, §9.1).
    pub fn parse_checked(msg: &[u8]) -> Result<Self, Malformed> {
        let header = Self::parse(msg)?;
        if header.version != VERSION {
            return Err(Malformed::BadVersion { version: header.version });
        }
        let declared = usize::from(header.length);
        if declared < HEADER_LEN || declared != msg.len() {
            return Err(Malformed::LengthMismatch { declared, available: msg.len() });
        }
        Ok(header)
    }

    /// Encodes the header into its 16 octets.
    pub fn to_bytes(&self) -> [u8; HEADER_LEN] {
        let mut out = [0u8; HEADER_LEN];
        let parts = [
            &self.version.to_be_bytes()[..],
            &self.length.to_be_bytes()[..],
            &self.export_time.to_be_bytes()[..],
            &self.sequence_number.to_be_bytes()[..],
            &self.observation_domain_id.0.to_be_bytes()[..],
        ];
        let mut at = 0;
        for part in parts {
            for (dst, src) in out.iter_mut().skip(at).zip(part) {
                *dst = *src;
            }
            at += part.len();
        }
        out
    }
}

/// Reads the Length of the message at the start of `buf` (RFC 7011 §3.1), for
/// framing a TCP stream or an RFC 5655 file (RFC 7011 §10.4.3).
///
/// Returns `Ok(None)` when fewer than 4 octets are present ("need more"),
/// and an error when the version is not 10 or the length is below 16.
///
/// ```
/// use ipfix_core::message_length;
/// assert_eq!(message_length(&[0x00, 0x0a, 0x00, 0x10]).unwrap(), Some(16));
/// assert_eq!(message_length(&[0x00, 0x0a]).unwrap(), None);
/// assert!(message_length(&[0x00, 0x09, 0x00, 0x10]).is_err());
/// ```
pub fn message_length(buf: &[u8]) -> Result<Option<usize>, Malformed> {
    let Some(head) = buf.first_chunk::<4>() else {
        return Ok(None);
    };
    let version = u16::from_be_bytes([head[0], head[1]]);
    if version != VERSION {
        return Err(Malformed::BadVersion { version });
    }
    let length = usize::from(u16::from_be_bytes([head[2], head[3]]));
    if length < HEADER_LEN {
        return Err(Malformed::LengthMismatch { declared: length, available: buf.len() });
    }
    Ok(Some(length))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn header_round_trip() {
        // RFC 7011 §3.1: version 10, length, export time, sequence, domain.
        let h = MessageHeader {
            version: 10,
            length: 16,
            export_time: 0x5f5e_1000,
            sequence_number: 7,
            observation_domain_id: ObservationDomainId(42),
        };
        let bytes = h.to_bytes();
        assert_eq!(&bytes[..4], &[0x00, 0x0a, 0x00, 0x10]);
        assert_eq!(MessageHeader::parse_checked(&bytes), Ok(h));
    }

    #[test]
    fn rejects_bad_version_and_length() {
        // RFC 7011 §9.1: reserved version or nonsensical length is malformed.
        let mut bytes = [0u8; 16];
        bytes[1] = 9;
        bytes[3] = 16;
        assert_eq!(MessageHeader::parse_checked(&bytes), Err(Malformed::BadVersion { version: 9 }));
        bytes[1] = 10;
        bytes[3] = 20;
        assert!(matches!(MessageHeader::parse_checked(&bytes), Err(Malformed::LengthMismatch { .. })));
        assert!(matches!(MessageHeader::parse_checked(&bytes[..10]), Err(Malformed::Truncated { .. })));
    }
}
