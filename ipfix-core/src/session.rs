//! Template state and message decoding for many Transport Sessions.
//!
//! [`Decoder`] is the value a collector owns: templates keyed by Transport
//! Session, Observation Domain and Template ID (RFC 7011 §3.4.1, §8),
//! sequence accounting per (session, domain) (§3.1, §10.3.2), and the
//! buffer of Data Sets that arrived before their template (§9.3). It reads
//! no clock and opens no socket: the caller passes bytes and the receive time.

use std::borrow::Cow;
use std::collections::hash_map::Entry;
use std::collections::{BTreeMap, HashMap, VecDeque};

/// The decoder's maps, looked up once or more per message: keyed with a
/// fast hasher that is still seeded per map, so keys an exporter chooses
/// (addresses, ports, domain and template ids) cannot be aimed at one
/// bucket.
type FastMap<K, V> = HashMap<K, V, foldhash::fast::RandomState>;
use std::sync::Arc;
use std::time::Duration;

use crate::error::{Malformed, MessageError, SkipReason, TemplateProblem};
use crate::field::{ObservationDomainId, TemplateId};
use crate::message::{MessageHeader, HEADER_LEN};
use crate::plan::Plan;
use crate::record::{record_len, record_span, Record, RecordFault, Scope, TemplateTable};
use crate::sequence::{SequenceEvent, SequenceTracker};
use crate::set::{SetKind, Sets, SET_HEADER_LEN};
use crate::template::{parse_template_set, Template, TemplateRecord};
use crate::transport::{Transport, TransportSession};

/// Limits and timers. Every bound protects the collector from a hostile or
/// broken exporter; hitting one is counted in [`Stats`].
#[derive(Debug, Clone, PartialEq, Eq)]
#[non_exhaustive]
pub struct Config {
    /// Most Transport Sessions tracked at once; messages of further sessions
    /// are skipped and counted.
    pub max_sessions: usize,
    /// Most templates (of all domains) one Transport Session may define.
    pub max_templates_per_session: usize,
    /// Most octets of Data Sets held while waiting for their template.
    pub max_pending_bytes: usize,
    /// How long (by export time) a buffered Data Set waits for its template.
    pub max_pending_age: Duration,
    /// UDP template lifetime (RFC 7011 §8.4; RFC 6728 §4.5.2 default
    /// templateLifeTime 1800 s). `None` keeps templates forever.
    pub template_lifetime: Option<Duration>,
    /// Deepest nesting of RFC 6313 lists accepted.
    pub max_list_depth: u8,
}

impl Default for Config {
    fn default() -> Self {
        Self {
            max_sessions: 10_000,
            max_templates_per_session: 4_096,
            max_pending_bytes: 16 << 20,
            max_pending_age: Duration::from_secs(60),
            template_lifetime: Some(Duration::from_secs(1800)),
            max_list_depth: 8,
        }
    }
}

impl Config {
    /// Sets [`Config::max_sessions`].
    #[must_use]
    pub const fn with_max_sessions(mut self, n: usize) -> Self {
        self.max_sessions = n;
        self
    }
    /// Sets [`Config::max_templates_per_session`].
    #[must_use]
    pub const fn with_max_templates_per_session(mut self, n: usize) -> Self {
        self.max_templates_per_session = n;
        self
    }
    /// Sets [`Config::max_pending_bytes`].
    #[must_use]
    pub const fn with_max_pending_bytes(mut self, n: usize) -> Self {
        self.max_pending_bytes = n;
        self
    }
    /// Sets [`Config::max_pending_age`].
    #[must_use]
    pub const fn with_max_pending_age(mut self, d: Duration) -> Self {
        self.max_pending_age = d;
        self
    }
    /// Sets [`Config::template_lifetime`].
    #[must_use]
    pub const fn with_template_lifetime(mut self, d: Option<Duration>) -> Self {
        self.template_lifetime = d;
        self
    }
    /// Sets [`Config::max_list_depth`].
    #[must_use]
    pub const fn with_max_list_depth(mut self, n: u8) -> Self {
        self.max_list_depth = n;
        self
    }
}

