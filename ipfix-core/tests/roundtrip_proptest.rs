//! Property tests: random templates (IANA elements from the registry with
//! lengths their types allow, reduced sizes included; enterprise elements;
//! variable-length fields; RFC 6313 lists) and random records go through the
//! encoder and back through the decoder unchanged; and mutated messages
//! never panic the decoder or change its state when rejected.
//!
//! Value ranges follow the encodings: reduced-size integers hold what fits
//! in the Field Length (RFC 7011 §6.2); dateTimeMicroseconds values are
//! whole microseconds (§6.1.9); NTP-based times lie in the span the
//! decoder's era rule reads back (1968-2104). Addresses are documentation
//! addresses (RFC 5737, RFC 3849); enterprise elements use PEN 32473.
#![allow(clippy::unwrap_used, clippy::indexing_slicing)]

use std::net::{Ipv4Addr, Ipv6Addr};
use std::sync::OnceLock;

use ipfix_core::{
    ie, Config, DataType, DateTime, Decoder, EncodeError, Event, FieldSpecifier, LengthPrefix, MessageEncoder,
    ObservationDomainId, OwnedValue, Stats, Template, TemplateId, TemplateProblem, Transport, TransportSession, Value,
    NTP_UNIX_OFFSET, VARIABLE_LENGTH,
};
use proptest::collection::vec;
use proptest::prelude::*;
use proptest::sample::{select, Index};

const PEN: u32 = 32473;
const T0: u32 = 1_700_000_000;
/// Inner templates referenced from lists.
const INNER_A: u16 = 400;
const INNER_B: u16 = 401;

/// IANA elements with a non-list type, and the list elements by type.
struct Registry {
    scalars: Vec<(u16, DataType)>,
    basic_lists: Vec<u16>,
    sub_template_lists: Vec<u16>,
    multi_lists: Vec<u16>,
}

fn registry() -> &'static Registry {
    static R: OnceLock<Registry> = OnceLock::new();
    R.get_or_init(|| {
        let of = |t: DataType| ie::all().iter().filter(|e| e.data_type == Some(t)).map(|e| e.id).collect::<Vec<_>>();
        Registry {
            scalars: ie::all().iter().filter_map(|e| e.data_type.filter(|t| !t.is_list()).map(|t| (e.id, t))).collect(),
            basic_lists: of(DataType::BasicList),
            sub_template_lists: of(DataType::SubTemplateList),
            multi_lists: of(DataType::SubTemplateMultiList),
        }
    })
}

#[derive(Debug, Clone)]
enum Kind {
    /// A non-list type and its Field Length (or 65535).
    Scalar(DataType, u16),
    /// A basicList of elements of this specifier and type.
    Basic(FieldSpecifier, DataType),
    /// A subTemplateList of INNER_A records.
    SubTemplateList,
    /// A subTemplateMultiList of INNER_A and INNER_B records.
    MultiList,
}

#[derive(Debug, Clone)]
struct FieldDesc {
    spec: FieldSpecifier,
    kind: Kind,
}

/// Field Lengths RFC 7011 §6.2 allows for a type (`var`: 65535 allowed;
/// `zero`: a 0-octet fixed octetArray/string allowed).
fn length_for(ty: DataType, zero: bool) -> BoxedStrategy<u16> {
    use DataType as T;
    let lo = u16::from(!zero);
    match ty {
        T::Unsigned8 | T::Signed8 | T::Boolean => Just(1u16).boxed(),
        T::Unsigned16 | T::Signed16 => (1u16..=2).boxed(),
        T::Unsigned32 | T::Signed32 => (1u16..=4).boxed(),
        T::Unsigned64 | T::Signed64 => (1u16..=8).boxed(),
        T::Unsigned256 => (1u16..=32).boxed(),
        T::Float32 => Just(4u16).boxed(),
        T::Float64 => prop_oneof![Just(4u16), Just(8u16)].boxed(),
        T::OctetArray | T::String => prop_oneof![lo..=6, Just(VARIABLE_LENGTH)].boxed(),
        t => Just(t.natural_length().unwrap_or(4)).boxed(),
    }
}

