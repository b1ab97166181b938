//! What a pass decoded, skipped and lost, per input, per Transport Session
//! and Observation Domain, and over the whole run.
//!
//! Most numbers come from the decoder's [`Stats`] and [`DomainStats`]; this
//! module attributes them to sessions and domains and fills two gaps:
//!
//! - Records in sets that could not be decoded are only known from the
//!   Sequence Numbers (RFC 7011 §3.1): the decoder counts them as
//!   "uncounted" once the next message of the domain arrives (and takes
//!   back those of sets decoded later, RFC 7011 §9.3). They are attributed
//!   here to the reason of the domain's skipped sets.
//! - A malformed message is discarded whole (RFC 7011 §9.1), so its records
//!   show up as a sequence gap at the next message. When the discarded
//!   message started exactly at the expected Sequence Number, that gap is
//!   counted as records skipped for `malformed-message`, not as loss.

use std::collections::{BTreeMap, HashMap};
use std::time::Duration;

use ipfix_core::capture::{CaptureError, CaptureStats, InputFormat};
use ipfix_core::{Decoder, DomainStats, Event, MessageError, MessageHeader, Stats, TransportSession};
use serde::Serialize;

use super::Inputs;

/// Reason under which records of malformed messages are counted.
const MALFORMED: &str = "malformed-message";
/// Reason for records of undecodable sets whose cause is not known.
const UNDECODABLE: &str = "undecodable-set";
/// The decoder's name for sets whose template never came.
const NEVER_ARRIVED: &str = "template-never-arrived";

/// Everything a pass saw. Serialised (camelCase) as the `--stats-json` document.
#[derive(Debug, Clone, Default, Serialize)]
#[serde(rename_all = "camelCase")]
pub struct Accounting {
    /// Per input, in command-line order.
    pub inputs: Vec<InputReport>,
    /// Octets read from the inputs, and octets of IPFIX Messages among them.
    pub bytes: BytesReport,
    /// IPFIX Messages offered to the decoder.
    pub messages: u64,
    /// Messages discarded whole as malformed (RFC 7011 §9.1).
    pub messages_malformed: u64,
    /// Malformed messages by reason.
    pub malformed_by_reason: BTreeMap<String, u64>,
    /// Data Records decoded (options records included).
    pub records_decoded: u64,
    /// Of those, records of options templates.
    pub options_records_decoded: u64,
    /// Records seen but not decoded, as far as they can be counted (from
    /// Sequence Numbers: records in undecodable sets and malformed messages).
    pub records_skipped: u64,
    /// `records_skipped` by reason.
    pub records_skipped_by_reason: BTreeMap<String, u64>,
    /// Sets whose records were not decoded.
    pub sets_skipped: u64,
    /// `sets_skipped` by reason.
    pub sets_skipped_by_reason: BTreeMap<String, u64>,
    /// Data Records missing by the per-domain Sequence Numbers (lost before
    /// the capture), net of late arrivals.
    pub sequence_gap_records: u64,
    /// Records in messages that arrived behind the expected Sequence Number.
    pub sequence_late_records: u64,
    /// Sequence Number resets (exporter restarts).
    pub sequence_resets: u64,
    /// Template bookkeeping.
    pub templates: TemplateReport,
    /// Capture-level counters summed over inputs (packets that are not
    /// IPFIX are not records: they are counted here).
    pub capture: CaptureReport,
    /// Per Transport Session, with its Observation Domains.
    pub exporters: Vec<SessionReport>,
    /// The first malformed messages (at most [`MALFORMED_EXAMPLES`]), to
    /// find them in the capture.
    pub malformed_examples: Vec<MalformedExample>,
    /// Things the user should know (damaged inputs, sets that never found
    /// their template, ...).
    pub warnings: Vec<String>,
    /// Sessions in order of first appearance.
    #[serde(skip)]
    sessions: Vec<SessionAcc>,
    #[serde(skip)]
    index: HashMap<TransportSession, usize>,
    /// The session of the previous message (most messages follow one of
    /// the same session): compared instead of hashed.
    #[serde(skip)]
    last: Option<(TransportSession, usize)>,
    #[serde(skip)]
    order: Vec<TransportSession>,
    #[serde(skip)]
    domain_snapshots: usize,
}

