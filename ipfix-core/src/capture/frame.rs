//! Finding IPFIX Message boundaries in a byte stream.
//!
//! Used by the TCP reassembler (messages are delimited only by the header
//! Length, RFC 7011 §10.4.3) and the RFC 5655 file reader. After damage both
//! resynchronise the way RFC 5655 §10.3 describes: look for the Version
//! octets `00 0a`, read the next two octets as the Length, and accept the
//! candidate only if another `00 0a` follows at that offset (or the data
//! ends exactly there); otherwise keep searching. A false match is about
//! 1 in 2^32.

/// IPFIX Version field value (RFC 7011 §3.1).
pub(crate) const VERSION: u16 = 10;
/// Message Header length, the smallest possible message (RFC 7011 §3.1).
pub(crate) const HEADER_LEN: usize = 16;

/// Reads the Version and Length fields at the start of `b`, if present.
pub(crate) fn header(b: &[u8]) -> Option<(u16, usize)> {
    let h = b.first_chunk::<4>()?;
    Some((u16::from_be_bytes([h[0], h[1]]), usize::from(u16::from_be_bytes([h[2], h[3]]))))
}

/// True if `b` starts with a plausible Message Header: version 10 and a
/// Length of at least 16 (RFC 7011 §3.1, §9.1).
pub(crate) fn plausible(b: &[u8]) -> bool {
    matches!(header(b), Some((VERSION, len)) if len >= HEADER_LEN)
}

/// Outcome of checking one candidate offset.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Check {
    Yes,
    No,
    NeedMore,
}

/// Checks the candidate header at `k`. `ends_here` says the data is known
/// to end at `b.len()` (end of file, closed connection) or that a message
/// ending exactly at the buffered end is accepted.
fn check(b: &[u8], k: usize, ends_here: bool) -> Check {
    let Some(rest) = b.get(k..) else { return Check::NeedMore };
    let Some((version, len)) = header(rest) else {
        // Fewer than 4 octets: a partial "00 0a" can still be refused.
        return match rest {
            [] => Check::NeedMore,
            [0] | [0, 0x0a] | [0, 0x0a, _] => Check::NeedMore,
            _ => Check::No,
        };
    };
    if version != VERSION || len < HEADER_LEN {
        return Check::No;
    }
    match rest.get(len..) {
        None => Check::NeedMore,
        Some([]) if ends_here => Check::Yes,
        Some(next) if next.len() >= 4 => {
            if plausible(next) {
                Check::Yes
            } else {
                Check::No
            }
        }
        Some(next) => {
            // 0-3 octets after the candidate: refuse early when they already
            // cannot start a header.
            let partial_ok = match next {
                [] => true,
                [a] => *a == 0,
                [a, b, ..] => *a == 0 && *b == 0x0a,
            };
            if !partial_ok {
                Check::No
            } else {
                Check::NeedMore
            }
        }
    }
}

/// Where the search stopped.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(crate) enum Search {
    /// A confirmed header starts at this offset.
    Found(usize),
    /// No header before this offset; more data is needed to decide here.
    /// Everything before it can be discarded.
    NeedMore(usize),
}

/// Searches `b` for the first offset that passes the RFC 5655 §10.3 check.
pub(crate) fn resync(b: &[u8], ends_here: bool) -> Search {
    let mut k = 0;
    loop {
        match check(b, k, ends_here) {
            Check::Yes => return Search::Found(k),
            Check::NeedMore => {
                if ends_here && k < b.len() {
                    // Nothing more will come: this candidate fails.
                    k += 1;
                    continue;
                }
                return Search::NeedMore(k.min(b.len()));
            }
            Check::No => {
                // Jump to the next 0x00 octet: only there can a header start.
                k = match b.get(k + 1..).and_then(|r| r.iter().position(|&x| x == 0)) {
                    Some(p) => k + 1 + p,
                    None => b.len(),
                };
            }
        }
    }
}

#[cfg(test)]
#[allow(clippy::indexing_slicing, clippy::unwrap_used)]
mod tests {
    use super::*;
    use crate::capture::test_util::ipfix_message;

    #[test]
    fn finds_header_after_garbage() {
        // RFC 5655 §10.3: candidate at 00 0a, confirmed by 00 0a at +Length.
        let mut b = b"garbage \x00\x0a\x00\x05 more".to_vec();
        let at = b.len();
        b.extend(ipfix_message(1, 40));
        b.extend(ipfix_message(2, 16));
        assert_eq!(resync(&b, false), Search::Found(at));
        assert_eq!(resync(&b, true), Search::Found(at));
    }

    #[test]
    fn last_message_needs_end_of_data() {
        let mut b = vec![1, 2, 3];
        b.extend(ipfix_message(1, 24));
        // Not known to end: wait at the candidate.
        assert_eq!(resync(&b, false), Search::NeedMore(3));
        // Known to end exactly after the message: accept.
        assert_eq!(resync(&b, true), Search::Found(3));
        // Trailing octets that cannot start a header: refuse.
        b.extend([9, 9]);
        assert_eq!(resync(&b, true), Search::NeedMore(b.len()));
    }

    #[test]
    fn false_candidate_is_skipped() {
        // 00 0a 00 14 claims 20 octets, but no header follows there.
        let mut b = vec![0, 0x0a, 0, 0x14];
        b.extend([0x55; 16]);
        b.extend([0x66; 4]);
        let at = b.len();
        b.extend(ipfix_message(3, 16));
        b.extend(ipfix_message(4, 16));
        assert_eq!(resync(&b, false), Search::Found(at));
    }

    #[test]
    fn partial_tail_is_kept() {
        assert_eq!(resync(&[5, 5, 0, 0x0a], false), Search::NeedMore(2));
        assert_eq!(resync(&[5, 5, 7], false), Search::NeedMore(3));
        assert_eq!(resync(&[], false), Search::NeedMore(0));
    }
}