fn iana_scalar(zero: bool) -> impl Strategy<Value = (FieldSpecifier, DataType)> {
    select(registry().scalars.clone())
        .prop_flat_map(move |(id, ty)| length_for(ty, zero).prop_map(move |len| (FieldSpecifier::iana(id, len), ty)))
}

fn enterprise(zero: bool) -> impl Strategy<Value = (FieldSpecifier, DataType)> {
    let lo = u16::from(!zero);
    (1u16..=0x7fff, prop_oneof![lo..=8, Just(VARIABLE_LENGTH)])
        .prop_map(|(id, len)| (FieldSpecifier::enterprise(PEN, id, len), DataType::OctetArray))
}

fn field() -> impl Strategy<Value = FieldDesc> {
    let r = registry();
    let scalar = prop_oneof![3 => iana_scalar(true), 1 => enterprise(true)]
        .prop_map(|(spec, ty)| FieldDesc { spec, kind: Kind::Scalar(ty, spec.length) });
    let basic = (select(r.basic_lists.clone()), prop_oneof![3 => iana_scalar(false), 1 => enterprise(false)])
        .prop_map(|(id, (elem, ty))| FieldDesc { spec: FieldSpecifier::iana(id, VARIABLE_LENGTH), kind: Kind::Basic(elem, ty) });
    let stl = select(r.sub_template_lists.clone())
        .prop_map(|id| FieldDesc { spec: FieldSpecifier::iana(id, VARIABLE_LENGTH), kind: Kind::SubTemplateList });
    let stml = select(r.multi_lists.clone())
        .prop_map(|id| FieldDesc { spec: FieldSpecifier::iana(id, VARIABLE_LENGTH), kind: Kind::MultiList });
    prop_oneof![8 => scalar, 2 => basic, 1 => stl, 1 => stml]
}

/// NTP-based times the decoder reads back: NTP seconds 2^31 .. 2^32 + 2^31.
fn ntp_secs() -> impl Strategy<Value = i64> {
    ((1i64 << 31) - NTP_UNIX_OFFSET)..((1i64 << 32) + (1i64 << 31) - NTP_UNIX_OFFSET)
}

/// A value of type `ty` for a field of length `len`.
fn scalar(ty: DataType, len: u16) -> BoxedStrategy<OwnedValue> {
    use DataType as T;
    let w = usize::from(len);
    let var = len == VARIABLE_LENGTH;
    match ty {
        T::Unsigned8 | T::Unsigned16 | T::Unsigned32 | T::Unsigned64 => any::<u64>()
            .prop_map(move |v| OwnedValue::Unsigned(if w >= 8 { v } else { v & ((1u64 << (8 * w)) - 1) }))
            .boxed(),
        T::Signed8 | T::Signed16 | T::Signed32 | T::Signed64 => {
            let shift = 64 - 8 * u32::try_from(w.min(8)).unwrap();
            any::<i64>().prop_map(move |v| OwnedValue::Signed((v << shift) >> shift)).boxed()
        }
        T::Float32 => any::<f32>().prop_filter("not NaN", |f| !f.is_nan()).prop_map(|f| OwnedValue::Float(f64::from(f))).boxed(),
        T::Float64 if len == 4 => scalar(T::Float32, 4),
        T::Float64 => any::<f64>().prop_filter("not NaN", |f| !f.is_nan()).prop_map(OwnedValue::Float).boxed(),
        T::Boolean => any::<bool>().prop_map(OwnedValue::Bool).boxed(),
        T::MacAddress => any::<[u8; 6]>().prop_map(OwnedValue::Mac).boxed(),
        T::String if var => "\\PC{0,80}".prop_map(OwnedValue::String).boxed(),
        T::String => vec(0x20u8..0x7f, w).prop_map(|b| OwnedValue::String(String::from_utf8(b).unwrap())).boxed(),
        T::OctetArray if var => vec(any::<u8>(), 0..300).prop_map(OwnedValue::Octets).boxed(),
        T::OctetArray => vec(any::<u8>(), w).prop_map(OwnedValue::Octets).boxed(),
        T::DateTimeSeconds => any::<u32>().prop_map(|s| OwnedValue::DateTime(DateTime { secs: i64::from(s), nanos: 0 })).boxed(),
        T::DateTimeMilliseconds => (0i64..(1 << 45), 0u32..1000)
            .prop_map(|(secs, ms)| OwnedValue::DateTime(DateTime { secs, nanos: ms * 1_000_000 }))
            .boxed(),
        T::DateTimeMicroseconds => (ntp_secs(), 0u32..1_000_000)
            .prop_map(|(secs, us)| OwnedValue::DateTime(DateTime { secs, nanos: us * 1000 }))
            .boxed(),
        T::DateTimeNanoseconds => {
            (ntp_secs(), 0u32..1_000_000_000).prop_map(|(secs, nanos)| OwnedValue::DateTime(DateTime { secs, nanos })).boxed()
        }
        T::Ipv4Address => (select(vec![[192u8, 0, 2], [198, 51, 100], [203, 0, 113]]), any::<u8>())
            .prop_map(|(p, d)| OwnedValue::Ipv4(Ipv4Addr::new(p[0], p[1], p[2], d)))
            .boxed(),
        T::Ipv6Address => any::<[u8; 12]>()
            .prop_map(|rest| {
                let mut o = [0x20, 0x01, 0x0d, 0xb8, 0, 0, 0, 0, 0, 0, 0, 0, 0, 0, 0, 0];
                o[4..].copy_from_slice(&rest);
                OwnedValue::Ipv6(Ipv6Addr::from(o))
            })
            .boxed(),
        T::Unsigned256 => vec(any::<u8>(), w).prop_map(OwnedValue::Unsigned256).boxed(),
        T::BasicList | T::SubTemplateList | T::SubTemplateMultiList => unreachable!("lists are not scalars"),
    }
}

