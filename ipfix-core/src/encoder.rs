//! The exporter side: IPFIX Messages (RFC 7011 §3) built from templates and
//! values. The public surface is [`MessageEncoder`], [`RecordEncoder`],
//! [`LengthPrefix`] and [`EncodeError`].

use std::collections::HashMap;
use std::hash::{BuildHasherDefault, Hasher};
use std::net::{Ipv4Addr, Ipv6Addr};
use std::sync::Arc;

use crate::data_type::DataType;
use crate::error::TemplateProblem;
use crate::field::{ElementId, FieldSpecifier, ObservationDomainId, TemplateId, VARIABLE_LENGTH};
use crate::ie;
use crate::message::{MessageHeader, HEADER_LEN, VERSION};
use crate::plan::Plan;
use crate::record::{field_span, DateTime, OwnedValue, NTP_UNIX_OFFSET};
use crate::set::{OPTIONS_TEMPLATE_SET_ID, SET_HEADER_LEN, TEMPLATE_SET_ID};
use crate::template::Template;
use crate::transport::Transport;

/// The largest message the 16-bit header Length can describe (RFC 7011 §3.1).
pub const MAX_MESSAGE_SIZE: u16 = u16::MAX;

/// Deepest nesting of RFC 6313 lists the encoder follows; it only guards the
/// stack against absurd caller-built values.
const MAX_ENCODE_DEPTH: usize = 64;

/// Largest Information Element id: the id has 15 bits, the top bit of the
/// 16 is the Enterprise bit (RFC 7011 §3.2).
const MAX_ELEMENT_ID: u16 = 0x7fff;

/// Why a template, withdrawal or record could not be encoded.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
#[non_exhaustive]
pub enum EncodeError {
    /// The template was never announced, or it was withdrawn.
    #[error("template {template_id} is not known to the encoder")]
    UnknownTemplate {
        /// The Template ID asked for.
        template_id: TemplateId,
    },
    /// The template itself is impossible (RFC 7011 §3.4.1, §3.4.2.2).
    #[error("template {template_id}: {problem}")]
    BadTemplate {
        /// The Template ID.
        template_id: TemplateId,
        /// What is wrong with it.
        problem: TemplateProblem,
    },
    /// A Field Length the element's abstract type does not allow
    /// (RFC 7011 §6.2), or a zero element length in a non-empty basicList.
    #[error("template {template_id} field {field_index}: length {length} is not allowed for {data_type}")]
    FieldLength {
        /// The template.
        template_id: TemplateId,
        /// Index of the field in the template.
        field_index: usize,
        /// The element's abstract type.
        data_type: DataType,
        /// The Field Length given.
        length: u16,
    },
    /// An Information Element id above 32767, which the 15-bit id cannot
    /// carry (RFC 7011 §3.2).
    #[error("template {template_id} field {field_index}: element id {id} does not fit in 15 bits")]
    ElementIdOutOfRange {
        /// The template.
        template_id: TemplateId,
        /// Index of the field in the template.
        field_index: usize,
        /// The id given.
        id: u16,
    },
    /// Over TCP or SCTP an ID may be reused only after its withdrawal
    /// (RFC 7011 §8.1).
    #[error("template {template_id} is already defined with other fields; withdraw it first")]
    TemplateIdInUse {
        /// The Template ID.
        template_id: TemplateId,
    },
    /// Over UDP the Exporting Process MUST NOT send template withdrawals
    /// (RFC 7011 §8.4).
    #[error("template withdrawals must not be sent over udp")]
    WithdrawalOverUdp,
    /// The number of values differs from the number of fields.
    #[error("template {template_id} has {expected} fields, {given} values were given")]
    ValueCount {
        /// The template.
        template_id: TemplateId,
        /// Fields in the template.
        expected: usize,
        /// Values given.
        given: usize,
    },
    /// A value of another kind than the field's abstract type.
    #[error("template {template_id} field {field_index}: {given} value given for a {data_type} field")]
    WrongType {
        /// The template.
        template_id: TemplateId,
        /// Index of the field in the template.
        field_index: usize,
        /// The field's abstract type.
        data_type: DataType,
        /// The kind of value given, e.g. `"string"`.
        given: &'static str,
    },
    /// A value too large for the Field Length (RFC 7011 §6.2: reduced-size
    /// encoding only when the value fits), a timestamp outside the type's
    /// range, or a variable-length value over 65535 octets.
    #[error("template {template_id} field {field_index}: value does not fit in {length} octets")]
    DoesNotFit {
        /// The template.
        template_id: TemplateId,
        /// Index of the field in the template.
        field_index: usize,
        /// The octets available.
        length: usize,
    },
    /// An octetArray, string or list value whose size differs from a fixed
    /// Field Length.
    #[error("template {template_id} field {field_index}: {given} octets given for a {length}-octet field")]
    WrongLength {
        /// The template.
        template_id: TemplateId,
        /// Index of the field in the template.
        field_index: usize,
        /// The Field Length.
        length: u16,
        /// Octets the value takes.
        given: usize,
    },
    /// Lists nested deeper than the encoder follows.
    #[error("template {template_id} field {field_index}: lists nested deeper than {limit} levels")]
    TooDeep {
        /// The template.
        template_id: TemplateId,
        /// Index of the field in the template.
        field_index: usize,
        /// The bound.
        limit: usize,
    },
    /// Pre-encoded octets that cannot be a record of the template.
    #[error("{length} raw octets are not one record of template {template_id}")]
    RawLength {
        /// The template.
        template_id: TemplateId,
        /// Octets given.
        length: usize,
    },
    /// A record or template that would not fit even alone in a message of
    /// the configured size.
    #[error("{what} of {size} octets for template {template_id} does not fit in a message of at most {max} octets")]
    TooLarge {
        /// `"record"` or `"template"`.
        what: &'static str,
        /// The template.
        template_id: TemplateId,
        /// Octets it takes, Set Header and message header included.
        size: usize,
        /// The configured maximum message size.
        max: usize,
    },
}

/// Which variable-length form (RFC 7011 §7) the encoder writes.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, Default)]
pub enum LengthPrefix {
    /// One octet for lengths below 255, three octets (255 and a 2-octet
    /// length) above.
    Shortest,
    /// Three octets for RFC 6313 lists, as RFC 6313 §5.1 recommends, the
    /// shortest form for everything else. The default.
    #[default]
    ThreeOctetForLists,
    /// Always three octets, which RFC 7011 §7 allows for any length, below
    /// 255 octets too.
    ThreeOctet,
}

/// A template as the encoder keeps it: the definition plus the abstract
/// type of every field, resolved once.
#[derive(Debug)]
struct Compiled {
    template: Template,
    types: Vec<DataType>,
    fixed_len: Option<usize>,
    min_len: usize,
}

impl Compiled {
    const fn set_id(&self) -> u16 {
        if self.template.is_options() {
            OPTIONS_TEMPLATE_SET_ID
        } else {
            TEMPLATE_SET_ID
        }
    }
}

/// Hashes Template IDs with one multiplication. The IDs are the caller's,
/// not an attacker's, so SipHash's protection buys nothing on the
/// per-record path.
#[derive(Debug, Clone, Copy, Default)]
struct IdHasher(u64);