/// Something a message said, in message order.
#[derive(Debug, Clone)]
#[non_exhaustive]
pub enum Event<'a> {
    /// A template or options template was defined, or redefined with a
    /// different content (identical refreshes are only counted).
    TemplateLearned {
        /// Observation Domain.
        domain: ObservationDomainId,
        /// The compiled template.
        plan: Arc<Plan>,
        /// True when it replaced a different definition of the same ID.
        replaced: bool,
    },
    /// A template was withdrawn (RFC 7011 §8.1; not over UDP, §8.4).
    TemplateWithdrawn {
        /// Observation Domain.
        domain: ObservationDomainId,
        /// The withdrawn ID.
        template_id: TemplateId,
    },
    /// All templates (or all options templates) of a domain were withdrawn.
    AllTemplatesWithdrawn {
        /// Observation Domain.
        domain: ObservationDomainId,
        /// True for the options-template form (ID 3 in Set 3).
        options: bool,
    },
    /// A template could not be accepted.
    TemplateRejected {
        /// Observation Domain.
        domain: ObservationDomainId,
        /// The Template ID it declared.
        template_id: TemplateId,
        /// Offset of the record in the message.
        offset: usize,
        /// Why.
        problem: TemplateProblem,
    },
    /// A Data Set with its template: iterate [`DataSet::records`].
    Data(DataSet<'a>),
    /// A Set whose records could not be decoded, counted with its reason.
    SetSkipped {
        /// Observation Domain.
        domain: ObservationDomainId,
        /// The Set ID.
        set_id: u16,
        /// Offset of the Set Header.
        offset: usize,
        /// Octets in the set body.
        octets: usize,
        /// Why.
        reason: SkipReason,
    },
    /// The Sequence Number jumped ahead: `missing` Data Records never arrived
    /// (RFC 7011 §3.1, §10.3.2).
    SequenceGap {
        /// Observation Domain.
        domain: ObservationDomainId,
        /// Sequence Number expected.
        expected: u32,
        /// Sequence Number received.
        received: u32,
        /// Data Records missing.
        missing: u32,
    },
    /// A message arrived with a Sequence Number behind the expected one
    /// (reordered or duplicated).
    SequenceLate {
        /// Observation Domain.
        domain: ObservationDomainId,
        /// Sequence Number expected.
        expected: u32,
        /// Sequence Number received.
        received: u32,
    },
}

/// The records of one Data Set and what is needed to decode them.
#[derive(Debug, Clone)]
pub struct DataSet<'a> {
    session: TransportSession,
    header: MessageHeader,
    received: Option<Duration>,
    plan: Arc<Plan>,
    templates: Arc<TemplateTable>,
    data: Cow<'a, [u8]>,
    count: usize,
    offset: usize,
    max_depth: u8,
    replayed: bool,
}

impl<'a> DataSet<'a> {
    /// The Transport Session it came on.
    pub const fn session(&self) -> &TransportSession {
        &self.session
    }
    /// The header of the message that carried the set.
    pub const fn header(&self) -> &MessageHeader {
        &self.header
    }
    /// The Observation Domain.
    pub const fn domain(&self) -> ObservationDomainId {
        self.header.observation_domain_id
    }
    /// Export Time of the carrying message, seconds since the UNIX epoch.
    pub const fn export_time(&self) -> u32 {
        self.header.export_time
    }
    /// Receive time given by the caller.
    pub const fn received(&self) -> Option<Duration> {
        self.received
    }
    /// The compiled template.
    pub fn plan(&self) -> &Arc<Plan> {
        &self.plan
    }
    /// The templates of the domain at this point of the stream.
    pub fn templates(&self) -> &Arc<TemplateTable> {
        &self.templates
    }
    /// Number of records.
    pub const fn len(&self) -> usize {
        self.count
    }
    /// True when the set holds no records.
    pub const fn is_empty(&self) -> bool {
        self.count == 0
    }
    /// Offset of the Set Header in its message.
    pub const fn offset(&self) -> usize {
        self.offset
    }
    /// True when the set was buffered until its template arrived (RFC 7011 §9.3).
    pub const fn replayed(&self) -> bool {
        self.replayed
    }
    /// The set body (records and padding).
    pub fn bytes(&self) -> &[u8] {
        &self.data
    }
    /// Iterates the Data Records (RFC 7011 §3.4.3); trailing padding is skipped.
    pub fn records(&self) -> DataRecords<'_> {
        DataRecords { plan: &self.plan, data: &self.data, pos: 0, left: self.count, scope: self.scope() }
    }

    /// The templates and list depth bound nested lists of this set decode with.
    pub(crate) fn scope(&self) -> Scope<'_> {
        Scope { templates: &self.templates, depth: 0, max_depth: self.max_depth }
    }
}

/// Iterator over the records of a [`DataSet`].
#[derive(Debug, Clone)]
pub struct DataRecords<'a> {
    plan: &'a Plan,
    data: &'a [u8],
    pos: usize,
    left: usize,
    scope: Scope<'a>,
}

impl<'a> Iterator for DataRecords<'a> {
    type Item = Record<'a>;

    #[inline]
    fn next(&mut self) -> Option<Record<'a>> {
        if self.left == 0 {
            return None;
        }
        // Lengths (and nested lists) were checked when the message was
        // accepted; here only the field lengths are walked.
        let len = record_span(self.plan, self.data, self.pos)?;
        let bytes = self.data.get(self.pos..self.pos + len)?;
        self.pos += len;
        self.left -= 1;
        Some(Record::new(self.plan, bytes, self.scope))
    }

    fn size_hint(&self) -> (usize, Option<usize>) {
        (self.left, Some(self.left))
    }
}

impl ExactSizeIterator for DataRecords<'_> {}