fn semantic() -> impl Strategy<Value = u8> {
    // RFC 6313 §4.4 registry values, plus an unassigned one.
    select(vec![0x00u8, 0x01, 0x02, 0x03, 0x04, 0xff, 0x42])
}

/// INNER_A: sourceIPv4Address, packetDeltaCount in 3 octets, interfaceName.
fn inner_a() -> Template {
    Template {
        id: TemplateId(INNER_A),
        scope_field_count: 0,
        fields: vec![FieldSpecifier::iana(8, 4), FieldSpecifier::iana(2, 3), FieldSpecifier::iana(82, VARIABLE_LENGTH)],
    }
}

/// INNER_B: egressInterface and a basicList of egressInterface (nesting).
fn inner_b() -> Template {
    Template {
        id: TemplateId(INNER_B),
        scope_field_count: 0,
        fields: vec![FieldSpecifier::iana(14, 4), FieldSpecifier::iana(291, VARIABLE_LENGTH)],
    }
}

fn inner_a_record() -> impl Strategy<Value = Vec<OwnedValue>> {
    (scalar(DataType::Ipv4Address, 4), scalar(DataType::Unsigned64, 3), scalar(DataType::String, VARIABLE_LENGTH))
        .prop_map(|(a, b, c)| vec![a, b, c])
}

fn inner_b_record() -> impl Strategy<Value = Vec<OwnedValue>> {
    let elem = FieldSpecifier::iana(14, 4);
    (any::<u32>(), semantic(), vec(any::<u32>(), 0..4)).prop_map(move |(e, s, list)| {
        vec![
            OwnedValue::Unsigned(u64::from(e)),
            OwnedValue::BasicList { semantic: s, element: elem, values: list.into_iter().map(|v| OwnedValue::Unsigned(u64::from(v))).collect() },
        ]
    })
}

fn value(kind: &Kind) -> BoxedStrategy<OwnedValue> {
    match kind.clone() {
        Kind::Scalar(ty, len) => scalar(ty, len),
        Kind::Basic(element, ty) => (semantic(), vec(scalar(ty, element.length), 0..4))
            .prop_map(move |(semantic, values)| OwnedValue::BasicList { semantic, element, values })
            .boxed(),
        Kind::SubTemplateList => (semantic(), vec(inner_a_record(), 0..3))
            .prop_map(|(semantic, records)| OwnedValue::SubTemplateList { semantic, template_id: INNER_A, records })
            .boxed(),
        Kind::MultiList => {
            let entry = prop_oneof![
                vec(inner_a_record(), 0..3).prop_map(|r| (INNER_A, r)),
                vec(inner_b_record(), 0..3).prop_map(|r| (INNER_B, r)),
            ];
            (semantic(), vec(entry, 0..3)).prop_map(|(semantic, entries)| OwnedValue::SubTemplateMultiList { semantic, entries }).boxed()
        }
    }
}