/// Most malformed messages listed with their place.
pub const MALFORMED_EXAMPLES: usize = 20;

/// Where a malformed message was, and what was wrong with it.
#[derive(Debug, Clone, Serialize)]
#[serde(rename_all = "camelCase")]
pub struct MalformedExample {
    /// The input.
    pub input: String,
    /// 1-based IPFIX Message number within the input.
    pub message: u64,
    /// Capture time (RFC 3339), when the capture has one.
    pub captured: Option<String>,
    /// The Transport Session, as text.
    pub session: String,
    /// The Observation Domain, when the header could be read.
    pub observation_domain_id: Option<u32>,
    /// The reason name (as in `malformedByReason`).
    pub reason: &'static str,
    /// What and where (byte offset within the message).
    pub detail: String,
}

/// Octet counts.
#[derive(Debug, Clone, Copy, Default, Serialize)]
#[serde(rename_all = "camelCase")]
pub struct BytesReport {
    /// Octets read from all inputs.
    pub input: u64,
    /// Octets of IPFIX Messages offered to the decoder.
    pub ipfix: u64,
}

/// One input.
#[derive(Debug, Clone, Serialize)]
#[serde(rename_all = "camelCase")]
pub struct InputReport {
    /// The input as named on the command line (`<stdin>` for `-`).
    pub path: String,
    /// `pcap`, `pcapng` or `ipfix-file`.
    pub format: &'static str,
    /// Octets read.
    pub bytes: u64,
    /// Where the input ended early, if it did: byte offset and why.
    pub stopped_early: Option<StoppedEarly>,
    /// Capture-level counters of this input.
    pub capture: CaptureReport,
}

/// An input that ended before its end.
#[derive(Debug, Clone, Serialize)]
#[serde(rename_all = "camelCase")]
pub struct StoppedEarly {
    /// Byte offset of the damage, when known.
    pub offset: Option<u64>,
    /// What the reader said.
    pub error: String,
}

/// Capture-level counters (from the capture reader).
#[derive(Debug, Clone, Default, Serialize)]
#[serde(rename_all = "camelCase")]
pub struct CaptureReport {
    /// Packet records read (0 for RFC 5655 files).
    pub packets: u64,
    /// IPFIX Messages delivered to the decoder.
    pub ipfix_messages: u64,
    /// Packets that did not become an IPFIX Message, by reason (`not-ipfix`,
    /// `not-ip`, `fragment-incomplete`, ...).
    pub packets_skipped_by_reason: BTreeMap<String, u64>,
    /// Stream or file octets stepped over, by reason.
    pub bytes_skipped_by_reason: BTreeMap<String, u64>,
    /// IP datagrams rebuilt from fragments.
    pub fragments_reassembled: u64,
    /// TCP connections (per direction) that carried IPFIX.
    pub tcp_sessions: u64,
    /// Holes in TCP streams (lost segments).
    pub tcp_gaps: u64,
    /// Octets missing in those holes.
    pub tcp_gap_bytes: u64,
    /// Times a TCP stream had to find IPFIX framing again.
    pub tcp_resyncs: u64,
    /// Times an RFC 5655 file had to be resynchronised (RFC 5655 §10.3).
    pub file_resyncs: u64,
    /// pcapng blocks that carry no packet.
    pub other_blocks: u64,
}