/// The events of one accepted message, in message order.
#[derive(Debug)]
pub struct Decoded<'a> {
    header: MessageHeader,
    events: std::vec::IntoIter<Event<'a>>,
}

impl<'a> Decoded<'a> {
    /// The Message Header.
    pub const fn header(&self) -> &MessageHeader {
        &self.header
    }
}

impl<'a> Iterator for Decoded<'a> {
    type Item = Event<'a>;
    fn next(&mut self) -> Option<Event<'a>> {
        self.events.next()
    }
    fn size_hint(&self) -> (usize, Option<usize>) {
        self.events.size_hint()
    }
}

/// Counters for a whole decoder. Every record is decoded or counted here.
#[derive(Debug, Clone, Default, PartialEq, Eq, serde::Serialize)]
#[serde(rename_all = "camelCase")]
pub struct Stats {
    /// Messages offered to the decoder.
    pub messages: u64,
    /// Octets offered.
    pub octets: u64,
    /// Messages discarded whole as malformed (RFC 7011 §9.1).
    pub messages_malformed: u64,
    /// Malformed messages by reason.
    pub malformed_by_reason: BTreeMap<&'static str, u64>,
    /// Messages skipped because the session limit was reached.
    pub messages_session_limit: u64,
    /// Data Records decoded (options data records included).
    pub records_decoded: u64,
    /// Of those, records of options templates.
    pub options_records_decoded: u64,
    /// Sets skipped, by reason.
    pub sets_skipped: BTreeMap<&'static str, u64>,
    /// Octets of skipped sets.
    pub octets_skipped: u64,
    /// Records whose count is known (from sequence numbers) but that sat in
    /// sets that could not be decoded.
    pub records_skipped_by_sequence: u64,
    /// Templates (and options templates) learned for the first time.
    pub templates_learned: u64,
    /// Identical re-sends of known templates.
    pub templates_refreshed: u64,
    /// Templates replaced by a different definition.
    pub templates_replaced: u64,
    /// Of those, over TCP/SCTP without a withdrawal first (RFC 7011 §8.1: an exporter fault).
    pub redefinitions_without_withdrawal: u64,
    /// Templates withdrawn.
    pub templates_withdrawn: u64,
    /// Withdrawals received over UDP and ignored as RFC 7011 §8.4 requires.
    pub withdrawals_ignored_udp: u64,
    /// Withdrawals of unknown IDs, ignored (RFC 7011 §8.1).
    pub withdrawals_unknown: u64,
    /// Templates rejected, by reason.
    pub templates_rejected: BTreeMap<&'static str, u64>,
    /// UDP templates expired by lifetime.
    pub templates_expired: u64,
    /// Data Sets buffered for a template that had not arrived.
    pub sets_buffered: u64,
    /// Buffered sets decoded once their template arrived.
    pub sets_replayed: u64,
    /// Data Records missing by sequence numbers.
    pub sequence_gap_records: u64,
    /// Records in messages that arrived behind the expected sequence number.
    pub sequence_late_records: u64,
    /// Sequence number resets (exporter restart).
    pub sequence_resets: u64,
}

impl Stats {
    fn skip(&mut self, reason: SkipReason, octets: usize) {
        *self.sets_skipped.entry(reason.name()).or_default() += 1;
        self.octets_skipped += octets as u64;
    }
}

/// Counters for one (Transport Session, Observation Domain).
#[derive(Debug, Clone, Default, PartialEq, Eq, serde::Serialize)]
#[serde(rename_all = "camelCase")]
pub struct DomainStats {
    /// Messages accepted.
    pub messages: u64,
    /// Data Records decoded.
    pub records_decoded: u64,
    /// Records by template id.
    pub records_by_template: BTreeMap<u16, u64>,
    /// Earliest Export Time seen.
    pub first_export_time: Option<u32>,
    /// Latest Export Time seen.
    pub last_export_time: Option<u32>,
    /// Sequence accounting.
    pub sequence: SequenceTracker,
    /// Template redefinitions (different content, same ID).
    pub template_redefinitions: u64,
    /// Templates withdrawn.
    pub template_withdrawals: u64,
    /// Sets skipped.
    pub sets_skipped: u64,
}

#[derive(Debug, Default)]
struct DomainState {
    templates: Arc<TemplateTable>,
    refreshed: FastMap<u16, Duration>,
    pending: VecDeque<Pending>,
    stats: DomainStats,
}

#[derive(Debug, Clone)]
struct Pending {
    template_id: u16,
    header: MessageHeader,
    received: Option<Duration>,
    offset: usize,
    data: Vec<u8>,
}

#[derive(Debug, Default)]
struct SessionState {
    domains: FastMap<u32, DomainState>,
    template_count: usize,
}

/// The decoder: template state for any number of Transport Sessions.
///
/// See the crate documentation for an example.
#[derive(Debug, Default)]
pub struct Decoder {
    config: Config,
    sessions: FastMap<TransportSession, SessionState>,
    pending_bytes: usize,
    stats: Stats,
}

