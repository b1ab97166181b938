//! Sequence accounting per (Transport Session, Observation Domain).
//!
//! RFC 7011 §3.1 (with verified Errata EID 4396): the Sequence Number is the
//! number of Data Records sent in this stream from this Observation Domain
//! *before* this message, modulo 2^32. So the next message should carry
//! `this.sequence + records in this message`. A collector "SHOULD use"
//! discontinuities to detect loss, reordering and duplication (§10.3.2).

use std::collections::VecDeque;

/// Largest backwards jump still taken as reordering or duplication; a
/// larger one is taken as an exporter restart. (Our choice.)
const LATE_WINDOW: u32 = 1 << 20;
/// Gap ranges remembered so that late messages can fill them.
const MAX_GAPS: usize = 64;

/// What one message did to the expected sequence.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum SequenceEvent {
    /// Records were skipped over: lost (or still to come, reordered).
    Gap {
        /// Expected Sequence Number.
        expected: u32,
        /// Records missing.
        missing: u32,
    },
    /// The message was behind the expected number. `filled` records of it
    /// fell into an earlier gap (they were reordered, not lost).
    Late {
        /// Expected Sequence Number.
        expected: u32,
        /// Records that filled an earlier gap.
        filled: u64,
    },
    /// The previous message had sets that could not be counted; this many
    /// records were in them (inferred from the numbers).
    Uncounted {
        /// Records inferred.
        records: u32,
    },
    /// The numbers jumped backwards too far: the exporter restarted.
    Reset,
}

/// Expected-versus-received accounting for one stream.
#[derive(Debug, Clone, Default, PartialEq, Eq, serde::Serialize)]
#[serde(rename_all = "camelCase")]
pub struct SequenceTracker {
    /// Next expected Sequence Number.
    pub expected: Option<u32>,
    /// Records received (counted in decodable sets).
    pub received_records: u64,
    /// Records missing by the numbers, net of late arrivals that filled gaps.
    pub gap_records: u64,
    /// Records that arrived late and filled a gap (reordered).
    pub reordered_records: u64,
    /// Records in messages behind the expected number that filled no gap
    /// (duplicates).
    pub duplicate_records: u64,
    /// Records inferred to sit in undecodable sets.
    pub uncounted_records: u64,
    /// Restarts detected.
    pub resets: u64,
    #[serde(skip)]
    uncertain: bool,
    #[serde(skip)]
    gaps: VecDeque<(u32, u32)>,
}

impl SequenceTracker {
    /// Feeds one message: its Sequence Number, the Data Records it held, and
    /// whether every set could be counted.
    pub fn observe(&mut self, sequence: u32, records: u64, complete: bool) -> Option<SequenceEvent> {
        let n = records as u32;
        self.received_records += records;
        let Some(expected) = self.expected else {
            self.expected = Some(sequence.wrapping_add(n));
            self.uncertain = !complete;
            return None;
        };
        let ahead = sequence.wrapping_sub(expected);
        let behind = expected.wrapping_sub(sequence);
        let event = if ahead == 0 {
            None
        } else if ahead < behind {
            // Forward jump.
            if self.uncertain {
                self.uncounted_records += u64::from(ahead);
                Some(SequenceEvent::Uncounted { records: ahead })
            } else {
                self.gap_records += u64::from(ahead);
                if self.gaps.len() == MAX_GAPS {
                    self.gaps.pop_front();
                }
                self.gaps.push_back((expected, ahead));
                Some(SequenceEvent::Gap { expected, missing: ahead })
            }
        } else if behind <= LATE_WINDOW {
            let filled = self.fill(sequence, n);
            self.reordered_records += filled;
            self.gap_records = self.gap_records.saturating_sub(filled);
            self.duplicate_records += u64::from(n) - filled.min(u64::from(n));
            // A late message does not move the expectation.
            return Some(SequenceEvent::Late { expected, filled });
        } else {
            self.resets += 1;
            self.gaps.clear();
            Some(SequenceEvent::Reset)
        };
        self.expected = Some(sequence.wrapping_add(n));
        self.uncertain = !complete;
        event
    }

    /// Removes [start, start+len) from the remembered gaps; returns how many
    /// records were inside a gap.
    fn fill(&mut self, start: u32, len: u32) -> u64 {
        let mut filled = 0u64;
        let mut next = VecDeque::with_capacity(self.gaps.len() + 1);
        for (gs, gl) in self.gaps.drain(..) {
            // Work in offsets relative to the gap start (wrapping arithmetic).
            let rel = start.wrapping_sub(gs);
            if rel < gl {
                let inside = len.min(gl - rel);
                filled += u64::from(inside);
                if rel > 0 {
                    next.push_back((gs, rel));
                }
                let tail = gl - rel - inside;
                if tail > 0 {
                    next.push_back((gs.wrapping_add(rel + inside), tail));
                }
            } else {
                next.push_back((gs, gl));
            }
        }
        self.gaps = next;
        filled
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn in_order_gap_late_duplicate() {
        // RFC 7011 §3.1 + Errata 4396: next = seq + records in this message.
        let mut t = SequenceTracker::default();
        assert_eq!(t.observe(0, 10, true), None);
        assert_eq!(t.observe(10, 5, true), None);
        // 20 records lost (15..35).
        assert_eq!(t.observe(35, 5, true), Some(SequenceEvent::Gap { expected: 15, missing: 20 }));
        assert_eq!(t.gap_records, 20);
        // A reordered message covering 15..25 arrives late and fills part of the gap.
        assert_eq!(t.observe(15, 10, true), Some(SequenceEvent::Late { expected: 40, filled: 10 }));
        assert_eq!(t.gap_records, 10);
        // The same again is a duplicate.
        assert_eq!(t.observe(15, 10, true), Some(SequenceEvent::Late { expected: 40, filled: 0 }));
        assert_eq!(t.duplicate_records, 10);
        assert_eq!(t.observe(40, 1, true), None);
    }

    #[test]
    fn wraps_modulo_2_32() {
        // RFC 7011 §3.1: "modulo 2^32".
        let mut t = SequenceTracker::default();
        t.observe(u32::MAX - 1, 4, true);
        assert_eq!(t.observe(2, 1, true), None);
    }

    #[test]
    fn uncounted_sets_are_not_loss() {
        let mut t = SequenceTracker::default();
        t.observe(0, 3, false);
        assert_eq!(t.observe(10, 1, true), Some(SequenceEvent::Uncounted { records: 7 }));
        assert_eq!(t.gap_records, 0);
    }

    #[test]
    fn restart_resets() {
        let mut t = SequenceTracker::default();
        t.observe(5_000_000, 10, true);
        assert_eq!(t.observe(0, 10, true), Some(SequenceEvent::Reset));
        assert_eq!(t.observe(10, 1, true), None);
    }
}