impl CaptureReport {
    fn from_stats(s: &CaptureStats) -> Self {
        Self {
            packets: s.packets,
            ipfix_messages: s.ipfix_payloads,
            packets_skipped_by_reason: s.skipped.iter().map(|(k, v)| (k.name().to_owned(), *v)).collect(),
            bytes_skipped_by_reason: s.skipped_bytes.iter().map(|(k, v)| (k.name().to_owned(), *v)).collect(),
            fragments_reassembled: s.fragments_reassembled,
            tcp_sessions: s.tcp_sessions,
            tcp_gaps: s.tcp_gaps,
            tcp_gap_bytes: s.tcp_gap_bytes,
            tcp_resyncs: s.tcp_resyncs,
            file_resyncs: s.file_resyncs,
            other_blocks: s.other_blocks,
        }
    }

    fn add(&mut self, o: &Self) {
        self.packets += o.packets;
        self.ipfix_messages += o.ipfix_messages;
        add_map(&mut self.packets_skipped_by_reason, &o.packets_skipped_by_reason);
        add_map(&mut self.bytes_skipped_by_reason, &o.bytes_skipped_by_reason);
        self.fragments_reassembled += o.fragments_reassembled;
        self.tcp_sessions += o.tcp_sessions;
        self.tcp_gaps += o.tcp_gaps;
        self.tcp_gap_bytes += o.tcp_gap_bytes;
        self.tcp_resyncs += o.tcp_resyncs;
        self.file_resyncs += o.file_resyncs;
        self.other_blocks += o.other_blocks;
    }

    /// Packets that did not become IPFIX Messages, all reasons.
    pub fn packets_skipped(&self) -> u64 {
        self.packets_skipped_by_reason.values().sum()
    }
}

/// Template bookkeeping over all sessions.
#[derive(Debug, Clone, Default, Serialize)]
#[serde(rename_all = "camelCase")]
pub struct TemplateReport {
    /// Templates and options templates learned for the first time.
    pub learned: u64,
    /// Identical re-sends.
    pub refreshed: u64,
    /// Redefinitions: same ID, different fields.
    pub redefined: u64,
    /// Of those, over TCP/SCTP without a withdrawal first (an exporter
    /// fault, RFC 7011 §8.1).
    pub redefined_without_withdrawal: u64,
    /// Templates withdrawn (RFC 7011 §8.1).
    pub withdrawn: u64,
    /// Withdrawals over UDP, ignored (RFC 7011 §8.4).
    pub withdrawals_ignored_udp: u64,
    /// Withdrawals of unknown IDs, ignored.
    pub withdrawals_unknown: u64,
    /// UDP templates expired by lifetime.
    pub expired: u64,
    /// Templates rejected.
    pub rejected: u64,
    /// Rejected templates by reason.
    pub rejected_by_reason: BTreeMap<String, u64>,
}

/// One Transport Session (RFC 7011 §2) and its Observation Domains.
#[derive(Debug, Clone, Serialize)]
#[serde(rename_all = "camelCase")]
pub struct SessionReport {
    /// Who and when, as `inspect` shows it too.
    #[serde(flatten)]
    pub session: SessionSummary,
    /// Per Observation Domain, by ID.
    pub domains: Vec<DomainReport>,
}

/// A Transport Session's identity and the counters that belong to no
/// Observation Domain.
#[derive(Debug, Clone, Serialize)]
#[serde(rename_all = "camelCase")]
pub struct SessionSummary {
    /// `udp`, `tcp`, `sctp` or `file`.
    pub transport: &'static str,
    /// Exporter address and port (null for RFC 5655 files).
    pub exporter: Option<String>,
    /// Collector address and port (null for RFC 5655 files).
    pub collector: Option<String>,
    /// The input where the session was first seen.
    pub input: String,
    /// First and last capture time of its messages (RFC 3339), when known.
    pub first_captured: Option<String>,
    /// Last capture time.
    pub last_captured: Option<String>,
    /// Malformed messages whose header was too short to name a domain.
    pub messages_malformed_without_domain: u64,
    /// By reason.
    pub malformed_without_domain_by_reason: BTreeMap<String, u64>,
}