/// What a message will change, collected before anything is committed so a
/// malformed message leaves no trace but its counter.
struct Pass<'a> {
    events: Vec<Event<'a>>,
    table: Arc<TemplateTable>,
    refreshed: Vec<u16>,
    removed: Vec<u16>,
    new_pending: Vec<Pending>,
    replayed_pending: Vec<usize>,
    /// Octets buffered, this message's new pending sets included.
    pending_bytes: usize,
    records: u64,
    /// Data Sets of this message neither decoded nor replayed; the
    /// sequence accounting needs to know whether every record was counted.
    unresolved: usize,
    /// Records of earlier messages replayed by this one.
    replayed_earlier: u64,
    template_delta: isize,
    stats: Stats,
    dstats: DomainStats,
    /// Records per template id of this message (kept out of `dstats`'
    /// map: a message has one or two templates, and a map per message
    /// costs an allocation).
    records_by_template: Vec<(u16, u64)>,
}

impl Decoder {
    /// A decoder with the given limits.
    pub fn new(config: Config) -> Self {
        Self { config, ..Self::default() }
    }

    /// The limits in force.
    pub const fn config(&self) -> &Config {
        &self.config
    }

    /// Counters so far.
    pub const fn stats(&self) -> &Stats {
        &self.stats
    }

    /// Per (session, domain) counters.
    pub fn domain_stats(&self) -> impl Iterator<Item = (&TransportSession, ObservationDomainId, &DomainStats)> {
        self.sessions
            .iter()
            .flat_map(|(s, st)| st.domains.iter().map(move |(d, ds)| (s, ObservationDomainId(*d), &ds.stats)))
    }

    /// The templates currently known for a session and domain.
    pub fn templates(&self, session: &TransportSession, domain: ObservationDomainId) -> Option<&Arc<TemplateTable>> {
        Some(&self.sessions.get(session)?.domains.get(&domain.0)?.templates)
    }

    /// Decodes one IPFIX Message (RFC 7011 §3) that arrived on `session` at
    /// `received` (the caller's clock; `None` uses the Export Time).
    ///
    /// A malformed message is discarded whole (RFC 7011 §9.1) and the error
    /// says what and where; the decoder's state is unchanged but for its
    /// counters, so decoding goes on with the next message.
    pub fn decode<'a>(
        &mut self,
        session: &TransportSession,
        received: Option<Duration>,
        msg: &'a [u8],
    ) -> Result<Decoded<'a>, MessageError> {
        self.stats.messages += 1;
        self.stats.octets += msg.len() as u64;
        let header = match MessageHeader::parse_checked(msg) {
            Ok(h) => h,
            Err(problem) => {
                let domain = MessageHeader::parse(msg).ok().map(|h| h.observation_domain_id);
                return Err(self.malformed(*session, domain, problem));
            }
        };
        let domain = header.observation_domain_id;
        let now = received.unwrap_or(Duration::from_secs(u64::from(header.export_time)));
        let body = msg.get(HEADER_LEN..).unwrap_or_default();
        // The session and the domain are looked up once for the whole
        // message: the fields are borrowed apart so the state can be read by
        // the pass and then changed by the commit.
        let Self { config, sessions, pending_bytes, stats } = self;
        let session_count = sessions.len();
        let (state, new_session) = match sessions.entry(*session) {
            Entry::Occupied(o) => (o.into_mut(), false),
            Entry::Vacant(_) if session_count >= config.max_sessions => {
                stats.messages_session_limit += 1;
                stats.skip(SkipReason::SessionLimit, msg.len());
                let ev = Event::SetSkipped { domain, set_id: 0, offset: 0, octets: msg.len(), reason: SkipReason::SessionLimit };
                return Ok(Decoded { header, events: vec![ev].into_iter() });
            }
            Entry::Vacant(v) => (v.insert(SessionState::default()), true),
        };
        let template_count = state.template_count;
        let (dstate, new_domain) = match state.domains.entry(domain.0) {
            Entry::Occupied(o) => (o.into_mut(), false),
            Entry::Vacant(v) => (v.insert(DomainState::default()), true),
        };
        match run_pass(config, session, &header, received, now, body, dstate, template_count, *pending_bytes) {
            Ok(pass) => {
                state.template_count = state.template_count.saturating_add_signed(pass.template_delta);
                Ok(commit(config, stats, pending_bytes, dstate, header, now, pass))
            }
            Err(problem) => {
                // The message is discarded whole (RFC 7011 §9.1): it leaves no
                // empty session or domain behind either, so malformed input
                // cannot fill the session table (Config::max_sessions).
                if new_session {
                    sessions.remove(session);
                } else if new_domain {
                    state.domains.remove(&domain.0);
                }
                Err(self.malformed(*session, Some(domain), problem))
            }
        }
    }

    fn malformed(&mut self, session: TransportSession, domain: Option<ObservationDomainId>, problem: Malformed) -> MessageError {
        self.stats.messages_malformed += 1;
        *self.stats.malformed_by_reason.entry(problem.reason()).or_default() += 1;
        MessageError { session, domain, problem }
    }


    /// Ends a Transport Session (TCP/SCTP close, end of a file): its
    /// templates are withdrawn (RFC 7011 §8) and sets still waiting for a
    /// template are counted as skipped. Returns the number of such sets.
    pub fn end_session(&mut self, session: &TransportSession) -> usize {
        let Some(state) = self.sessions.remove(session) else { return 0 };
        let mut n = 0;
        for d in state.domains.into_values() {
            for p in d.pending {
                self.pending_bytes = self.pending_bytes.saturating_sub(p.data.len());
                self.stats.skip(SkipReason::TemplateNeverArrived, p.data.len());
                n += 1;
            }
        }
        n
    }

    /// Counts every set still waiting for a template as skipped (end of input).
    pub fn flush_pending(&mut self) -> usize {
        let mut n = 0;
        for state in self.sessions.values_mut() {
            for d in state.domains.values_mut() {
                for p in d.pending.drain(..) {
                    self.stats.skip(SkipReason::TemplateNeverArrived, p.data.len());
                    d.stats.sets_skipped += 1;
                    n += 1;
                }
            }
        }
        self.pending_bytes = 0;
        n
    }
}