/// Templates (scope field count, fields) and records (template index, values).
#[derive(Debug, Clone)]
struct Case {
    templates: Vec<(u16, Vec<FieldDesc>)>,
    records: Vec<(usize, Vec<OwnedValue>)>,
}

fn case() -> impl Strategy<Value = Case> {
    let template = vec(field(), 1..=8).prop_flat_map(|fields| {
        let n = u16::try_from(fields.len()).unwrap();
        (0..=n.min(2), Just(fields))
    });
    vec(template, 1..=3).prop_flat_map(|templates| {
        let per_template: Vec<BoxedStrategy<Vec<OwnedValue>>> =
            templates.iter().map(|(_, fields)| fields.iter().map(|f| value(&f.kind)).collect::<Vec<_>>().boxed()).collect();
        let n = templates.len();
        let record = (0..n).prop_flat_map(move |i| per_template[i].clone().prop_map(move |v| (i, v)));
        (Just(templates), vec(record, 0..30)).prop_map(|(templates, records)| Case { templates, records })
    })
}

/// Encoder settings: maximum message size, Set padding, prefix form,
/// domain, first Sequence Number.
#[derive(Debug, Clone)]
struct Settings {
    max: u16,
    padding: bool,
    prefix: LengthPrefix,
    domain: u32,
    sequence: u32,
}

fn settings() -> impl Strategy<Value = Settings> {
    (
        select(vec![300u16, 512, 1400, 9000, 65535]),
        any::<bool>(),
        select(vec![LengthPrefix::Shortest, LengthPrefix::ThreeOctetForLists, LengthPrefix::ThreeOctet]),
        any::<u32>(),
        any::<u32>(),
    )
        .prop_map(|(max, padding, prefix, domain, sequence)| Settings { max, padding, prefix, domain, sequence })
}

fn template_of(i: usize, scope: u16, fields: &[FieldDesc]) -> Template {
    Template { id: TemplateId(256 + u16::try_from(i).unwrap()), scope_field_count: scope, fields: fields.iter().map(|f| f.spec).collect() }
}

/// An encoder with the inner templates and the case's templates announced;
/// `None` when a template cannot exist (all fields 0 octets, or larger than
/// a message).
fn encoder(case: &Case, s: &Settings) -> Option<MessageEncoder> {
    let mut enc = MessageEncoder::new(ObservationDomainId(s.domain))
        .with_max_message_size(s.max)
        .with_set_padding(s.padding)
        .with_length_prefix(s.prefix)
        .with_sequence_number(s.sequence);
    enc.add_template(inner_a()).unwrap();
    enc.add_template(inner_b()).unwrap();
    for (i, (scope, fields)) in case.templates.iter().enumerate() {
        match enc.add_template(template_of(i, *scope, fields)) {
            Ok(()) => {}
            Err(EncodeError::BadTemplate { problem: TemplateProblem::EmptyRecord, .. } | EncodeError::TooLarge { .. }) => return None,
            Err(e) => panic!("template {i}: {e}"),
        }
    }
    Some(enc)
}

/// Records as (Template ID, values).
type Records = Vec<(u16, Vec<OwnedValue>)>;

/// Encodes the case; returns the messages and the records that fit.
fn encode(case: &Case, s: &Settings) -> Option<(Vec<Vec<u8>>, Records)> {
    let mut enc = encoder(case, s)?;
    let mut sent = Vec::new();
    for (i, values) in &case.records {
        let id = 256 + u16::try_from(*i).unwrap();
        match enc.push_record(TemplateId(id), values) {
            Ok(()) => sent.push((id, values.clone())),
            // A record larger than a message is refused, nothing else.
            Err(EncodeError::TooLarge { size, max, .. }) => assert!(size > max),
            Err(e) => panic!("record of {id}: {e}"),
        }
    }
    assert_eq!(enc.sequence_number(), s.sequence.wrapping_add(u32::try_from(sent.len()).unwrap()));
    Some((enc.finish(T0), sent))
}