/// One Observation Domain of one session.
#[derive(Debug, Clone, Default, Serialize)]
#[serde(rename_all = "camelCase")]
pub struct DomainReport {
    /// The Observation Domain ID.
    pub observation_domain_id: u32,
    /// Messages accepted.
    pub messages: u64,
    /// Messages discarded as malformed.
    pub messages_malformed: u64,
    /// Malformed messages by reason.
    pub malformed_by_reason: BTreeMap<String, u64>,
    /// Data Records decoded.
    pub records_decoded: u64,
    /// Records decoded per Template ID.
    pub records_by_template: BTreeMap<u16, u64>,
    /// Records seen but not decoded (see [`Accounting::records_skipped`]).
    pub records_skipped: u64,
    /// By reason.
    pub records_skipped_by_reason: BTreeMap<String, u64>,
    /// Sets not decoded.
    pub sets_skipped: u64,
    /// By reason.
    pub sets_skipped_by_reason: BTreeMap<String, u64>,
    /// Records missing by Sequence Numbers.
    pub sequence_gap_records: u64,
    /// Records that arrived late and filled a gap.
    pub reordered_records: u64,
    /// Records in messages behind the expected number that filled no gap.
    pub duplicate_records: u64,
    /// Sequence resets (exporter restarts).
    pub sequence_resets: u64,
    /// Earliest Export Time (RFC 3339 UTC).
    pub first_export_time: Option<String>,
    /// Latest Export Time.
    pub last_export_time: Option<String>,
    /// Template redefinitions (same ID, different fields).
    pub template_redefinitions: u64,
    /// Templates withdrawn.
    pub template_withdrawals: u64,
    #[serde(skip)]
    first_export: Option<u32>,
    #[serde(skip)]
    last_export: Option<u32>,
}

#[derive(Debug, Clone, Default)]
struct SessionAcc {
    input: usize,
    malformed_no_domain: u64,
    malformed_no_domain_by_reason: BTreeMap<String, u64>,
    first_captured: Option<Duration>,
    last_captured: Option<Duration>,
    domains: BTreeMap<u32, DomainAcc>,
}

#[derive(Debug, Clone, Default)]
struct DomainAcc {
    report: DomainReport,
    /// Records the decoder inferred in undecodable sets (all snapshots).
    uncounted: u64,
    replayed_sets: u64,
    buffered_sets: u64,
    expired_sets: u64,
    flushed_sets: u64,
    /// Sequence Number of the first malformed message since the last good one.
    malformed_seq: Option<u32>,
    /// Gap records attributed to malformed messages.
    malformed_records: u64,
}

impl DomainAcc {
    fn pending_sets(&self) -> u64 {
        self.buffered_sets.saturating_sub(self.replayed_sets + self.expired_sets + self.flushed_sets)
    }

    fn fold(&mut self, ds: &DomainStats) {
        let r = &mut self.report;
        r.messages += ds.messages;
        r.records_decoded += ds.records_decoded;
        for (t, n) in &ds.records_by_template {
            *r.records_by_template.entry(*t).or_default() += n;
        }
        r.sequence_gap_records += ds.sequence.gap_records;
        r.reordered_records += ds.sequence.reordered_records;
        r.duplicate_records += ds.sequence.duplicate_records;
        r.sequence_resets += ds.sequence.resets;
        self.uncounted += ds.sequence.uncounted_records;
        r.template_redefinitions += ds.template_redefinitions;
        r.template_withdrawals += ds.template_withdrawals;
        r.first_export = min_opt(r.first_export, ds.first_export_time);
        r.last_export = max_opt(r.last_export, ds.last_export_time);
    }
}

/// Decoder counters taken before a decode call, to attribute what the call
/// changed to its session and domain.
#[derive(Debug, Clone, Copy)]
pub(crate) struct Before {
    sets_buffered: u64,
    never_arrived: u64,
}

impl Accounting {
    pub(crate) fn new(inputs: &Inputs) -> Self {
        let inputs = inputs
            .iter()
            .map(|i| InputReport {
                path: i.name.clone(),
                format: i.format.name(),
                bytes: 0,
                stopped_early: None,
                capture: CaptureReport::default(),
            })
            .collect();
        Self { inputs, ..Self::default() }
    }