/// Applies an accepted message's pass to its domain's state and the
/// decoder's counters.
fn commit<'a>(
    config: &Config,
    stats: &mut Stats,
    pending_bytes: &mut usize,
    dstate: &mut DomainState,
    header: MessageHeader,
    now: Duration,
    mut pass: Pass<'a>,
) -> Decoded<'a> {
    let domain = header.observation_domain_id;
    dstate.templates = pass.table;
    for id in pass.removed {
        dstate.refreshed.remove(&id);
    }
    for id in pass.refreshed {
        dstate.refreshed.insert(id, now);
    }
    // Replayed pending sets leave the buffer (indices ascending).
    for idx in pass.replayed_pending.iter().rev() {
        if let Some(p) = dstate.pending.remove(*idx) {
            *pending_bytes = pending_bytes.saturating_sub(p.data.len());
        }
    }
    for p in pass.new_pending {
        *pending_bytes += p.data.len();
        dstate.pending.push_back(p);
    }
    // Drop buffered sets that waited too long for their template.
    let max_age = config.max_pending_age.as_secs();
    while let Some(front) = dstate.pending.front() {
        if u64::from(header.export_time.saturating_sub(front.header.export_time)) <= max_age {
            break;
        }
        if let Some(p) = dstate.pending.pop_front() {
            *pending_bytes = pending_bytes.saturating_sub(p.data.len());
            stats.skip(SkipReason::TemplateNeverArrived, p.data.len());
            dstate.stats.sets_skipped += 1;
        }
    }
    // Sequence accounting (RFC 7011 §3.1 with Errata EID 4396).
    let seq_events = dstate.stats.sequence.observe(header.sequence_number, pass.records, pass.unresolved == 0);
    let ds = &mut dstate.stats;
    ds.messages += 1;
    ds.records_decoded += pass.dstats.records_decoded;
    for (t, n) in pass.records_by_template {
        *ds.records_by_template.entry(t).or_default() += n;
    }
    ds.template_redefinitions += pass.dstats.template_redefinitions;
    ds.template_withdrawals += pass.dstats.template_withdrawals;
    ds.sets_skipped += pass.dstats.sets_skipped;
    ds.first_export_time = Some(ds.first_export_time.map_or(header.export_time, |t| t.min(header.export_time)));
    ds.last_export_time = Some(ds.last_export_time.map_or(header.export_time, |t| t.max(header.export_time)));
    match seq_events {
        Some(SequenceEvent::Gap { expected, missing }) => {
            stats.sequence_gap_records += u64::from(missing);
            pass.events.push(Event::SequenceGap { domain, expected, received: header.sequence_number, missing });
        }
        Some(SequenceEvent::Late { expected, filled }) => {
            stats.sequence_late_records += pass.records;
            stats.sequence_gap_records = stats.sequence_gap_records.saturating_sub(filled);
            pass.events.push(Event::SequenceLate { domain, expected, received: header.sequence_number });
        }
        Some(SequenceEvent::Uncounted { records }) => stats.records_skipped_by_sequence += u64::from(records),
        Some(SequenceEvent::Reset) => stats.sequence_resets += 1,
        None => {}
    }
    if pass.replayed_earlier > 0 {
        // Records of earlier messages decoded now were counted as
        // uncounted when the sequence numbers passed over them: they were
        // late, not skipped.
        let r = pass.replayed_earlier;
        stats.records_skipped_by_sequence = stats.records_skipped_by_sequence.saturating_sub(r);
        ds.sequence.uncounted_records = ds.sequence.uncounted_records.saturating_sub(r);
        ds.sequence.received_records += r;
    }
    merge_stats(stats, pass.stats);
    Decoded { header, events: pass.events.into_iter() }
}