impl Hasher for IdHasher {
    fn finish(&self) -> u64 {
        self.0
    }
    fn write(&mut self, bytes: &[u8]) {
        for b in bytes {
            self.write_u16(u16::from(*b) ^ (self.0 as u16).rotate_left(8));
        }
    }
    fn write_u16(&mut self, n: u16) {
        self.0 = (self.0 ^ u64::from(n)).wrapping_mul(0x9e37_79b9_7f4a_7c15);
    }
}

/// Announced templates by ID.
type TemplateMap = HashMap<u16, Arc<Compiled>, BuildHasherDefault<IdHasher>>;

/// The Set being filled: its ID, where its header starts in the buffer, and
/// the shortest record it may hold (padding must be shorter, §3.3.1).
#[derive(Debug, Clone, Copy)]
struct OpenSet {
    id: u16,
    start: usize,
    min_record: usize,
}

/// Builds IPFIX Messages (RFC 7011 §3) for one Observation Domain of one
/// stream: for tests, capture generators and embedders that export.
///
/// It remembers the templates it announced, counts the
/// Sequence Number, packs Sets into messages no larger than a configured
/// size and opens a new message when one is full. Like the decoder it owns
/// no socket and reads no clock: the caller gives the Export Time to
/// [`MessageEncoder::finish`] and sends the bytes it gets back.
///
/// Three ways to add a Data Record, from most to least checked:
/// - [`MessageEncoder::push_record`] takes one [`OwnedValue`] per field and
///   checks each against the field's abstract type and length;
/// - [`MessageEncoder::record`] returns a [`RecordEncoder`] that takes the
///   values one typed call at a time without building an `OwnedValue`;
/// - [`MessageEncoder::push_raw`] appends octets the caller encoded already
///   (only the framing is checked): the fast path for generators.
///
/// None of them allocates per record once the buffers have grown.
///
/// # Example
///
/// ```
/// use ipfix_core::{
///     Config, Decoder, Event, FieldSpecifier, MessageEncoder, ObservationDomainId, OwnedValue,
///     Template, TemplateId, TransportSession,
/// };
///
/// // sourceIPv4Address (8), packetDeltaCount (2) reduced to 4 octets (RFC 7011 §6.2),
/// // interfaceName (82) variable-length (RFC 7011 §7).
/// let template = Template {
///     id: TemplateId(256),
///     scope_field_count: 0,
///     fields: vec![FieldSpecifier::iana(8, 4), FieldSpecifier::iana(2, 4), FieldSpecifier::iana(82, 65535)],
/// };
/// let mut encoder = MessageEncoder::new(ObservationDomainId(7)).with_max_message_size(1400);
/// encoder.add_template(template)?;
/// let records = [
///     vec![OwnedValue::Ipv4("192.0.2.12".parse()?), OwnedValue::Unsigned(5009), OwnedValue::String("eth0".into())],
///     vec![OwnedValue::Ipv4("192.0.2.27".parse()?), OwnedValue::Unsigned(748), OwnedValue::String("eth1".into())],
/// ];
/// for values in &records {
///     encoder.push_record(TemplateId(256), values)?;
/// }
/// let messages = encoder.finish(1_700_000_000);
/// assert_eq!(messages.len(), 1);
///
/// // Decode them back.
/// let mut decoder = Decoder::new(Config::default());
/// let session = TransportSession::file(0);
/// let mut decoded = Vec::new();
/// for message in &messages {
///     for event in decoder.decode(&session, None, message)? {
///         if let Event::Data(set) = event {
///             for record in set.records() {
///                 decoded.push(record.fields().map(|f| f.value.to_owned_value()).collect::<Vec<_>>());
///             }
///         }
///     }
/// }
/// assert_eq!(decoded, records);
/// // The next message says how many Data Records came before it (RFC 7011 §3.1).
/// assert_eq!(encoder.sequence_number(), 2);
/// # Ok::<(), Box<dyn std::error::Error>>(())
/// ```
///
/// Templates go out in the message being built when they are added, so
/// they precede the Data Sets that use them (RFC 7011 §8: templates
/// SHOULD be sent first; §8.2 requires it within one message). Over UDP,
/// call [`MessageEncoder::refresh_templates`] periodically (RFC 7011 §8.4).
#[derive(Debug)]
pub struct MessageEncoder {
    domain: ObservationDomainId,
    max_size: usize,
    padding: bool,
    prefix: LengthPrefix,
    transport: Option<Transport>,
    types: HashMap<ElementId, DataType>,
    templates: TemplateMap,
    /// Data Records added so far in this stream, modulo 2^32.
    sequence: u32,
    /// Closed messages back to back, then the open one.
    out: Vec<u8>,
    /// Start of each message in `out`.
    starts: Vec<usize>,
    /// Start of the open message, if one is open.
    open: Option<usize>,
    set: Option<OpenSet>,
    scratch: Vec<u8>,
}

impl MessageEncoder {
    /// An encoder for Observation Domain `domain`: messages up to 65535
    /// octets, no Set padding, Sequence Number starting at 0.
    pub fn new(domain: ObservationDomainId) -> Self {
        Self {
            domain,
            max_size: usize::from(MAX_MESSAGE_SIZE),
            padding: false,
            prefix: LengthPrefix::default(),
            transport: None,
            types: HashMap::new(),
            templates: TemplateMap::default(),
            sequence: 0,
            out: Vec::new(),
            starts: Vec::new(),
            open: None,
            set: None,
            scratch: Vec::new(),
        }
    }

    /// Limits every message to `size` octets (RFC 7011 §3.1 allows up to
    /// 65535). Over UDP the message should fit the path MTU, e.g. 1400, or
    /// 512 when the MTU is unknown (RFC 7011 §10.3.3).
    #[must_use]
    pub const fn with_max_message_size(mut self, size: u16) -> Self {
        self.max_size = size as usize;
        self
    }

    /// Pads every Set with zero octets to a multiple of 4 (RFC 7011 §3.3.1:
    /// padding MUST be zero), except where the padding would not be shorter
    /// than every record the Set may hold (§3.3.1 requires that too).
    #[must_use]
    pub const fn with_set_padding(mut self, padding: bool) -> Self {
        self.padding = padding;
        self
    }

    /// Chooses the variable-length form (RFC 7011 §7, RFC 6313 §5.1).
    #[must_use]
    pub const fn with_length_prefix(mut self, prefix: LengthPrefix) -> Self {
        self.prefix = prefix;
        self
    }

    /// Declares the transport, which enables its rules: over UDP
    /// withdrawals are refused (RFC 7011 §8.4); over TCP and SCTP an ID is
    /// redefined only after its withdrawal (RFC 7011 §8.1). Without a
    /// transport neither is checked.
    #[must_use]
    pub const fn with_transport(mut self, transport: Transport) -> Self {
        self.transport = Some(transport);
        self
    }

    /// Starts the Sequence Number at `sequence`, as if that many Data
    /// Records had been sent before.
    #[must_use]
    pub const fn with_sequence_number(mut self, sequence: u32) -> Self {
        self.sequence = sequence;
        self
    }

    /// Encodes `element` as `data_type`. Enterprise-specific and unknown
    /// elements are octetArray otherwise; this lets an embedder that knows
    /// its enterprise elements pass integers, addresses and so on. Applies
    /// to templates added afterwards and to basicList elements.
    #[must_use]
    pub fn with_element_type(mut self, element: ElementId, data_type: DataType) -> Self {
        self.types.insert(element, data_type);
        self
    }