    fn session(&mut self, session: &TransportSession, input: usize) -> &mut SessionAcc {
        let i = match self.last {
            Some((key, i)) if key == *session => i,
            _ => {
                let i = match self.index.get(session) {
                    Some(i) => *i,
                    None => {
                        self.order.push(*session);
                        self.sessions.push(SessionAcc { input, ..SessionAcc::default() });
                        self.index.insert(*session, self.sessions.len() - 1);
                        self.sessions.len() - 1
                    }
                };
                self.last = Some((*session, i));
                i
            }
        };
        // `i` came from `index` or `last`, which only hold positions of
        // entries already pushed (never removed): always in bounds.
        #[allow(clippy::indexing_slicing)]
        &mut self.sessions[i]
    }

    fn existing(&mut self, session: &TransportSession) -> Option<&mut SessionAcc> {
        let i = *self.index.get(session)?;
        self.sessions.get_mut(i)
    }

    pub(crate) fn before_decode(&self, decoder: &Decoder) -> Before {
        let s = decoder.stats();
        Before { sets_buffered: s.sets_buffered, never_arrived: s.sets_skipped.get(NEVER_ARRIVED).copied().unwrap_or(0) }
    }

    /// Notes one event of an accepted message.
    pub(crate) fn observe(&mut self, input: usize, session: &TransportSession, header: &MessageHeader, event: &Event<'_>) {
        // Only a few kinds of event need the session's counters.
        match event {
            Event::Data(set) if !set.replayed() => return,
            Event::Data(_) | Event::SetSkipped { .. } | Event::SequenceGap { .. } => {}
            _ => return,
        }
        let d = self.session(session, input).domains.entry(header.observation_domain_id.0).or_default();
        match event {
            Event::Data(set) if set.replayed() => d.replayed_sets += 1,
            Event::SetSkipped { reason, .. } => {
                *d.report.sets_skipped_by_reason.entry(reason.name().to_owned()).or_default() += 1;
            }
            // The discarded message started where the next records were
            // expected: the gap is its records.
            Event::SequenceGap { expected, missing, .. } if d.malformed_seq == Some(*expected) => {
                d.malformed_records += u64::from(*missing);
            }
            _ => {}
        }
    }

    pub(crate) fn after_decode(
        &mut self,
        decoder: &Decoder,
        before: Before,
        input: usize,
        session: &TransportSession,
        header: &MessageHeader,
        received: Option<Duration>,
    ) {
        let s = decoder.stats();
        let acc = self.session(session, input);
        if let Some(t) = received {
            acc.first_captured = min_opt(acc.first_captured, Some(t));
            acc.last_captured = max_opt(acc.last_captured, Some(t));
        }
        let d = acc.domains.entry(header.observation_domain_id.0).or_default();
        d.buffered_sets += s.sets_buffered.saturating_sub(before.sets_buffered);
        let expired = s.sets_skipped.get(NEVER_ARRIVED).copied().unwrap_or(0).saturating_sub(before.never_arrived);
        if expired > 0 {
            d.expired_sets += expired;
            *d.report.sets_skipped_by_reason.entry(NEVER_ARRIVED.to_owned()).or_default() += expired;
        }
        d.malformed_seq = None;
    }