fn merge_stats(into: &mut Stats, from: Stats) {
    into.records_decoded += from.records_decoded;
    into.options_records_decoded += from.options_records_decoded;
    for (k, v) in from.sets_skipped {
        *into.sets_skipped.entry(k).or_default() += v;
    }
    into.octets_skipped += from.octets_skipped;
    into.templates_learned += from.templates_learned;
    into.templates_refreshed += from.templates_refreshed;
    into.templates_replaced += from.templates_replaced;
    into.redefinitions_without_withdrawal += from.redefinitions_without_withdrawal;
    into.templates_withdrawn += from.templates_withdrawn;
    into.withdrawals_ignored_udp += from.withdrawals_ignored_udp;
    into.withdrawals_unknown += from.withdrawals_unknown;
    for (k, v) in from.templates_rejected {
        *into.templates_rejected.entry(k).or_default() += v;
    }
    into.sets_buffered += from.sets_buffered;
    into.sets_replayed += from.sets_replayed;
    into.templates_expired += from.templates_expired;
}

/// Drops UDP templates not refreshed within their lifetime. Part of the
/// pass, so a malformed message (discarded whole) expires nothing.
fn expire_templates(d: &DomainState, config: &Config, transport: Transport, now: Duration, pass: &mut Pass<'_>) {
    // RFC 7011 §8.4: over UDP the collector MAY expire templates that are
    // not refreshed within their lifetime; other transports keep them.
    let (Transport::Udp, Some(lifetime)) = (transport, config.template_lifetime) else { return };
    for (id, refreshed) in &d.refreshed {
        if now.saturating_sub(*refreshed) > lifetime && Arc::make_mut(&mut pass.table).remove(id).is_some() {
            pass.removed.push(*id);
            pass.template_delta -= 1;
            pass.stats.templates_expired += 1;
        }
    }
}

fn template_problem_name(p: TemplateProblem) -> &'static str {
    match p {
        TemplateProblem::ReservedId => "reserved-id",
        TemplateProblem::NoScope => "no-scope",
        TemplateProblem::ScopeExceedsFields => "scope-exceeds-fields",
        TemplateProblem::EmptyRecord => "empty-record",
        TemplateProblem::TooManyFields => "too-many-fields",
        TemplateProblem::LimitReached => "limit-reached",
    }
}

#[allow(clippy::too_many_arguments)]
fn run_pass<'a>(
    config: &Config,
    session: &TransportSession,
    header: &MessageHeader,
    received: Option<Duration>,
    now: Duration,
    body: &'a [u8],
    dstate: &DomainState,
    template_count: usize,
    pending_bytes: usize,
) -> Result<Pass<'a>, Malformed> {
    let domain = header.observation_domain_id;
    let mut pass = Pass {
        events: Vec::new(),
        table: Arc::clone(&dstate.templates),
        refreshed: Vec::new(),
        removed: Vec::new(),
        new_pending: Vec::new(),
        replayed_pending: Vec::new(),
        pending_bytes,
        records: 0,
        unresolved: 0,
        replayed_earlier: 0,
        template_delta: 0,
        stats: Stats::default(),
        dstats: DomainStats::default(),
        records_by_template: Vec::new(),
    };
    expire_templates(dstate, config, session.transport, now, &mut pass);
    for set in Sets::new(body, HEADER_LEN) {
        let set = set?;
        match set.header.kind() {
            SetKind::Template | SetKind::OptionsTemplate => {
                let options = set.header.kind() == SetKind::OptionsTemplate;
                let records = parse_template_set(set.body, set.offset + SET_HEADER_LEN, options)?;
                for rec in records {
                    apply_template_record(config, session, domain, rec.offset, rec.record, options, dstate, template_count, &mut pass);
                }
                replay_same_message(config, session, &mut pass)?;
            }
            SetKind::Data(id) => {
                let plan = pass.table.get(&id).cloned();
                match plan {
                    Some(plan) => {
                        let scope = Scope { templates: &pass.table, depth: 0, max_depth: config.max_list_depth };
                        let count = count_records(&plan, set.body, set.offset + SET_HEADER_LEN, scope)?;
                        pass.records += count as u64;
                        note_records(&mut pass, &plan, count);
                        pass.events.push(Event::Data(DataSet {
                            session: *session,
                            header: *header,
                            received,
                            templates: Arc::clone(&pass.table),
                            plan,
                            data: Cow::Borrowed(set.body),
                            count,
                            offset: set.offset,
                            max_depth: config.max_list_depth,
                            replayed: false,
                        }));
                    }
                    None => {
                        // RFC 7011 §9.3: the collector MAY keep such records
                        // briefly and decode them once the template arrives.
                        pass.unresolved += 1;
                        if pass.pending_bytes + set.body.len() <= config.max_pending_bytes {
                            pass.pending_bytes += set.body.len();
                            pass.stats.sets_buffered += 1;
                            pass.new_pending.push(Pending {
                                template_id: id,
                                header: *header,
                                received,
                                offset: set.offset,
                                data: set.body.to_vec(),
                            });
                        } else {
                            let reason = if config.max_pending_bytes == 0 { SkipReason::UnknownTemplate } else { SkipReason::PendingBufferFull };
                            pass.stats.skip(reason, set.body.len());
                            pass.dstats.sets_skipped += 1;
                            pass.events.push(Event::SetSkipped { domain, set_id: id, offset: set.offset, octets: set.body.len(), reason });
                        }
                    }
                }
            }
            SetKind::Reserved(id) => {
                // RFC 7011 §3.3.2: Set IDs 0, 1 and 4..=255 are not used;
                // skipped by their length (facts sheet: interpretation).
                pass.stats.skip(SkipReason::ReservedSetId, set.body.len());
                pass.dstats.sets_skipped += 1;
                pass.events.push(Event::SetSkipped {
                    domain,
                    set_id: id,
                    offset: set.offset,
                    octets: set.body.len(),
                    reason: SkipReason::ReservedSetId,
                });
            }
        }
    }
    Ok(pass)
}