    /// The Observation Domain ID written in every header.
    pub const fn domain(&self) -> ObservationDomainId {
        self.domain
    }

    /// The Sequence Number the next message will carry: Data Records added
    /// in this stream before it, modulo 2^32 (RFC 7011 §3.1, Errata EID 4396).
    pub const fn sequence_number(&self) -> u32 {
        self.sequence
    }

    /// The definition of an announced, not withdrawn, template.
    pub fn template(&self, id: TemplateId) -> Option<&Template> {
        self.templates.get(&id.0).map(|c| &c.template)
    }

    /// The announced, not withdrawn, templates, in no particular order.
    pub fn templates(&self) -> impl Iterator<Item = &Template> {
        self.templates.values().map(|c| &c.template)
    }

    /// Messages started since the last `finish` (the open one included).
    pub fn message_count(&self) -> usize {
        self.starts.len()
    }

    /// True when nothing was added since the last `finish`.
    pub fn is_empty(&self) -> bool {
        self.starts.is_empty()
    }

    /// Octets buffered since the last `finish`.
    pub fn buffered_len(&self) -> usize {
        self.out.len()
    }

    /// The abstract type used for an element: the caller's choice, else the
    /// IANA registry's, else octetArray.
    fn element_type(types: &HashMap<ElementId, DataType>, element: ElementId) -> DataType {
        if let Some(t) = types.get(&element) {
            return *t;
        }
        ie::lookup_element(element).and_then(|e| e.data_type).unwrap_or(DataType::OctetArray)
    }

    /// Announces a Template (RFC 7011 §3.4.1) or, when `scope_field_count`
    /// is not 0, an Options Template (§3.4.2.2), writing it into the
    /// message being built. Re-adding an identical template re-sends it.
    ///
    /// Every Field Length must suit the element's abstract type (§6.2:
    /// reduced sizes for integers, 4 for float64; 65535 for octetArray,
    /// string and lists).
    pub fn add_template(&mut self, template: Template) -> Result<(), EncodeError> {
        let template_id = template.id;
        let compiled = self.compile(template)?;
        if let Some(old) = self.templates.get(&template_id.0) {
            let strict = matches!(self.transport, Some(Transport::Tcp | Transport::Sctp));
            if strict && old.template != compiled.template {
                return Err(EncodeError::TemplateIdInUse { template_id });
            }
        }
        self.write_template(&compiled)?;
        self.templates.insert(template_id.0, Arc::new(compiled));
        Ok(())
    }

    fn compile(&self, template: Template) -> Result<Compiled, EncodeError> {
        let template_id = template.id;
        for (field_index, spec) in template.fields.iter().enumerate() {
            if spec.element.id > MAX_ELEMENT_ID {
                return Err(EncodeError::ElementIdOutOfRange { template_id, field_index, id: spec.element.id });
            }
        }
        let types: Vec<DataType> = template.fields.iter().map(|f| Self::element_type(&self.types, f.element)).collect();
        for (field_index, (spec, data_type)) in template.fields.iter().zip(&types).enumerate() {
            if !data_type.accepts_length(spec.length) {
                return Err(EncodeError::FieldLength { template_id, field_index, data_type: *data_type, length: spec.length });
            }
        }
        // The decoder's own checks: reserved ID, scope count, field count,
        // records that would take no octets.
        let plan = Plan::compile(template.clone()).map_err(|problem| EncodeError::BadTemplate { template_id, problem })?;
        Ok(Compiled { template, types, fixed_len: plan.fixed_len(), min_len: plan.min_len() })
    }

    /// Writes a Template or Options Template Record into the open message.
    fn write_template(&mut self, compiled: &Compiled) -> Result<(), EncodeError> {
        let t = &compiled.template;
        let header = if t.is_options() { 6 } else { 4 };
        let size = header + t.fields.iter().map(FieldSpecifier::wire_size).sum::<usize>();
        // Shortest record of a (Options) Template Set: a 4-octet withdrawal.
        self.reserve(compiled.set_id(), 4, size, t.id, "template")?;
        // Field counts were bounded by Plan::compile (MAX_FIELDS).
        put_u16(&mut self.out, t.id.0);
        put_u16(&mut self.out, u16::try_from(t.fields.len()).unwrap_or(u16::MAX));
        if t.is_options() {
            put_u16(&mut self.out, t.scope_field_count);
        }
        for spec in &t.fields {
            put_specifier(&mut self.out, spec);
        }
        Ok(())
    }

    /// Re-sends every announced template (Options Templates after
    /// Templates, each by ascending ID). Over UDP the exporter MUST re-send
    /// its templates periodically (RFC 7011 §8.4).
    pub fn refresh_templates(&mut self) -> Result<(), EncodeError> {
        let mut all: Vec<Arc<Compiled>> = self.templates.values().cloned().collect();
        all.sort_unstable_by_key(|c| (c.template.is_options(), c.template.id));
        for compiled in all {
            self.write_template(&compiled)?;
        }
        Ok(())
    }

    /// Withdraws one template or options template (RFC 7011 §8.1, Figure
    /// T): Template ID and Field Count 0, in a Set of its kind. Data
    /// Records of it are refused afterwards.
    pub fn withdraw_template(&mut self, id: TemplateId) -> Result<(), EncodeError> {
        if self.transport == Some(Transport::Udp) {
            return Err(EncodeError::WithdrawalOverUdp);
        }
        let set_id = self.templates.get(&id.0).ok_or(EncodeError::UnknownTemplate { template_id: id })?.set_id();
        // A withdrawal record has no Scope Field Count, even for options
        // templates (§8.1).
        self.reserve(set_id, 4, 4, id, "template")?;
        put_u16(&mut self.out, id.0);
        put_u16(&mut self.out, 0);
        self.templates.remove(&id.0);
        Ok(())
    }

    /// Withdraws all templates of the domain (RFC 7011 §8.1, Figure U: a
    /// Template Set of Length 8 holding Template ID 2, Field Count 0).
    /// Options templates stay.
    pub fn withdraw_all_templates(&mut self) -> Result<(), EncodeError> {
        self.withdraw_all(TEMPLATE_SET_ID)
    }

    /// Withdraws all options templates of the domain (RFC 7011 §8.1,
    /// Figure V: an Options Template Set of Length 8 holding Template ID 3,
    /// Field Count 0).
    pub fn withdraw_all_options_templates(&mut self) -> Result<(), EncodeError> {
        self.withdraw_all(OPTIONS_TEMPLATE_SET_ID)
    }

    fn withdraw_all(&mut self, set_id: u16) -> Result<(), EncodeError> {
        if self.transport == Some(Transport::Udp) {
            return Err(EncodeError::WithdrawalOverUdp);
        }
        // Its own Set, as Figures U and V draw it.
        self.close_set();
        self.reserve(set_id, 4, 4, TemplateId(set_id), "template")?;
        put_u16(&mut self.out, set_id);
        put_u16(&mut self.out, 0);
        self.close_set();
        let options = set_id == OPTIONS_TEMPLATE_SET_ID;
        self.templates.retain(|_, c| c.template.is_options() != options);
        Ok(())
    }