    /// Notes a message the decoder discarded.
    pub(crate) fn malformed(&mut self, input: usize, message: u64, received: Option<Duration>, data: &[u8], err: &MessageError) {
        let reason = err.problem.reason();
        if self.malformed_examples.len() < MALFORMED_EXAMPLES {
            self.malformed_examples.push(MalformedExample {
                input: self.inputs.get(input).map(|i| i.path.clone()).unwrap_or_default(),
                message,
                captured: received.map(|t| rfc3339(t.as_secs())),
                session: err.session.to_string(),
                observation_domain_id: err.domain.map(|d| d.0),
                reason,
                detail: err.problem.to_string(),
            });
        }
        let Some(domain) = err.domain else {
            // Without a readable header the domain is unknown: counted on
            // the session itself.
            let acc = self.session(&err.session, input);
            acc.malformed_no_domain += 1;
            *acc.malformed_no_domain_by_reason.entry(reason.to_owned()).or_default() += 1;
            return;
        };
        let seq = MessageHeader::parse(data).ok().map(|h| h.sequence_number);
        let d = self.session(&err.session, input).domains.entry(domain.0).or_default();
        d.report.messages_malformed += 1;
        *d.report.malformed_by_reason.entry(reason.to_owned()).or_default() += 1;
        if d.malformed_seq.is_none() {
            d.malformed_seq = seq;
        }
    }

    /// Snapshots a session's domain counters and ends it in the decoder.
    pub(crate) fn end_session(&mut self, decoder: &mut Decoder, session: &TransportSession) {
        self.snapshot(decoder, Some(session));
        let left = decoder.end_session(session) as u64;
        if let Some(acc) = self.existing(session) {
            attribute_pending(acc.domains.values_mut(), left);
        }
    }

    fn snapshot(&mut self, decoder: &Decoder, only: Option<&TransportSession>) {
        let stats: Vec<(TransportSession, u32, DomainStats)> = decoder
            .domain_stats()
            .filter(|(s, _, _)| only.is_none_or(|o| o == *s))
            .map(|(s, d, ds)| (*s, d.0, ds.clone()))
            .collect();
        for (session, domain, ds) in stats {
            // Every session the decoder knows had a message accounted.
            let input = self.existing(&session).map_or(0, |s| s.input);
            self.session(&session, input).domains.entry(domain).or_default().fold(&ds);
            self.domain_snapshots += 1;
        }
    }

    pub(crate) fn input_stopped(&mut self, input: usize, e: &CaptureError) {
        let offset = match e {
            CaptureError::Truncated { offset, .. }
            | CaptureError::BadHeader { offset, .. }
            | CaptureError::RecordTooLarge { offset, .. } => Some(*offset),
            _ => None,
        };
        if let Some(r) = self.inputs.get_mut(input) {
            let what = match e {
                CaptureError::Truncated { .. } => "is truncated",
                _ => "is damaged",
            };
            self.warnings.push(format!(
                "input {} {what}: {e}; everything before{} was decoded",
                r.path,
                offset.map(|o| format!(" byte {o}")).unwrap_or_else(|| " that point".to_owned())
            ));
            r.stopped_early = Some(StoppedEarly { offset, error: e.to_string() });
        }
    }

    pub(crate) fn input_done(&mut self, input: usize, _format: InputFormat, stats: &CaptureStats, bytes: u64) {
        if let Some(r) = self.inputs.get_mut(input) {
            r.bytes = bytes;
            r.capture = CaptureReport::from_stats(stats);
        }
    }

    /// Ends the pass: pending sets are counted as skipped, every session is
    /// snapshotted, and the totals are filled in.
    pub(crate) fn finish(&mut self, decoder: &mut Decoder) {
        self.snapshot(decoder, None);
        let left = decoder.flush_pending() as u64;
        if left > 0 {
            let mut remaining = left;
            for acc in &mut self.sessions {
                let here: u64 = acc.domains.values().map(DomainAcc::pending_sets).sum();
                let take = here.min(remaining);
                attribute_pending(acc.domains.values_mut(), take);
                remaining -= take;
            }
            if remaining > 0 {
                *self.sets_skipped_by_reason.entry(NEVER_ARRIVED.to_owned()).or_default() += remaining;
            }
        }
        self.totals(decoder.stats());
    }