fn note_records(pass: &mut Pass<'_>, plan: &Plan, count: usize) {
    pass.stats.records_decoded += count as u64;
    if plan.is_options() {
        pass.stats.options_records_decoded += count as u64;
    }
    pass.dstats.records_decoded += count as u64;
    let id = plan.id().0;
    match pass.records_by_template.iter_mut().find(|(t, _)| *t == id) {
        Some((_, n)) => *n += count as u64,
        None => pass.records_by_template.push((id, count as u64)),
    }
}

/// Decodes the Data Sets buffered earlier in this message whose template the
/// message has defined since (RFC 7011 §8.2 wants the template first; a
/// collector can still use it). They belong to this message: their records
/// count for its sequence accounting, and a bad length makes it malformed.
fn replay_same_message(config: &Config, session: &TransportSession, pass: &mut Pass<'_>) -> Result<(), Malformed> {
    if pass.new_pending.is_empty() {
        return Ok(());
    }
    for mut p in std::mem::take(&mut pass.new_pending) {
        let Some(plan) = pass.table.get(&p.template_id).cloned() else {
            pass.new_pending.push(p);
            continue;
        };
        let scope = Scope { templates: &pass.table, depth: 0, max_depth: config.max_list_depth };
        let count = count_records(&plan, &p.data, p.offset + SET_HEADER_LEN, scope)?;
        pass.pending_bytes = pass.pending_bytes.saturating_sub(p.data.len());
        pass.unresolved = pass.unresolved.saturating_sub(1);
        pass.records += count as u64;
        let data = std::mem::take(&mut p.data);
        push_replayed(config, session, pass, &p, plan, data, count);
    }
    Ok(())
}

/// Counts a buffered Data Set decoded now that its template is known
/// (RFC 7011 §9.3) and emits it, carrying its own message's header.
fn push_replayed(
    config: &Config,
    session: &TransportSession,
    pass: &mut Pass<'_>,
    p: &Pending,
    plan: Arc<Plan>,
    data: Vec<u8>,
    count: usize,
) {
    pass.stats.sets_replayed += 1;
    note_records(pass, &plan, count);
    pass.events.push(Event::Data(DataSet {
        session: *session,
        header: p.header,
        received: p.received,
        templates: Arc::clone(&pass.table),
        plan,
        data: Cow::Owned(data),
        count,
        offset: p.offset,
        max_depth: config.max_list_depth,
        replayed: true,
    }));
}

/// Counts the records of a Data Set, checking every length. Octets after the
/// last record that are too few for another record are padding (§3.3.1).
fn count_records(plan: &Plan, body: &[u8], offset: usize, scope: Scope<'_>) -> Result<usize, Malformed> {
    if let (Some(len), false) = (plan.fixed_len(), plan.has_lists()) {
        return Ok(body.len() / len);
    }
    let mut pos = 0;
    let mut count = 0;
    while body.len() - pos >= plan.min_len() {
        match record_len(plan, body, pos, scope) {
            Ok(len) => {
                pos += len;
                count += 1;
            }
            Err(RecordFault::Overrun { field_index, offset: at, needed, available }) => {
                return Err(Malformed::RecordOverrun { offset: offset + at, template_id: plan.id(), field_index, needed, available });
            }
            Err(RecordFault::List { offset: at, problem }) => {
                return Err(Malformed::BadList { offset: offset + at, template_id: plan.id(), problem });
            }
        }
    }
    Ok(count)
}