    /// Adds a Data Record (RFC 7011 §3.4.3) of template `id` with one value
    /// per field, in template order. Each value must be of the field's
    /// abstract type (see [`RecordEncoder`] for the accepted kinds) and fit
    /// its Field Length.
    pub fn push_record(&mut self, id: TemplateId, values: &[OwnedValue]) -> Result<(), EncodeError> {
        let mut scratch = std::mem::take(&mut self.scratch);
        scratch.clear();
        let encoded = match self.templates.get(&id.0) {
            Some(compiled) => {
                let ctx = Ctx { templates: &self.templates, types: &self.types, prefix: self.prefix };
                encode_record(&ctx, &mut scratch, compiled, values, 0).map(|()| compiled.min_len)
            }
            None => Err(EncodeError::UnknownTemplate { template_id: id }),
        };
        let result = encoded.and_then(|min_len| self.append_record(id, min_len, &scratch));
        self.scratch = scratch;
        result
    }

    /// Starts a Data Record of template `id` whose values are given one by
    /// one; see [`RecordEncoder`].
    pub fn record(&mut self, id: TemplateId) -> Result<RecordEncoder<'_>, EncodeError> {
        let template = Arc::clone(self.templates.get(&id.0).ok_or(EncodeError::UnknownTemplate { template_id: id })?);
        self.scratch.clear();
        Ok(RecordEncoder { encoder: self, template, index: 0 })
    }

    /// Adds a Data Record of template `id` from octets encoded by the
    /// caller: the generators' fast path. Only the framing is checked: the
    /// exact length for fixed-length templates, the variable-length
    /// prefixes (RFC 7011 §7) otherwise; the values are not.
    pub fn push_raw(&mut self, id: TemplateId, record: &[u8]) -> Result<(), EncodeError> {
        let compiled = self.templates.get(&id.0).ok_or(EncodeError::UnknownTemplate { template_id: id })?;
        let framed = match compiled.fixed_len {
            Some(len) => record.len() == len,
            None => {
                let mut pos = 0;
                compiled.template.fields.iter().all(|spec| match field_span(record, pos, spec) {
                    Some((_, end)) => {
                        pos = end;
                        true
                    }
                    None => false,
                }) && pos == record.len()
            }
        };
        if !framed {
            return Err(EncodeError::RawLength { template_id: id, length: record.len() });
        }
        let min_len = compiled.min_len;
        self.append_record(id, min_len, record)
    }

    fn append_record(&mut self, id: TemplateId, min_len: usize, record: &[u8]) -> Result<(), EncodeError> {
        self.reserve(id.0, min_len, record.len(), id, "record")?;
        self.out.extend_from_slice(record);
        // RFC 7011 §3.1: the Sequence Number counts Data Records, options
        // data records included, modulo 2^32.
        self.sequence = self.sequence.wrapping_add(1);
        Ok(())
    }

    /// Zero octets that pad a Set of `set_len` octets to a multiple of 4, if
    /// padding is on and they are shorter than any record of the Set (§3.3.1).
    const fn pad_for(&self, set_len: usize, min_record: usize) -> usize {
        if !self.padding {
            return 0;
        }
        let pad = (4 - set_len % 4) % 4;
        if pad < min_record {
            pad
        } else {
            0
        }
    }

    /// Makes room for `size` octets in a Set `set_id` (whose records are at
    /// least `min_record` long): continues the open Set if it is the same,
    /// else opens one, and starts a new message when the open one would
    /// grow past the maximum size.
    fn reserve(&mut self, set_id: u16, min_record: usize, size: usize, template_id: TemplateId, what: &'static str) -> Result<(), EncodeError> {
        let alone = HEADER_LEN + SET_HEADER_LEN + size + self.pad_for(SET_HEADER_LEN + size, min_record);
        if alone > self.max_size {
            return Err(EncodeError::TooLarge { what, template_id, size: alone, max: self.max_size });
        }
        if let Some(start) = self.open {
            let used = self.out.len() - start;
            match self.set {
                Some(set) if set.id == set_id => {
                    let set_len = self.out.len() - set.start + size;
                    if used + size + self.pad_for(set_len, set.min_record) <= self.max_size {
                        return Ok(());
                    }
                }
                Some(set) => {
                    let closed = used + self.pad_for(self.out.len() - set.start, set.min_record);
                    if closed + SET_HEADER_LEN + size + self.pad_for(SET_HEADER_LEN + size, min_record) <= self.max_size {
                        self.close_set();
                        self.open_set(set_id, min_record);
                        return Ok(());
                    }
                }
                None => {
                    if used + SET_HEADER_LEN + size + self.pad_for(SET_HEADER_LEN + size, min_record) <= self.max_size {
                        self.open_set(set_id, min_record);
                        return Ok(());
                    }
                }
            }
            self.close_message();
        }
        self.open_message();
        self.open_set(set_id, min_record);
        Ok(())
    }

    fn open_message(&mut self) {
        let start = self.out.len();
        let header = MessageHeader {
            version: VERSION,
            length: 0,
            export_time: 0,
            // Data Records sent in this stream from this domain before this
            // message (§3.1 as corrected by Errata EID 4396).
            sequence_number: self.sequence,
            observation_domain_id: self.domain,
        };
        self.out.extend_from_slice(&header.to_bytes());
        self.starts.push(start);
        self.open = Some(start);
    }

    fn open_set(&mut self, id: u16, min_record: usize) {
        let start = self.out.len();
        put_u16(&mut self.out, id);
        put_u16(&mut self.out, 0);
        self.set = Some(OpenSet { id, start, min_record });
    }

    /// Pads the open Set and writes its Length (§3.3.2).
    fn close_set(&mut self) {
        let Some(set) = self.set.take() else { return };
        let pad = self.pad_for(self.out.len() - set.start, set.min_record);
        self.out.resize(self.out.len() + pad, 0);
        // `reserve` kept every message, hence every Set, within 65535 octets.
        let len = u16::try_from(self.out.len() - set.start).unwrap_or(u16::MAX);
        patch(&mut self.out, set.start + 2, &len.to_be_bytes());
    }

    /// Closes the open Set and writes the message Length (§3.1).
    fn close_message(&mut self) {
        self.close_set();
        let Some(start) = self.open.take() else { return };
        let len = u16::try_from(self.out.len() - start).unwrap_or(u16::MAX);
        patch(&mut self.out, start + 2, &len.to_be_bytes());
    }

    /// Closes the open message and hands every message built since the
    /// last `finish` to `each`, with Export Time `export_time` (seconds
    /// since the UNIX epoch, mod 2^32, RFC 7011 §3.1). Returns the number of
    /// messages. The buffer is kept for reuse.
    pub fn finish_with(&mut self, export_time: u32, mut each: impl FnMut(&[u8])) -> usize {
        self.close_message();
        let count = self.emit(export_time, self.starts.len(), &mut each);
        self.out.clear();
        self.starts.clear();
        count
    }

    /// Like [`MessageEncoder::finish_with`], but returns each message in
    /// its own buffer, e.g. one per UDP datagram. Empty when nothing was
    /// added since the last `finish`.
    pub fn finish(&mut self, export_time: u32) -> Vec<Vec<u8>> {
        let mut messages = Vec::with_capacity(self.starts.len());
        self.finish_with(export_time, |m| messages.push(m.to_vec()));
        messages
    }

    /// Like [`MessageEncoder::finish_with`], but appends the messages back
    /// to back to `out`, as a TCP stream (RFC 7011 §10.4.3) or an RFC 5655
    /// file carries them. Returns the number of messages.
    pub fn finish_into(&mut self, export_time: u32, out: &mut Vec<u8>) -> usize {
        self.close_message();
        self.stamp(export_time, self.starts.len());
        out.extend_from_slice(&self.out);
        let count = self.starts.len();
        self.out.clear();
        self.starts.clear();
        count
    }

    /// Hands over only the messages that are full, keeping the open one
    /// for more records: for streaming generators that want every message
    /// filled. Returns the number of messages handed over.
    pub fn finish_full_with(&mut self, export_time: u32, mut each: impl FnMut(&[u8])) -> usize {
        let full = if self.open.is_some() { self.starts.len().saturating_sub(1) } else { self.starts.len() };
        let count = self.emit(export_time, full, &mut each);
        let keep_from = self.starts.get(full).copied().unwrap_or(self.out.len());
        self.out.drain(..keep_from);
        self.starts.drain(..full);
        for s in &mut self.starts {
            *s -= keep_from;
        }
        if let Some(open) = &mut self.open {
            *open -= keep_from;
        }
        if let Some(set) = &mut self.set {
            set.start -= keep_from;
        }
        count
    }

    /// Writes the Export Time into the first `n` messages.
    fn stamp(&mut self, export_time: u32, n: usize) {
        for start in self.starts.iter().take(n) {
            patch(&mut self.out, start + 4, &export_time.to_be_bytes());
        }
    }

    fn emit(&mut self, export_time: u32, n: usize, each: &mut impl FnMut(&[u8])) -> usize {
        self.stamp(export_time, n);
        let mut count = 0;
        for (i, start) in self.starts.iter().take(n).enumerate() {
            let end = self.starts.get(i + 1).copied().unwrap_or(self.out.len());
            if let Some(message) = self.out.get(*start..end) {
                each(message);
                count += 1;
            }
        }
        count
    }
}