    fn totals(&mut self, s: &Stats) {
        self.messages = s.messages;
        self.bytes.ipfix = s.octets;
        self.messages_malformed = s.messages_malformed;
        self.malformed_by_reason = s.malformed_by_reason.iter().map(|(k, v)| ((*k).to_owned(), *v)).collect();
        self.records_decoded = s.records_decoded;
        self.options_records_decoded = s.options_records_decoded;
        self.sets_skipped_by_reason = s.sets_skipped.iter().map(|(k, v)| ((*k).to_owned(), *v)).collect();
        self.sets_skipped = s.sets_skipped.values().sum();
        self.sequence_late_records = s.sequence_late_records;
        self.sequence_resets = s.sequence_resets;
        self.templates = TemplateReport {
            learned: s.templates_learned,
            refreshed: s.templates_refreshed,
            redefined: s.templates_replaced,
            redefined_without_withdrawal: s.redefinitions_without_withdrawal,
            withdrawn: s.templates_withdrawn,
            withdrawals_ignored_udp: s.withdrawals_ignored_udp,
            withdrawals_unknown: s.withdrawals_unknown,
            expired: s.templates_expired,
            rejected: s.templates_rejected.values().sum(),
            rejected_by_reason: s.templates_rejected.iter().map(|(k, v)| ((*k).to_owned(), *v)).collect(),
        };
        self.capture = CaptureReport::default();
        for i in &self.inputs {
            self.capture.add(&i.capture);
        }
        self.bytes.input = self.inputs.iter().map(|i| i.bytes).sum();

        let mut gap_to_malformed = 0u64;
        let mut skipped = BTreeMap::<String, u64>::new();
        let mut exporters = Vec::with_capacity(self.order.len());
        let inputs: Vec<String> = self.inputs.iter().map(|i| i.path.clone()).collect();
        for (key, acc) in self.order.iter().zip(self.sessions.iter_mut()) {
            let mut domains = Vec::with_capacity(acc.domains.len());
            for (id, d) in &mut acc.domains {
                let mut r = d.report.clone();
                r.observation_domain_id = *id;
                r.sets_skipped = r.sets_skipped_by_reason.values().sum();
                let undecoded = d.uncounted;
                if undecoded > 0 {
                    let reason = r
                        .sets_skipped_by_reason
                        .iter()
                        .max_by_key(|(_, n)| **n)
                        .map_or(UNDECODABLE.to_owned(), |(k, _)| k.clone());
                    *r.records_skipped_by_reason.entry(reason).or_default() += undecoded;
                }
                let to_malformed = d.malformed_records.min(r.sequence_gap_records);
                if to_malformed > 0 {
                    r.sequence_gap_records -= to_malformed;
                    gap_to_malformed += to_malformed;
                    *r.records_skipped_by_reason.entry(MALFORMED.to_owned()).or_default() += to_malformed;
                }
                r.records_skipped = r.records_skipped_by_reason.values().sum();
                add_map(&mut skipped, &r.records_skipped_by_reason);
                r.first_export_time = r.first_export.map(|t| rfc3339(u64::from(t)));
                r.last_export_time = r.last_export.map(|t| rfc3339(u64::from(t)));
                domains.push(r);
            }
            exporters.push(SessionReport {
                session: SessionSummary {
                    transport: key.transport.name(),
                    exporter: key.exporter.map(|a| a.to_string()),
                    collector: key.collector.map(|a| a.to_string()),
                    input: inputs.get(acc.input).cloned().unwrap_or_default(),
                    first_captured: acc.first_captured.map(|t| rfc3339(t.as_secs())),
                    last_captured: acc.last_captured.map(|t| rfc3339(t.as_secs())),
                    messages_malformed_without_domain: acc.malformed_no_domain,
                    malformed_without_domain_by_reason: acc.malformed_no_domain_by_reason.clone(),
                },
                domains,
            });
        }
        self.exporters = exporters;
        self.sequence_gap_records = s.sequence_gap_records.saturating_sub(gap_to_malformed);
        self.records_skipped = skipped.values().sum();
        self.records_skipped_by_reason = skipped;
        if let Some(n) = self.sets_skipped_by_reason.get(NEVER_ARRIVED) {
            self.warnings.push(format!(
                "{n} data set(s) never found their template (the exporter sent it before the capture started, or not at all); their records are counted as skipped"
            ));
        }
    }