#[allow(clippy::too_many_arguments)]
fn apply_template_record<'a>(
    config: &Config,
    session: &TransportSession,
    domain: ObservationDomainId,
    offset: usize,
    record: TemplateRecord,
    options: bool,
    dstate: &DomainState,
    template_count: usize,
    pass: &mut Pass<'a>,
) {
    let udp = session.transport == Transport::Udp;
    match record {
        TemplateRecord::Define(template) => define(config, session, domain, offset, template, options, dstate, template_count, pass),
        TemplateRecord::Withdraw(id) => {
            if udp {
                // RFC 7011 §8.4: "the Collecting Process MUST ignore" withdrawals over UDP.
                pass.stats.withdrawals_ignored_udp += 1;
                return;
            }
            if Arc::make_mut(&mut pass.table).remove(&id.0).is_some() {
                pass.removed.push(id.0);
                pass.template_delta -= 1;
                pass.stats.templates_withdrawn += 1;
                pass.dstats.template_withdrawals += 1;
                pass.events.push(Event::TemplateWithdrawn { domain, template_id: id });
            } else {
                // RFC 7011 §8.1: unknown ID "MUST ignore ... SHOULD log".
                pass.stats.withdrawals_unknown += 1;
            }
        }
        TemplateRecord::WithdrawAll => {
            if udp {
                pass.stats.withdrawals_ignored_udp += 1;
                return;
            }
            let table = Arc::make_mut(&mut pass.table);
            let ids: Vec<u16> = table.iter().filter(|(_, p)| p.is_options() == options).map(|(id, _)| *id).collect();
            for id in &ids {
                table.remove(id);
                pass.removed.push(*id);
            }
            pass.template_delta -= ids.len() as isize;
            pass.stats.templates_withdrawn += ids.len() as u64;
            pass.dstats.template_withdrawals += ids.len() as u64;
            pass.events.push(Event::AllTemplatesWithdrawn { domain, options });
        }
    }
}

#[allow(clippy::too_many_arguments)]
fn define<'a>(
    config: &Config,
    session: &TransportSession,
    domain: ObservationDomainId,
    offset: usize,
    template: Template,
    options: bool,
    dstate: &DomainState,
    template_count: usize,
    pass: &mut Pass<'a>,
) {
    let id = template.id;
    let reject = |pass: &mut Pass<'a>, problem: TemplateProblem| {
        *pass.stats.templates_rejected.entry(template_problem_name(problem)).or_default() += 1;
        pass.events.push(Event::TemplateRejected { domain, template_id: id, offset, problem });
    };
    // RFC 7011 §3.4.2.2: the Scope Field Count "MUST NOT be zero".
    if options && template.scope_field_count == 0 {
        return reject(pass, TemplateProblem::NoScope);
    }
    if let Some(existing) = pass.table.get(&id.0) {
        if existing.template() == &template {
            pass.stats.templates_refreshed += 1;
            pass.refreshed.push(id.0);
            return;
        }
    }
    let plan = match Plan::compile(template) {
        Ok(plan) => plan,
        Err(problem) => return reject(pass, problem),
    };
    let replaced = pass.table.contains_key(&id.0);
    if !replaced {
        let count = template_count.saturating_add_signed(pass.template_delta);
        if count >= config.max_templates_per_session {
            return reject(pass, TemplateProblem::LimitReached);
        }
        pass.template_delta += 1;
        pass.stats.templates_learned += 1;
    } else {
        // RFC 7011 §8.4: over UDP a new definition MUST replace the old one;
        // over TCP/SCTP it is an exporter fault (§8.1) and we replace too.
        pass.stats.templates_replaced += 1;
        pass.dstats.template_redefinitions += 1;
        if matches!(session.transport, Transport::Tcp | Transport::Sctp) {
            pass.stats.redefinitions_without_withdrawal += 1;
        }
    }
    Arc::make_mut(&mut pass.table).insert(id.0, Arc::clone(&plan));
    pass.refreshed.push(id.0);
    pass.events.push(Event::TemplateLearned { domain, plan: Arc::clone(&plan), replaced });
    // Sets that arrived before this template can be decoded now.
    for (idx, p) in dstate.pending.iter().enumerate() {
        if p.template_id != id.0 || pass.replayed_pending.contains(&idx) {
            continue;
        }
        pass.replayed_pending.push(idx);
        let scope = Scope { templates: &pass.table, depth: 0, max_depth: config.max_list_depth };
        match count_records(&plan, &p.data, p.offset + SET_HEADER_LEN, scope) {
            Ok(count) => {
                pass.replayed_earlier += count as u64;
                push_replayed(config, session, pass, p, Arc::clone(&plan), p.data.clone(), count);
            }
            Err(_) => {
                // The earlier message was accepted before its template was
                // known; only now do its lengths turn out not to fit.
                pass.stats.skip(SkipReason::MalformedWhenReplayed, p.data.len());
                pass.dstats.sets_skipped += 1;
            }
        }
    }
    pass.replayed_pending.sort_unstable();
}