/// Builds one Data Record value by value, straight into the encoder's
/// reusable buffer; returned by [`MessageEncoder::record`].
///
/// Each call encodes the next field and checks it against the field's
/// abstract type and length; a failed call leaves the record as it was, so
/// the field can be given again. [`RecordEncoder::finish`] adds the record;
/// dropping the builder discards it.
///
/// Accepted kinds per abstract type (RFC 7011 §6.1): unsigned* ←
/// [`unsigned`](Self::unsigned); signed* ← [`signed`](Self::signed);
/// float32/float64 ← [`float`](Self::float); boolean ←
/// [`boolean`](Self::boolean) (1 = true, 2 = false); macAddress ←
/// [`mac`](Self::mac); string ← [`string`](Self::string); octetArray ←
/// [`octets`](Self::octets); dateTime* ← [`date_time`](Self::date_time)
/// (cut to the type's resolution); ipv4Address/ipv6Address ←
/// [`ipv4`](Self::ipv4)/[`ipv6`](Self::ipv6); unsigned256 and lists ←
/// [`value`](Self::value). [`raw`](Self::raw) writes octets as given for
/// any type.
#[derive(Debug)]
pub struct RecordEncoder<'e> {
    encoder: &'e mut MessageEncoder,
    template: Arc<Compiled>,
    index: usize,
}

impl RecordEncoder<'_> {
    fn put(&mut self, value: Val<'_>) -> Result<&mut Self, EncodeError> {
        let MessageEncoder { templates, types, prefix, scratch, .. } = &mut *self.encoder;
        let compiled = &*self.template;
        let template_id = compiled.template.id;
        let (Some(spec), Some(data_type)) = (compiled.template.fields.get(self.index), compiled.types.get(self.index)) else {
            return Err(EncodeError::ValueCount { template_id, expected: compiled.template.fields.len(), given: self.index + 1 });
        };
        let ctx = Ctx { templates, types, prefix: *prefix };
        let at = At { template_id, field_index: self.index };
        let before = scratch.len();
        match encode_field(&ctx, scratch, at, *data_type, spec.length, value, 0) {
            Ok(()) => {
                self.index += 1;
                Ok(self)
            }
            Err(e) => {
                scratch.truncate(before);
                Err(e)
            }
        }
    }

    /// An unsigned integer, in as many octets as the Field Length says
    /// (RFC 7011 §6.2).
    pub fn unsigned(&mut self, v: u64) -> Result<&mut Self, EncodeError> {
        self.put(Val::Unsigned(v))
    }
    /// A signed integer, in as many octets as the Field Length says.
    pub fn signed(&mut self, v: i64) -> Result<&mut Self, EncodeError> {
        self.put(Val::Signed(v))
    }
    /// A float32 or float64 (sent as float32 when the Field Length is 4).
    pub fn float(&mut self, v: f64) -> Result<&mut Self, EncodeError> {
        self.put(Val::Float(v))
    }
    /// A boolean: 1 = true, 2 = false (RFC 7011 §6.1.5).
    pub fn boolean(&mut self, v: bool) -> Result<&mut Self, EncodeError> {
        self.put(Val::Bool(v))
    }
    /// A MAC-48 address.
    pub fn mac(&mut self, v: [u8; 6]) -> Result<&mut Self, EncodeError> {
        self.put(Val::Mac(v))
    }
    /// A UTF-8 string.
    pub fn string(&mut self, v: &str) -> Result<&mut Self, EncodeError> {
        self.put(Val::Str(v))
    }
    /// An octetArray.
    pub fn octets(&mut self, v: &[u8]) -> Result<&mut Self, EncodeError> {
        self.put(Val::Octets(v))
    }
    /// A point in time for any dateTime type.
    pub fn date_time(&mut self, v: DateTime) -> Result<&mut Self, EncodeError> {
        self.put(Val::DateTime(v))
    }
    /// An IPv4 address.
    pub fn ipv4(&mut self, v: Ipv4Addr) -> Result<&mut Self, EncodeError> {
        self.put(Val::Ipv4(v))
    }
    /// An IPv6 address.
    pub fn ipv6(&mut self, v: Ipv6Addr) -> Result<&mut Self, EncodeError> {
        self.put(Val::Ipv6(v))
    }
    /// Any value, lists included.
    pub fn value(&mut self, v: &OwnedValue) -> Result<&mut Self, EncodeError> {
        self.put(Val::from(v))
    }
    /// Octets written as given, whatever the type (variable-length fields
    /// still get their length prefix): for values a type does not define.
    pub fn raw(&mut self, v: &[u8]) -> Result<&mut Self, EncodeError> {
        self.put(Val::Raw(v))
    }

    /// Adds the record to the message. Every field must have a value.
    pub fn finish(self) -> Result<(), EncodeError> {
        let encoder = self.encoder;
        let compiled = &*self.template;
        let template_id = compiled.template.id;
        if self.index != compiled.template.fields.len() {
            return Err(EncodeError::ValueCount { template_id, expected: compiled.template.fields.len(), given: self.index });
        }
        // A withdrawal while the builder was open is impossible: it holds
        // the encoder borrowed.
        let scratch = std::mem::take(&mut encoder.scratch);
        let result = encoder.append_record(template_id, compiled.min_len, &scratch);
        encoder.scratch = scratch;
        result
    }
}