proptest! {
    #![proptest_config(ProptestConfig { cases: 160, ..ProptestConfig::default() })]

    #[test]
    fn encode_decode_round_trip(case in case(), s in settings()) {
        let Some((msgs, sent)) = encode(&case, &s) else { return Ok(()) };
        let mut decoder = Decoder::new(Config::default());
        let session = TransportSession::file(0);
        let mut got = Vec::new();
        let mut raw = Vec::new();
        for m in &msgs {
            prop_assert!(m.len() <= usize::from(s.max));
            let events = decoder.decode(&session, None, m).map_err(|e| TestCaseError::fail(e.to_string()))?;
            for event in events {
                match event {
                    Event::Data(set) => {
                        for r in set.records() {
                            got.push((set.plan().id().0, r.fields().map(|f| f.value.to_owned_value()).collect::<Vec<_>>()));
                            raw.push((set.plan().id(), r.bytes().to_vec()));
                        }
                    }
                    Event::TemplateLearned { .. } => {}
                    other => prop_assert!(false, "unexpected event {other:?}"),
                }
            }
        }
        prop_assert_eq!(&got, &sent);
        // RFC 7011 §3.1 + EID 4396: the numbers agree across every split.
        let stats = decoder.stats();
        prop_assert_eq!(stats.sequence_gap_records + stats.sequence_late_records + stats.records_skipped_by_sequence, 0);

        // The fast path rebuilds the same stream from the records' octets,
        // and the typed builder agrees with push_record.
        let mut fast = encoder(&case, &s).unwrap();
        let mut built = encoder(&case, &s).unwrap();
        for ((id, bytes), (_, values)) in raw.iter().zip(&sent) {
            fast.push_raw(*id, bytes).unwrap();
            let mut r = built.record(*id).unwrap();
            for v in values {
                r.value(v).unwrap();
            }
            r.finish().unwrap();
        }
        let mut stream = Vec::new();
        let n = fast.finish_into(T0, &mut stream);
        prop_assert_eq!(n, msgs.len());
        prop_assert_eq!(stream, msgs.concat());
        prop_assert_eq!(built.finish(T0), msgs);
    }
}

/// A change to a valid message.
#[derive(Debug, Clone)]
enum Mutation {
    SetByte(Index, u8),
    SetU16(Index, u16),
    Truncate(Index),
    Insert(Index, Vec<u8>),
}

fn mutation() -> impl Strategy<Value = Mutation> {
    prop_oneof![
        (any::<Index>(), any::<u8>()).prop_map(|(i, b)| Mutation::SetByte(i, b)),
        (any::<Index>(), any::<u16>()).prop_map(|(i, v)| Mutation::SetU16(i, v)),
        any::<Index>().prop_map(Mutation::Truncate),
        (any::<Index>(), vec(any::<u8>(), 1..8)).prop_map(|(i, b)| Mutation::Insert(i, b)),
    ]
}

fn mutate(msg: &mut Vec<u8>, m: &Mutation) {
    if msg.is_empty() {
        return;
    }
    match m {
        Mutation::SetByte(i, b) => {
            let at = i.index(msg.len());
            msg[at] = *b;
        }
        Mutation::SetU16(i, v) => {
            let at = i.index(msg.len());
            for (k, b) in v.to_be_bytes().into_iter().enumerate() {
                if let Some(x) = msg.get_mut(at + k) {
                    *x = b;
                }
            }
        }
        Mutation::Truncate(i) => msg.truncate(i.index(msg.len())),
        Mutation::Insert(i, bytes) => {
            let at = i.index(msg.len());
            msg.splice(at..at, bytes.iter().copied());
        }
    }
}

/// Walks every value of a record, lists included, through every accessor.
fn touch(value: &Value<'_>) {
    let _ = value.to_owned_value();
    match value {
        Value::BasicList(l) => {
            let _ = (l.semantic(), l.element(), l.data_type());
            l.iter().for_each(|v| touch(&v));
        }
        Value::SubTemplateList(l) => l.records().for_each(|r| r.fields().for_each(|f| touch(&f.value))),
        Value::SubTemplateMultiList(l) => l.entries().for_each(|e| e.records().for_each(|r| r.fields().for_each(|f| touch(&f.value)))),
        _ => {}
    }
}

