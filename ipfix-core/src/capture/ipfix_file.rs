//! RFC 5655 IPFIX Files: IPFIX Messages stored back to back.
//!
//! Each Message Header's Length (RFC 7011 §3.1) leads to the next message.
//! When a header is implausible (Version not 10, Length below 16), the
//! reader resynchronises as RFC 5655 §10.3 describes and counts the skipped
//! octets as `file-resync`. A message cut by the end of the file yields
//! [`CaptureError::Truncated`] — unless a plausible header follows inside
//! it, in which case its Length was damaged and it is stepped over instead.

use std::io::Read;

use super::error::CaptureError;
use super::frame::{self, Search};
use super::input::Input;
use super::stats::{CaptureStats, SkipReason};

/// Data kept in view while resynchronising: a candidate header plus the
/// largest possible message (RFC 7011 §10: 65,535 octets) plus the next
/// header's first four octets.
const RESYNC_WINDOW: usize = 2 * (65_535 + 4);

/// Reader state for one RFC 5655 file.
#[derive(Debug)]
pub(crate) struct IpfixFile {
    synced: bool,
}

impl IpfixFile {
    pub(crate) fn new() -> Self {
        Self { synced: true }
    }

    /// Returns the next message, `None` at a clean end of file.
    pub(crate) fn next_message<R: Read>(
        &mut self,
        input: &mut Input<R>,
        stats: &mut CaptureStats,
    ) -> Result<Option<Vec<u8>>, CaptureError> {
        loop {
            if self.synced {
                input.fill(4)?;
                if input.data().is_empty() {
                    return Ok(None);
                }
                match frame::header(input.data()) {
                    None => {
                        return Err(CaptureError::Truncated {
                            offset: input.offset(),
                            what: "IPFIX message header",
                        })
                    }
                    Some((frame::VERSION, len)) if len >= frame::HEADER_LEN => {
                        if input.fill(len)? {
                            let msg = input.data().get(..len).map(<[u8]>::to_vec).unwrap_or_default();
                            input.consume(len);
                            return Ok(Some(msg));
                        }
                        // Cut by the end of the file, or a damaged Length?
                        if let Search::Found(k) = frame::resync(input.data().get(1..).unwrap_or(&[]), true) {
                            stats.file_resyncs += 1;
                            stats.skip_bytes(SkipReason::FileResync, (k + 1) as u64);
                            input.consume(k + 1);
                            continue;
                        }
                        return Err(CaptureError::Truncated { offset: input.offset(), what: "IPFIX message" });
                    }
                    Some(_) => {
                        // RFC 7011 §9.1: a reserved Version or a Length
                        // below 16 makes the message malformed; find the next
                        // one (RFC 5655 §10.3).
                        stats.file_resyncs += 1;
                        self.synced = false;
                        stats.skip_bytes(SkipReason::FileResync, 1);
                        input.consume(1);
                    }
                }
            } else {
                input.fill(RESYNC_WINDOW)?;
                if input.data().is_empty() {
                    return Ok(None);
                }
                let found = frame::resync(input.data(), input.at_eof());
                let k = match found {
                    Search::Found(k) | Search::NeedMore(k) => k,
                };
                stats.skip_bytes(SkipReason::FileResync, k as u64);
                input.consume(k);
                if let Search::Found(_) = found {
                    self.synced = true;
                }
            }
        }
    }
}

#[cfg(test)]
#[allow(clippy::indexing_slicing, clippy::unwrap_used)]
mod tests {
    use super::*;
    use crate::capture::test_util::ipfix_message;

    fn read_all(bytes: &[u8]) -> (Vec<Vec<u8>>, Option<CaptureError>, CaptureStats) {
        let mut input = Input::new(bytes);
        let mut file = IpfixFile::new();
        let mut stats = CaptureStats::default();
        let mut out = Vec::new();
        loop {
            match file.next_message(&mut input, &mut stats) {
                Ok(Some(m)) => out.push(m),
                Ok(None) => return (out, None, stats),
                Err(e) => return (out, Some(e), stats),
            }
        }
    }

    #[test]
    fn back_to_back_messages() {
        // RFC 5655 §3: a file is a serialized stream of IPFIX Messages.
        let msgs = vec![ipfix_message(1, 16), ipfix_message(2, 100), ipfix_message(3, 20)];
        let (got, err, stats) = read_all(&msgs.concat());
        assert_eq!(got, msgs);
        assert!(err.is_none());
        assert!(stats.skipped_bytes.is_empty());
    }

    #[test]
    fn resync_after_garbage() {
        // RFC 5655 §10.3: skip to the next 00 0a whose Length leads to
        // another 00 0a (or the exact end of the file).
        let msgs = vec![ipfix_message(1, 40), ipfix_message(2, 24), ipfix_message(3, 16)];
        let mut bytes = msgs[0].clone();
        bytes.extend_from_slice(&[0x00, 0x0a, 0x00, 0x03, 0xde, 0xad, 0x00, 0x0a, 0xff, 0xff, 0x01]);
        bytes.extend(&msgs[1]);
        bytes.extend(&msgs[2]);
        let (got, err, stats) = read_all(&bytes);
        assert_eq!(got, msgs);
        assert!(err.is_none());
        assert_eq!(stats.skipped_bytes(SkipReason::FileResync), 11);
        assert_eq!(stats.file_resyncs, 1);
    }

    #[test]
    fn truncated_last_message() {
        let msgs = [ipfix_message(1, 40), ipfix_message(2, 60)];
        let mut bytes = msgs.concat();
        bytes.truncate(40 + 30);
        let (got, err, _) = read_all(&bytes);
        assert_eq!(got, msgs[..1].to_vec());
        match err {
            Some(CaptureError::Truncated { offset, .. }) => assert_eq!(offset, 40),
            other => panic!("unexpected {other:?}"),
        }
        // Cut inside a header.
        let (got, err, _) = read_all(&msgs[0][..2]);
        assert!(got.is_empty());
        assert!(matches!(err, Some(CaptureError::Truncated { offset: 0, .. })));
    }

    #[test]
    fn damaged_length_is_stepped_over() {
        let msgs = [ipfix_message(1, 40), ipfix_message(2, 30), ipfix_message(3, 16)];
        let mut bytes = msgs.concat();
        // Message 2 claims 4000 octets: more than the file holds.
        bytes[42] = 0x0f;
        bytes[43] = 0xa0;
        let (got, err, stats) = read_all(&bytes);
        assert!(err.is_none(), "{err:?}");
        assert_eq!(got, vec![msgs[0].clone(), msgs[2].clone()]);
        assert_eq!(stats.skipped_bytes(SkipReason::FileResync), 30);
    }
}