/// A borrowed value to encode.
#[derive(Debug, Clone, Copy)]
enum Val<'a> {
    Unsigned(u64),
    Signed(i64),
    Float(f64),
    Bool(bool),
    Mac([u8; 6]),
    Str(&'a str),
    Octets(&'a [u8]),
    DateTime(DateTime),
    Ipv4(Ipv4Addr),
    Ipv6(Ipv6Addr),
    Unsigned256(&'a [u8]),
    Raw(&'a [u8]),
    List(&'a OwnedValue),
}

impl<'a> From<&'a OwnedValue> for Val<'a> {
    fn from(v: &'a OwnedValue) -> Self {
        match v {
            OwnedValue::Unsigned(x) => Val::Unsigned(*x),
            OwnedValue::Signed(x) => Val::Signed(*x),
            OwnedValue::Float(x) => Val::Float(*x),
            OwnedValue::Bool(x) => Val::Bool(*x),
            OwnedValue::Mac(x) => Val::Mac(*x),
            OwnedValue::String(x) => Val::Str(x),
            OwnedValue::Octets(x) => Val::Octets(x),
            OwnedValue::DateTime(x) => Val::DateTime(*x),
            OwnedValue::Ipv4(x) => Val::Ipv4(*x),
            OwnedValue::Ipv6(x) => Val::Ipv6(*x),
            OwnedValue::Unsigned256(x) => Val::Unsigned256(x),
            OwnedValue::Invalid(x) => Val::Raw(x),
            OwnedValue::BasicList { .. } | OwnedValue::SubTemplateList { .. } | OwnedValue::SubTemplateMultiList { .. } => Val::List(v),
        }
    }
}

impl Val<'_> {
    /// The kind, for [`EncodeError::WrongType`].
    const fn kind(&self) -> &'static str {
        match self {
            Val::Unsigned(_) => "unsigned",
            Val::Signed(_) => "signed",
            Val::Float(_) => "float",
            Val::Bool(_) => "boolean",
            Val::Mac(_) => "mac address",
            Val::Str(_) => "string",
            Val::Octets(_) => "octets",
            Val::DateTime(_) => "date-time",
            Val::Ipv4(_) => "ipv4 address",
            Val::Ipv6(_) => "ipv6 address",
            Val::Unsigned256(_) => "unsigned256",
            Val::Raw(_) => "raw",
            Val::List(OwnedValue::BasicList { .. }) => "basic list",
            Val::List(OwnedValue::SubTemplateList { .. }) => "sub-template list",
            Val::List(_) => "sub-template multi-list",
        }
    }
}

/// What encoding a value needs besides the value.
#[derive(Clone, Copy)]
struct Ctx<'e> {
    templates: &'e TemplateMap,
    types: &'e HashMap<ElementId, DataType>,
    prefix: LengthPrefix,
}

/// Where a value sits, for errors: the innermost template and field.
#[derive(Debug, Clone, Copy)]
struct At {
    template_id: TemplateId,
    field_index: usize,
}

impl At {
    const fn does_not_fit(self, length: usize) -> EncodeError {
        EncodeError::DoesNotFit { template_id: self.template_id, field_index: self.field_index, length }
    }
}

fn encode_record(ctx: &Ctx<'_>, out: &mut Vec<u8>, compiled: &Compiled, values: &[OwnedValue], depth: usize) -> Result<(), EncodeError> {
    let template_id = compiled.template.id;
    if values.len() != compiled.template.fields.len() {
        return Err(EncodeError::ValueCount { template_id, expected: compiled.template.fields.len(), given: values.len() });
    }
    for (field_index, ((spec, data_type), value)) in compiled.template.fields.iter().zip(&compiled.types).zip(values).enumerate() {
        encode_field(ctx, out, At { template_id, field_index }, *data_type, spec.length, Val::from(value), depth)?;
    }
    Ok(())
}

/// Encodes one field: exactly `length` octets, or a variable-length prefix
/// (RFC 7011 §7) and the value when `length` is 65535.
fn encode_field(ctx: &Ctx<'_>, out: &mut Vec<u8>, at: At, ty: DataType, length: u16, value: Val<'_>, depth: usize) -> Result<(), EncodeError> {
    let start = out.len();
    if length != VARIABLE_LENGTH {
        encode_content(ctx, out, at, ty, usize::from(length), value, depth)?;
        let given = out.len() - start;
        if given != usize::from(length) {
            return Err(EncodeError::WrongLength { template_id: at.template_id, field_index: at.field_index, length, given });
        }
        return Ok(());
    }
    // Reserve the 3-octet form, encode, then move the value back by two
    // octets if the 1-octet form is wanted.
    out.extend_from_slice(&[255, 0, 0]);
    encode_content(ctx, out, at, ty, usize::from(VARIABLE_LENGTH), value, depth)?;
    let len = out.len() - start - 3;
    let Ok(len16) = u16::try_from(len) else {
        return Err(at.does_not_fit(usize::from(VARIABLE_LENGTH)));
    };
    let long = match ctx.prefix {
        LengthPrefix::Shortest => false,
        LengthPrefix::ThreeOctetForLists => ty.is_list(),
        LengthPrefix::ThreeOctet => true,
    };
    if long || len >= 255 {
        patch(out, start + 1, &len16.to_be_bytes());
    } else {
        out.copy_within(start + 3.., start + 1);
        out.truncate(out.len() - 2);
        patch(out, start, &[len as u8]);
    }
    Ok(())
}