/// Stats without the counters a malformed message may change.
fn stable(stats: &Stats) -> Stats {
    Stats { messages: 0, octets: 0, messages_malformed: 0, malformed_by_reason: Default::default(), ..stats.clone() }
}

proptest! {
    #![proptest_config(ProptestConfig { cases: 160, ..ProptestConfig::default() })]

    /// RFC 7011 §9.1 and the crate's promise: input never panics the
    /// decoder; a rejected message changes nothing but its counters.
    #[test]
    fn mutated_messages_never_panic(
        case in case(),
        s in settings(),
        target in any::<Index>(),
        mutations in vec(mutation(), 1..6),
        fix_length in any::<bool>(),
        transport in select(vec![Transport::Udp, Transport::Tcp, Transport::Sctp, Transport::File]),
        depth in 0u8..4,
        pending in select(vec![0usize, 64, 1 << 16]),
    ) {
        let Some((mut msgs, _)) = encode(&case, &s) else { return Ok(()) };
        let victim = target.index(msgs.len());
        for m in &mutations {
            mutate(&mut msgs[victim], m);
        }
        if fix_length {
            // Let the mutation reach past the header check.
            if let (Some(len), Some(field)) = (u16::try_from(msgs[victim].len()).ok(), msgs[victim].get_mut(2..4)) {
                field.copy_from_slice(&len.to_be_bytes());
            }
        }
        let session = TransportSession { exporter: Some("192.0.2.1:4739".parse().unwrap()), collector: None, transport, instance: 0 };
        let config = Config::default().with_max_list_depth(depth).with_max_pending_bytes(pending).with_max_templates_per_session(8);
        let mut decoder = Decoder::new(config);
        for msg in &msgs {
            let before = stable(decoder.stats());
            let templates_before: Vec<_> = decoder.domain_stats().map(|(_, d, _)| d).collect();
            let domain = ObservationDomainId(s.domain);
            let table_before = decoder.templates(&session, domain).cloned();
            match decoder.decode(&session, None, msg) {
                Ok(events) => {
                    for event in events {
                        if let Event::Data(set) = event {
                            let mut n = 0;
                            for r in set.records() {
                                n += 1;
                                for (i, f) in r.fields().enumerate() {
                                    touch(&f.value);
                                    prop_assert_eq!(r.raw(i).map(<[u8]>::len), r.raw_fields().nth(i).map(|(_, b)| b.len()));
                                }
                                prop_assert_eq!(r.fields().count(), r.plan().fields().len());
                            }
                            prop_assert_eq!(n, set.len());
                        }
                    }
                }
                Err(_) => {
                    prop_assert_eq!(stable(decoder.stats()), before);
                    let templates_after: Vec<_> = decoder.domain_stats().map(|(_, d, _)| d).collect();
                    prop_assert_eq!(templates_after.len(), templates_before.len());
                    let table_after = decoder.templates(&session, domain).cloned();
                    prop_assert_eq!(table_after.map(|t| t.len()), table_before.map(|t| t.len()));
                }
            }
        }
        decoder.flush_pending();
    }

    /// Arbitrary octets after a valid header never panic the decoder.
    #[test]
    fn arbitrary_bodies_never_panic(body in vec(any::<u8>(), 0..600), transport in select(vec![Transport::Udp, Transport::Tcp])) {
        let mut msg = vec![0x00, 0x0a];
        msg.extend_from_slice(&u16::try_from(body.len() + 16).unwrap().to_be_bytes());
        msg.extend_from_slice(&[0; 12]);
        msg.extend_from_slice(&body);
        let session = TransportSession { exporter: Some("192.0.2.1:4739".parse().unwrap()), collector: None, transport, instance: 0 };
        let mut decoder = Decoder::new(Config::default().with_max_list_depth(3));
        for _ in 0..2 {
            if let Ok(events) = decoder.decode(&session, None, &msg) {
                for event in events {
                    if let Event::Data(set) = event {
                        for r in set.records() {
                            r.fields().for_each(|f| touch(&f.value));
                        }
                    }
                }
            }
        }
    }
}