    /// Number of (session, domain) counter snapshots taken (for tests).
    pub fn snapshots(&self) -> usize {
        self.domain_snapshots
    }

    /// The Transport Sessions of [`Accounting::exporters`], in the same order.
    pub fn session_keys(&self) -> &[TransportSession] {
        &self.order
    }
}

/// Gives `left` pending sets to the domains that still had some, as
/// `template-never-arrived`.
fn attribute_pending<'a>(domains: impl Iterator<Item = &'a mut DomainAcc>, left: u64) {
    let mut remaining = left;
    let mut last: Option<&'a mut DomainAcc> = None;
    for d in domains {
        let take = d.pending_sets().min(remaining);
        if take > 0 {
            d.flushed_sets += take;
            *d.report.sets_skipped_by_reason.entry(NEVER_ARRIVED.to_owned()).or_default() += take;
            remaining -= take;
        }
        last = Some(d);
    }
    if let (Some(d), true) = (last, remaining > 0) {
        d.flushed_sets += remaining;
        *d.report.sets_skipped_by_reason.entry(NEVER_ARRIVED.to_owned()).or_default() += remaining;
    }
}

fn add_map(into: &mut BTreeMap<String, u64>, from: &BTreeMap<String, u64>) {
    for (k, v) in from {
        *into.entry(k.clone()).or_default() += v;
    }
}

fn min_opt<T: Ord>(a: Option<T>, b: Option<T>) -> Option<T> {
    match (a, b) {
        (Some(a), Some(b)) => Some(a.min(b)),
        (a, b) => a.or(b),
    }
}

fn max_opt<T: Ord>(a: Option<T>, b: Option<T>) -> Option<T> {
    match (a, b) {
        (Some(a), Some(b)) => Some(a.max(b)),
        (a, b) => a.or(b),
    }
}

/// Seconds since the UNIX epoch as RFC 3339 UTC (`2026-11-30T01:00:00Z`).
pub fn rfc3339(secs: u64) -> String {
    let days = (secs / 86_400) as i64;
    let rem = secs % 86_400;
    let (y, m, d) = civil_from_days(days);
    format!("{y:04}-{m:02}-{d:02}T{:02}:{:02}:{:02}Z", rem / 3600, rem % 3600 / 60, rem % 60)
}

/// Days since 1970-01-01 to a proleptic Gregorian date (H. Hinnant's
/// `civil_from_days` algorithm).
fn civil_from_days(z: i64) -> (i64, u32, u32) {
    let z = z + 719_468;
    let era = z.div_euclid(146_097);
    let doe = z.rem_euclid(146_097);
    let yoe = (doe - doe / 1460 + doe / 36_524 - doe / 146_096) / 365;
    let y = yoe + era * 400;
    let doy = doe - (365 * yoe + yoe / 4 - yoe / 100);
    let mp = (5 * doy + 2) / 153;
    let d = (doy - (153 * mp + 2) / 5 + 1) as u32;
    let m = if mp < 10 { mp + 3 } else { mp - 9 } as u32;
    (if m <= 2 { y + 1 } else { y }, m, d)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn rfc3339_known_instants() {
        // 2026-11-30T01:00:00Z = 1796000400 (checked with `date -u -d @1796000400`).
        assert_eq!(rfc3339(0), "1970-01-01T00:00:00Z");
        assert_eq!(rfc3339(951_782_400), "2000-02-29T00:00:00Z");
        assert_eq!(rfc3339(1_796_000_400), "2026-11-30T01:00:00Z");
        // RFC 7011 §5.2: Export Time wraps at 2106-02-07T06:28:16Z.
        assert_eq!(rfc3339(u64::from(u32::MAX) + 1), "2106-02-07T06:28:16Z");
    }
}