/// Appends the value's octets for abstract type `ty`; `width` is the Field
/// Length (65535 for variable-length fields, where only octetArray,
/// string and list types are allowed).
fn encode_content(ctx: &Ctx<'_>, out: &mut Vec<u8>, at: At, ty: DataType, width: usize, value: Val<'_>, depth: usize) -> Result<(), EncodeError> {
    use DataType as T;
    match (ty, value) {
        (_, Val::Raw(b)) => out.extend_from_slice(b),
        (T::Unsigned8 | T::Unsigned16 | T::Unsigned32 | T::Unsigned64, Val::Unsigned(v)) => {
            // RFC 7011 §6.2: reduced size only when the value fits: the
            // octets dropped must all be leading zeros.
            if width < 8 && v >> (8 * width) != 0 {
                return Err(at.does_not_fit(width));
            }
            out.extend_from_slice(v.to_be_bytes().get(8 - width.min(8)..).unwrap_or_default());
        }
        (T::Signed8 | T::Signed16 | T::Signed32 | T::Signed64, Val::Signed(v)) => {
            // RFC 7011 §6.2: signedness MUST be preserved: the value
            // must survive sign extension from the top bit sent.
            if width < 8 {
                let bits = 8 * width as u32;
                let lo = -(1i64 << (bits - 1));
                let hi = (1i64 << (bits - 1)) - 1;
                if v < lo || v > hi {
                    return Err(at.does_not_fit(width));
                }
            }
            out.extend_from_slice(v.to_be_bytes().get(8 - width.min(8)..).unwrap_or_default());
        }
        (T::Float32 | T::Float64, Val::Float(v)) => {
            if width == 8 {
                out.extend_from_slice(&v.to_be_bytes());
            } else {
                // float32, or float64 sent in 4 octets (§6.2). A finite value
                // that becomes infinite does not fit.
                let f = v as f32;
                if v.is_finite() && !f.is_finite() {
                    return Err(at.does_not_fit(width));
                }
                out.extend_from_slice(&f.to_be_bytes());
            }
        }
        // RFC 7011 §6.1.5: true is 1, false is 2.
        (T::Boolean, Val::Bool(v)) => out.push(if v { 1 } else { 2 }),
        (T::MacAddress, Val::Mac(m)) => out.extend_from_slice(&m),
        (T::String, Val::Str(s)) => out.extend_from_slice(s.as_bytes()),
        (T::OctetArray, Val::Octets(b)) => out.extend_from_slice(b),
        (T::Ipv4Address, Val::Ipv4(a)) => out.extend_from_slice(&a.octets()),
        (T::Ipv6Address, Val::Ipv6(a)) => out.extend_from_slice(&a.octets()),
        (T::DateTimeSeconds, Val::DateTime(d)) => {
            // §6.1.7: unsigned32 seconds since the UNIX epoch.
            let secs = u32::try_from(d.secs).map_err(|_| at.does_not_fit(4))?;
            out.extend_from_slice(&secs.to_be_bytes());
        }
        (T::DateTimeMilliseconds, Val::DateTime(d)) => {
            // §6.1.8: unsigned64 milliseconds since the UNIX epoch.
            let ms = u64::try_from(d.secs)
                .ok()
                .and_then(|s| s.checked_mul(1000))
                .and_then(|s| s.checked_add(u64::from(d.nanos / 1_000_000)))
                .ok_or(at.does_not_fit(8))?;
            out.extend_from_slice(&ms.to_be_bytes());
        }
        (T::DateTimeMicroseconds | T::DateTimeNanoseconds, Val::DateTime(d)) => {
            let (secs, fraction) = ntp(d, ty == T::DateTimeMicroseconds).ok_or(at.does_not_fit(8))?;
            out.extend_from_slice(&secs.to_be_bytes());
            out.extend_from_slice(&fraction.to_be_bytes());
        }
        (T::Unsigned256, Val::Unsigned256(b)) => {
            // Big-endian; leading zero octets may be dropped or added.
            let first = b.iter().position(|x| *x != 0).unwrap_or(b.len());
            let digits = b.get(first..).unwrap_or_default();
            if digits.len() > width {
                return Err(at.does_not_fit(width));
            }
            out.resize(out.len() + (width - digits.len()), 0);
            out.extend_from_slice(digits);
        }
        (T::BasicList | T::SubTemplateList | T::SubTemplateMultiList, Val::List(list)) if list_type(list) == ty => {
            if depth >= MAX_ENCODE_DEPTH {
                return Err(EncodeError::TooDeep { template_id: at.template_id, field_index: at.field_index, limit: MAX_ENCODE_DEPTH });
            }
            encode_list(ctx, out, at, list, depth + 1)?;
        }
        (_, value) => {
            return Err(EncodeError::WrongType { template_id: at.template_id, field_index: at.field_index, data_type: ty, given: value.kind() })
        }
    }
    Ok(())
}

const fn list_type(list: &OwnedValue) -> DataType {
    match list {
        OwnedValue::BasicList { .. } => DataType::BasicList,
        OwnedValue::SubTemplateList { .. } => DataType::SubTemplateList,
        _ => DataType::SubTemplateMultiList,
    }
}

/// Encodes an RFC 6313 list after its variable-length prefix.
fn encode_list(ctx: &Ctx<'_>, out: &mut Vec<u8>, at: At, list: &OwnedValue, depth: usize) -> Result<(), EncodeError> {
    match list {
        OwnedValue::BasicList { semantic, element, values } => {
            // RFC 6313 §4.5.1: Semantic, E bit + Field ID, Element Length,
            // Enterprise Number when E = 1, then the elements.
            if element.element.id > MAX_ELEMENT_ID {
                return Err(EncodeError::ElementIdOutOfRange { template_id: at.template_id, field_index: at.field_index, id: element.element.id });
            }
            let ty = MessageEncoder::element_type(ctx.types, element.element);
            // A zero element length would make the elements uncountable.
            if !ty.accepts_length(element.length) || (element.length == 0 && !values.is_empty()) {
                return Err(EncodeError::FieldLength { template_id: at.template_id, field_index: at.field_index, data_type: ty, length: element.length });
            }
            out.push(*semantic);
            put_specifier(out, element);
            for v in values {
                encode_field(ctx, out, at, ty, element.length, Val::from(v), depth)?;
            }
        }
        OwnedValue::SubTemplateList { semantic, template_id, records } => {
            // RFC 6313 §4.5.2: Semantic, Template ID, records.
            out.push(*semantic);
            put_u16(out, *template_id);
            encode_records(ctx, out, *template_id, records, depth)?;
        }
        OwnedValue::SubTemplateMultiList { semantic, entries } => {
            // RFC 6313 §4.5.3: Semantic, then per entry Template ID, Data
            // Records Length (which includes these 4 octets), records.
            out.push(*semantic);
            for (template_id, records) in entries {
                let start = out.len();
                put_u16(out, *template_id);
                put_u16(out, 0);
                encode_records(ctx, out, *template_id, records, depth)?;
                let len = u16::try_from(out.len() - start).map_err(|_| at.does_not_fit(usize::from(u16::MAX)))?;
                patch(out, start + 2, &len.to_be_bytes());
            }
        }
        _ => {}
    }
    Ok(())
}

/// Records of a list's template, which must be known in the domain
/// (RFC 6313 §5.2). An empty list may name any template.
fn encode_records(ctx: &Ctx<'_>, out: &mut Vec<u8>, template_id: u16, records: &[Vec<OwnedValue>], depth: usize) -> Result<(), EncodeError> {
    if records.is_empty() {
        return Ok(());
    }
    let compiled = ctx.templates.get(&template_id).ok_or(EncodeError::UnknownTemplate { template_id: TemplateId(template_id) })?;
    for record in records {
        encode_record(ctx, out, compiled, record, depth)?;
    }
    Ok(())
}

/// An NTP timestamp (RFC 7011 §6.1.9, §6.1.10): seconds since 1900 and a
/// binary fraction, rounded up so that the decoder reads back the same
/// value. For dateTimeMicroseconds the time is cut to the microsecond and
/// the low 11 fraction bits are zero (§6.1.9: they SHOULD be zero).
///
/// `None` outside the span the decoder's era rule reads back (1968-2104,
/// see [`DateTime::from_ntp`]) or for nanoseconds of 10^9 or more.
fn ntp(d: DateTime, micro: bool) -> Option<(u32, u32)> {
    const ERA_SPAN: std::ops::Range<i64> = (1 << 31)..((1 << 32) + (1 << 31));
    let ntp_secs = d.secs.checked_add(NTP_UNIX_OFFSET)?;
    if !ERA_SPAN.contains(&ntp_secs) || d.nanos >= 1_000_000_000 {
        return None;
    }
    let fraction = if micro {
        // ceil(us * 2^32 / 10^6), then up to a multiple of 2^11; the extra
        // is below one microsecond (2^11 + 1 < 4295 fraction units).
        let f = (u64::from(d.nanos / 1000) << 32).div_ceil(1_000_000);
        (f + 0x7ff) & !0x7ff
    } else {
        (u64::from(d.nanos) << 32).div_ceil(1_000_000_000)
    };
    Some(((ntp_secs & 0xffff_ffff) as u32, u32::try_from(fraction).ok()?))
}

fn put_u16(out: &mut Vec<u8>, v: u16) {
    out.extend_from_slice(&v.to_be_bytes());
}

/// Writes a Field Specifier (RFC 7011 §3.2): E bit + id, length, and the
/// Enterprise Number when E = 1.
fn put_specifier(out: &mut Vec<u8>, spec: &FieldSpecifier) {
    match spec.element.enterprise {
        Some(pen) => {
            put_u16(out, spec.element.id | 0x8000);
            put_u16(out, spec.length);
            out.extend_from_slice(&pen.to_be_bytes());
        }
        None => {
            put_u16(out, spec.element.id);
            put_u16(out, spec.length);
        }
    }
}

/// Overwrites `bytes.len()` octets at `at`; positions always come from
/// octets this module wrote.
fn patch(out: &mut [u8], at: usize, bytes: &[u8]) {
    if let Some(dst) = out.get_mut(at..at + bytes.len()) {
        dst.copy_from_slice(bytes);
    }
}

#[cfg(test)]
#[allow(clippy::indexing_slicing, clippy::unwrap_used)]
mod tests {
    use super::*;

    fn t256() -> Template {
        // RFC 7011 Appendix A.2.1.
        Template { id: TemplateId(256), scope_field_count: 0, fields: [8, 12, 15, 2, 1].map(|id| FieldSpecifier::iana(id, 4)).to_vec() }
    }

    fn rec(src: [u8; 4], packets: u64) -> Vec<OwnedValue> {
        let a = Ipv4Addr::from(src);
        vec![OwnedValue::Ipv4(a), OwnedValue::Ipv4(a), OwnedValue::Ipv4(a), OwnedValue::Unsigned(packets), OwnedValue::Unsigned(1)]
    }

    #[test]
    fn header_length_and_sequence() {
        // RFC 7011 §3.1 + Errata EID 4396: records before this message.
        let mut e = MessageEncoder::new(ObservationDomainId(9)).with_max_message_size(16 + 28 + 4 + 40);
        e.add_template(t256()).unwrap();
        for i in 0..5 {
            e.push_record(TemplateId(256), &rec([192, 0, 2, i], 1)).unwrap();
        }
        let msgs = e.finish(77);
        // 16 + 28 (template set) + 4 + 2 records; then 16 + 4 + 3 records.
        let lens: Vec<usize> = msgs.iter().map(Vec::len).collect();
        assert_eq!(lens, [88, 80]);
        let seqs: Vec<u32> = msgs.iter().map(|m| MessageHeader::parse_checked(m).unwrap().sequence_number).collect();
        assert_eq!(seqs, [0, 2]);
        assert!(msgs.iter().all(|m| MessageHeader::parse_checked(m).unwrap().export_time == 77));
        assert_eq!(e.sequence_number(), 5);
        assert!(e.finish(78).is_empty());
    }

    #[test]
    fn reduced_size_must_fit() {
        // RFC 7011 §6.2: only if the value fits.
        let mut e = MessageEncoder::new(ObservationDomainId(0));
        e.add_template(t256()).unwrap();
        let err = e.push_record(TemplateId(256), &rec([192, 0, 2, 1], 1 << 32)).unwrap_err();
        assert_eq!(err, EncodeError::DoesNotFit { template_id: TemplateId(256), field_index: 3, length: 4 });
        let mut r = e.record(TemplateId(256)).unwrap();
        assert!(matches!(r.string("x"), Err(EncodeError::WrongType { field_index: 0, given: "string", .. })));
        r.ipv4(Ipv4Addr::new(192, 0, 2, 1)).unwrap().ipv4(Ipv4Addr::new(192, 0, 2, 2)).unwrap();
        assert!(matches!(r.finish(), Err(EncodeError::ValueCount { expected: 5, given: 2, .. })));
        assert_eq!(e.sequence_number(), 0);
    }

    #[test]
    fn signed_reduced_range() {
        // RFC 7011 §6.2: signedness preserved; 2 octets hold -32768..=32767.
        let t = Template { id: TemplateId(300), scope_field_count: 0, fields: vec![FieldSpecifier::iana(434, 2)] };
        // mibObjectValueInteger (434) is signed32 (IANA registry).
        assert_eq!(ie::lookup(434).and_then(|x| x.data_type), Some(DataType::Signed32));
        let mut e = MessageEncoder::new(ObservationDomainId(0));
        e.add_template(t).unwrap();
        assert!(e.push_record(TemplateId(300), &[OwnedValue::Signed(-32768)]).is_ok());
        assert!(e.push_record(TemplateId(300), &[OwnedValue::Signed(32768)]).is_err());
    }

    #[test]
    fn variable_length_forms() {
        // RFC 7011 §7, Appendix A.5.1 and A.5.2.
        let mut out = Vec::new();
        let templates = TemplateMap::default();
        let types = HashMap::new();
        let ctx = Ctx { templates: &templates, types: &types, prefix: LengthPrefix::Shortest };
        let at = At { template_id: TemplateId(256), field_index: 0 };
        encode_field(&ctx, &mut out, at, DataType::OctetArray, 65535, Val::Octets(&[7; 5]), 0).unwrap();
        assert_eq!(out, [5, 7, 7, 7, 7, 7]);
        out.clear();
        encode_field(&ctx, &mut out, at, DataType::OctetArray, 65535, Val::Octets(&[7; 1000]), 0).unwrap();
        assert_eq!(&out[..3], &[0xff, 0x03, 0xe8]);
        assert_eq!(out.len(), 1003);
        out.clear();
        let ctx = Ctx { prefix: LengthPrefix::ThreeOctet, ..ctx };
        encode_field(&ctx, &mut out, at, DataType::OctetArray, 65535, Val::Octets(&[7; 5]), 0).unwrap();
        assert_eq!(&out[..3], &[0xff, 0x00, 0x05]);
    }

    #[test]
    fn ntp_round_trip_edges() {
        // RFC 7011 §6.1.9: low 11 bits of the fraction zero for microseconds.
        for nanos in [0, 1_000, 999_999_000, 500_000_000, 123_456_000] {
            let d = DateTime { secs: 1_700_000_000, nanos };
            let (s, f) = ntp(d, true).unwrap();
            assert_eq!(f & 0x7ff, 0);
            assert_eq!(DateTime::from_ntp(s, f, true), d);
            let (s, f) = ntp(d, false).unwrap();
            assert_eq!(DateTime::from_ntp(s, f, false), d);
        }
        assert!(ntp(DateTime { secs: 5_000_000_000, nanos: 0 }, false).is_none());
    }

    #[test]
    fn too_large_and_unknown() {
        let mut e = MessageEncoder::new(ObservationDomainId(0)).with_max_message_size(30);
        assert!(matches!(e.add_template(t256()), Err(EncodeError::TooLarge { what: "template", .. })));
        assert_eq!(e.push_raw(TemplateId(256), &[0; 20]), Err(EncodeError::UnknownTemplate { template_id: TemplateId(256) }));
        assert!(e.is_empty());
    }

    #[test]
    fn finish_full_keeps_open_message() {
        let mut e = MessageEncoder::new(ObservationDomainId(1)).with_max_message_size(16 + 4 + 40);
        e.add_template(t256()).unwrap();
        for i in 0..3 {
            e.push_raw(TemplateId(256), &[i; 20]).unwrap();
        }
        let mut got = Vec::new();
        assert_eq!(e.finish_full_with(5, |m| got.push(m.to_vec())), 2);
        assert_eq!(e.message_count(), 1);
        e.push_raw(TemplateId(256), &[9; 20]).unwrap();
        let rest = e.finish(6);
        assert_eq!(rest.len(), 1);
        let h = MessageHeader::parse_checked(&rest[0]).unwrap();
        assert_eq!((h.sequence_number, h.length), (2, 60));
    }
}
