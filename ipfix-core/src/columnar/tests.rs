//! Unit tests of the columnar module. Expected values are computed by hand
//! from the cited RFC/IANA text; each test names its source.
#![allow(clippy::unwrap_used, clippy::indexing_slicing, clippy::expect_used)]

use std::net::Ipv4Addr;
use std::sync::Arc;

use arrow::array::{
    Array, BinaryArray, BooleanArray, FixedSizeBinaryArray, Float64Array, Int32Array, ListArray,
    RecordBatch, StringArray, StructArray, TimestampMicrosecondArray, TimestampMillisecondArray,
    TimestampNanosecondArray, TimestampSecondArray, UInt16Array, UInt32Array, UInt64Array, UInt8Array,
};
use arrow::datatypes::{DataType as ArrowType, TimeUnit};

use super::*;
use crate::data_type::DataType;
use crate::field::{ElementId, FieldSpecifier, ObservationDomainId, TemplateId, VARIABLE_LENGTH};
use crate::ie;
use crate::plan::Plan;
use crate::session::{Config, Decoder, Event};
use crate::template::Template;
use crate::transport::TransportSession;
use crate::MessageEncoder;

const EXPORT_TIME: u32 = 1_764_633_600; // 2025-12-02T00:00:00Z (Python datetime)
const PEN: u32 = 32473; // RFC 5612 documentation PEN

fn udp() -> TransportSession {
    // RFC 5737 documentation addresses.
    TransportSession::udp("192.0.2.1:50000".parse().unwrap(), "198.51.100.9:4739".parse().unwrap())
}

fn template(id: u16, scope: u16, fields: &[(u16, u16)]) -> Template {
    Template {
        id: TemplateId(id),
        scope_field_count: scope,
        fields: fields.iter().map(|(ie, len)| FieldSpecifier::iana(*ie, *len)).collect(),
    }
}

fn plan(t: Template) -> Arc<Plan> {
    Plan::compile(t).unwrap()
}

/// An encoder that accepts any field length (octetArray for everything), so
/// tests can send lengths the registry type does not allow.
fn encoder(domain: u32) -> MessageEncoder {
    MessageEncoder::new(ObservationDomainId(domain)).with_max_message_size(65_000)
}

fn loose(mut e: MessageEncoder, elements: &[ElementId]) -> MessageEncoder {
    for el in elements {
        e = e.with_element_type(*el, DataType::OctetArray);
    }
    e
}

struct Converted {
    flows: RecordBatch,
    options: RecordBatch,
    stats: ColumnarStats,
    enrichment: Enrichment,
    schema: Arc<TableSchema>,
}

/// The converter's two passes, as the CLI runs them.
fn convert(session: TransportSession, messages: &[Vec<u8>]) -> Converted {
    convert_by(session, messages, false)
}

/// [`convert`], optionally forcing the record-at-a-time path for sets the
/// builder would append column by column.
fn convert_by(session: TransportSession, messages: &[Vec<u8>], rows: bool) -> Converted {
    convert_in(session, messages, rows, Layout::Readable)
}

/// [`convert_by`] in `layout`.
fn convert_in(session: TransportSession, messages: &[Vec<u8>], rows: bool, layout: Layout) -> Converted {
    let mut plans = Vec::new();
    let mut enrichment = Enrichment::new();
    let mut d = Decoder::new(Config::default());
    for m in messages {
        for ev in d.decode(&session, None, m).unwrap() {
            match ev {
                Event::TemplateLearned { plan, .. } => plans.push(plan),
                Event::Data(set) if set.plan().is_options() => {
                    enrichment.add_options_set(&set);
                }
                _ => {}
            }
        }
    }
    let schema = Arc::new(TableSchema::with_layout(TableKind::Flows, plans.iter().map(|p| &**p), layout));
    let oschema = Arc::new(TableSchema::with_layout(TableKind::Options, plans.iter().map(|p| &**p), layout));
    let mut flows = TableBuilder::new(schema.clone(), 16);
    let mut options = TableBuilder::new(oschema, 16);
    flows.row_path = rows;
    options.row_path = rows;
    let mut d = Decoder::new(Config::default());
    for m in messages {
        for ev in d.decode(&session, None, m).unwrap() {
            if let Event::Data(set) = ev {
                if set.plan().is_options() {
                    options.append(&set, &enrichment);
                } else {
                    flows.append(&set, &enrichment);
                }
            }
        }
    }
    assert!(flows.columns_in_step() && options.columns_in_step());
    let stats = flows.stats().clone();
    Converted { flows: flows.finish().unwrap(), options: options.finish().unwrap(), stats, enrichment, schema }
}

fn col<'b, T: 'static>(b: &'b RecordBatch, name: &str) -> &'b T {
    b.column_by_name(name)
        .unwrap_or_else(|| panic!("no column {name}"))
        .as_any()
        .downcast_ref::<T>()
        .unwrap_or_else(|| panic!("column {name} has type {:?}", b.column_by_name(name).map(|c| c.data_type().clone())))
}

fn strings(b: &RecordBatch, name: &str) -> Vec<Option<String>> {
    col::<StringArray>(b, name).iter().map(|s| s.map(str::to_owned)).collect()
}

fn u32_lists(b: &RecordBatch, name: &str) -> Vec<Option<Vec<u32>>> {
    let l = col::<ListArray>(b, name);
    (0..l.len())
        .map(|i| {
            l.is_valid(i).then(|| {
                let v = l.value(i);
                v.as_any().downcast_ref::<UInt32Array>().unwrap().values().to_vec()
            })
        })
        .collect()
}

fn names(s: &TableSchema) -> Vec<&str> {
    s.columns().iter().map(|c| c.name.as_str()).collect()
}

// ---------------------------------------------------------------------------
// Naming and order
// ---------------------------------------------------------------------------

#[test]
fn naming_repeated_enterprise_unknown_and_collisions() {
    // RFC 7011 §8: repeated elements are legal; §3.2: E bit + PEN; IANA:
    // ids 534-32767 unassigned; 145 templateId and 149 observationDomainId
    // are IANA names that the provenance columns also use.
    let t = Template {
        id: TemplateId(256),
        scope_field_count: 0,
        fields: vec![
            FieldSpecifier::iana(8, 4),
            FieldSpecifier::iana(8, 4),
            FieldSpecifier::iana(8, 4),
            FieldSpecifier::enterprise(PEN, 7, 2),
            FieldSpecifier::enterprise(crate::REVERSE_PEN, 1, 8),
            FieldSpecifier::iana(600, 4),
            FieldSpecifier::iana(145, 2),
            FieldSpecifier::iana(145, 2),
            FieldSpecifier::iana(149, 4),
            FieldSpecifier::iana(12, 3),
            FieldSpecifier::iana(12, 4),
        ],
    };
    assert!(ie::lookup(600).is_none());
    let s = TableSchema::flows([&*plan(t)]);
    let n = names(&s);
    assert_eq!(
        n[..4],
        ["exporter", "observationDomainId", "templateId", "exportTime"],
        "provenance first"
    );
    assert_eq!(
        n[4..15],
        [
            "sourceIPv4Address",
            "sourceIPv4Address_2",
            "sourceIPv4Address_3",
            "pen32473_ie7",
            "pen29305_ie1",
            "ie600",
            "templateId_2",
            "templateId_3",
            "observationDomainId_2",
            "destinationIPv4Address_octets",
            "destinationIPv4Address_2",
        ]
    );
    assert_eq!(n[15..], DerivedColumn::ALL.map(DerivedColumn::name), "derived last");
    let ty = |name: &str| s.columns()[s.column_index(name).unwrap()].data_type.clone();
    assert_eq!(ty("pen32473_ie7"), ArrowType::Binary);
    assert_eq!(ty("pen29305_ie1"), ArrowType::Binary);
    assert_eq!(ty("ie600"), ArrowType::Binary);
    assert_eq!(ty("templateId_2"), ArrowType::UInt16);
    assert_eq!(ty("destinationIPv4Address_octets"), ArrowType::Binary);
    assert_eq!(ty("destinationIPv4Address_2"), ArrowType::Utf8);
    // Field metadata names the element.
    let f = s.arrow_schema().field_with_name("pen32473_ie7").unwrap();
    assert_eq!(f.metadata().get("ipfix.enterpriseNumber").map(String::as_str), Some("32473"));
    assert_eq!(f.metadata().get("ipfix.elementId").map(String::as_str), Some("7"));
}

#[test]
fn union_keeps_first_appearance_order_and_nulls_absent_columns() {
    let a = template(256, 0, &[(8, 4), (1, 8)]);
    let b = template(257, 0, &[(12, 4), (8, 4)]);
    let mut e = encoder(1);
    e.add_template(a).unwrap();
    e.add_template(b).unwrap();
    e.push_raw(TemplateId(256), &[192, 0, 2, 1, 0, 0, 0, 0, 0, 0, 0, 100]).unwrap();
    e.push_raw(TemplateId(257), &[198, 51, 100, 7, 192, 0, 2, 2]).unwrap();
    let c = convert(udp(), &e.finish(EXPORT_TIME));
    assert_eq!(
        names(&c.schema)[4..7],
        ["sourceIPv4Address", "octetDeltaCount", "destinationIPv4Address"]
    );
    assert_eq!(c.flows.num_rows(), 2);
    assert_eq!(strings(&c.flows, "sourceIPv4Address"), [Some("192.0.2.1".into()), Some("192.0.2.2".into())]);
    let octets = col::<UInt64Array>(&c.flows, "octetDeltaCount");
    assert_eq!((octets.value(0), octets.is_null(1)), (100, true));
    assert_eq!(strings(&c.flows, "destinationIPv4Address"), [None, Some("198.51.100.7".into())]);
    assert_eq!(col::<UInt16Array>(&c.flows, "templateId").values().to_vec(), [256, 257]);
    assert_eq!(strings(&c.flows, "exporter"), [Some("192.0.2.1".into()), Some("192.0.2.1".into())]);
    let et = col::<TimestampSecondArray>(&c.flows, "exportTime");
    assert_eq!(et.value(0), i64::from(EXPORT_TIME));
    assert_eq!(et.timezone(), Some("UTC"));
    assert_eq!(col::<UInt32Array>(&c.flows, "observationDomainId").value(1), 1);
}

#[test]
fn file_sessions_have_null_exporter() {
    // RFC 5655: a file carries no transport, so no exporter address.
    let mut e = encoder(3);
    e.add_template(template(256, 0, &[(2, 4)])).unwrap();
    e.push_raw(TemplateId(256), &[0, 0, 0, 9]).unwrap();
    let c = convert(TransportSession::file(0), &e.finish(EXPORT_TIME));
    assert_eq!(strings(&c.flows, "exporter"), [None]);
    assert_eq!(col::<UInt64Array>(&c.flows, "packetDeltaCount").value(0), 9);
}

// ---------------------------------------------------------------------------
// Types
// ---------------------------------------------------------------------------

#[test]
fn every_abstract_type_maps_as_the_contract_says() {
    // The contract's table, one IANA element of each abstract type (RFC 7011
    // §6.1, RFC 6313 §4.5, IANA type 23).
    let ts = |u| ArrowType::Timestamp(u, Some("UTC".into()));
    let expected = |t: DataType| -> ArrowType {
        match t {
            DataType::OctetArray => ArrowType::Binary,
            DataType::Unsigned8 => ArrowType::UInt8,
            DataType::Unsigned16 => ArrowType::UInt16,
            DataType::Unsigned32 => ArrowType::UInt32,
            DataType::Unsigned64 => ArrowType::UInt64,
            DataType::Signed8 => ArrowType::Int8,
            DataType::Signed16 => ArrowType::Int16,
            DataType::Signed32 => ArrowType::Int32,
            DataType::Signed64 => ArrowType::Int64,
            DataType::Float32 => ArrowType::Float32,
            DataType::Float64 => ArrowType::Float64,
            DataType::Boolean => ArrowType::Boolean,
            DataType::MacAddress | DataType::String | DataType::Ipv4Address | DataType::Ipv6Address => ArrowType::Utf8,
            DataType::DateTimeSeconds => ts(TimeUnit::Second),
            DataType::DateTimeMilliseconds => ts(TimeUnit::Millisecond),
            DataType::DateTimeMicroseconds => ts(TimeUnit::Microsecond),
            DataType::DateTimeNanoseconds => ts(TimeUnit::Nanosecond),
            DataType::Unsigned256 => ArrowType::FixedSizeBinary(32),
            DataType::BasicList => ArrowType::new_list(ArrowType::Utf8, true),
            DataType::SubTemplateList | DataType::SubTemplateMultiList => record_struct_type(),
        }
    };
    // The registry has no signed8/16/64 or float32 element, so each type is
    // checked on a hand-made plan field; where the registry has one, also
    // through a schema built from a compiled plan.
    let mut fields = Vec::new();
    for t in DataType::ALL {
        let len = t.natural_length().unwrap_or(VARIABLE_LENGTH);
        let (decode, length_mismatch) = crate::plan::Decode::choose(t, len);
        let pf = crate::plan::PlanField {
            spec: FieldSpecifier::iana(291, len),
            ie: None,
            data_type: t,
            decode,
            length_mismatch,
            offset: Some(0),
            is_scope: false,
            occurrence: 1,
        };
        assert_eq!(element_type(&pf), expected(t), "type {t}");
        // A builder exists for the type and finishes to it.
        let mut column = super::builder::Column::new(&expected(t), 0).unwrap();
        assert_eq!(column.finish().data_type(), &expected(t), "type {t}");
        let ie = match t {
            DataType::BasicList => ie::lookup(291),
            _ => ie::all().iter().find(|e| e.data_type == Some(t)),
        };
        if let Some(ie) = ie {
            fields.push((ie.id, len));
        }
    }
    let p = plan(template(256, 0, &fields));
    let s = Arc::new(TableSchema::flows([&*p]));
    for field in p.fields() {
        let c = &s.columns()[s.column_index(&column_name(field)).unwrap()];
        assert_eq!(c.data_type, expected(field.data_type), "type {}", field.data_type);
    }
    let mut b = TableBuilder::new(s.clone(), 0);
    let batch = b.finish().unwrap();
    assert_eq!(batch.schema(), *s.arrow_schema());
}

#[test]
fn registered_basic_lists_get_their_element_type() {
    // IANA IE 496: srhSegmentIPv6BasicList holds srhSegmentIPv6 (ipv6Address).
    let list = ElementId::iana(ie::id::SRH_SEGMENT_IPV6_BASIC_LIST);
    assert_eq!(basic_list_item_type(list), ArrowType::Utf8);
    // bgpCommunity (483) is unsigned32 in the registry (pairing from memory, unconfirmed).
    assert_eq!(basic_list_item_type(ElementId::iana(484)), ArrowType::UInt32);
    assert_eq!(basic_list_item_type(ElementId::iana(291)), ArrowType::Utf8);
    assert_eq!(basic_list_item_type(ElementId::enterprise(PEN, 496)), ArrowType::Utf8);
}

/// Finds an IANA element of type `t`.
fn ie_of(t: DataType) -> u16 {
    ie::all().iter().find(|e| e.data_type == Some(t)).unwrap().id
}

#[test]
fn values_decode_to_their_arrow_types() {
    let signed32 = ie_of(DataType::Signed32);
    let boolean = ie_of(DataType::Boolean);
    let fields = [
        (2, 3),                                    // packetDeltaCount, unsigned64 in 3 octets (§6.2)
        (signed32, 1),                             // signed32 in 1 octet: 0xff = -1 (§6.2)
        (ie::id::SAMPLING_PROBABILITY, 4),         // float64 sent as float32 (§6.2)
        (boolean, 1),                              // boolean 2 = false (§6.1.5)
        (56, 6),                                   // sourceMacAddress
        (ie::id::INTERFACE_NAME, VARIABLE_LENGTH), // string
        (ie::id::MPLS_VPN_ROUTE_DISTINGUISHER, 8), // octetArray
        (27, 16),                                  // sourceIPv6Address
        (ie::id::FLOW_START_SECONDS, 4),           // dateTimeSeconds
        (ie::id::FLOW_START_MILLISECONDS, 8),      // dateTimeMilliseconds
        (ie::id::FLOW_START_MICROSECONDS, 8),      // dateTimeMicroseconds (NTP)
        (ie::id::FLOW_START_NANOSECONDS, 8),       // dateTimeNanoseconds (NTP)
        (515, 2),                                  // ipv6ExtensionHeadersFull, unsigned256 in 2 octets
    ];
    let mut e = encoder(1);
    e.add_template(template(256, 0, &fields)).unwrap();
    let mut r = vec![0x01, 0x00, 0x00, 0xff];
    r.extend_from_slice(&0.15f32.to_be_bytes());
    r.push(2);
    r.extend_from_slice(&[0x00, 0x1B, 0x2C, 0x3D, 0x4E, 0xFA]);
    r.extend_from_slice(&[4, b'x', b'e', b'-', b'0']);
    r.extend_from_slice(&[0, 1, 0, 0, 0xfd, 0xe8, 0, 7]);
    r.extend_from_slice(&[0x20, 0x01, 0x0d, 0xb8, 0, 0, 0, 0, 0, 0, 0, 0, 0, 0, 0, 1]);
    r.extend_from_slice(&EXPORT_TIME.to_be_bytes());
    r.extend_from_slice(&1_764_633_600_250u64.to_be_bytes());
    // NTP 0xE000_0000 s = UNIX 1,549,107,584 (2,208,988,800 s between the
    // epochs, RFC 7011 §6.1.9); fraction 0x8000_0000 = 0.5 s.
    r.extend_from_slice(&[0xE0, 0, 0, 0, 0x80, 0, 0x07, 0xff]); // low 11 bits MUST be ignored (§6.1.9)
    r.extend_from_slice(&[0xE0, 0, 0, 0, 0x40, 0, 0, 0]); // 0.25 s
    r.extend_from_slice(&[0x12, 0x34]);
    e.push_raw(TemplateId(256), &r).unwrap();
    let c = convert(udp(), &e.finish(EXPORT_TIME));
    let b = &c.flows;
    assert_eq!(col::<UInt64Array>(b, "packetDeltaCount").value(0), 65536);
    let sname = ie::lookup(signed32).unwrap().name;
    assert_eq!(col::<Int32Array>(b, sname).value(0), -1);
    assert_eq!(col::<Float64Array>(b, "samplingProbability").value(0), f64::from(0.15f32));
    assert!(!col::<BooleanArray>(b, ie::lookup(boolean).unwrap().name).value(0));
    assert_eq!(strings(b, "sourceMacAddress"), [Some("00:1b:2c:3d:4e:fa".into())]);
    assert_eq!(strings(b, "interfaceName"), [Some("xe-0".into())]);
    assert_eq!(col::<BinaryArray>(b, "mplsVpnRouteDistinguisher").value(0), [0, 1, 0, 0, 0xfd, 0xe8, 0, 7]);
    // RFC 5952 §4: lower case, longest zero run as "::".
    assert_eq!(strings(b, "sourceIPv6Address"), [Some("2001:db8::1".into())]);
    assert_eq!(col::<TimestampSecondArray>(b, "flowStartSeconds").value(0), i64::from(EXPORT_TIME));
    assert_eq!(col::<TimestampMillisecondArray>(b, "flowStartMilliseconds").value(0), 1_764_633_600_250);
    assert_eq!(col::<TimestampMicrosecondArray>(b, "flowStartMicroseconds").value(0), 1_549_107_584_500_000);
    assert_eq!(col::<TimestampNanosecondArray>(b, "flowStartNanoseconds").value(0), 1_549_107_584_250_000_000);
    let wide = col::<FixedSizeBinaryArray>(b, "ipv6ExtensionHeadersFull").value(0);
    assert_eq!(wide.len(), 32);
    assert_eq!((&wide[..30], &wide[30..]), (&[0u8; 30][..], &[0x12, 0x34][..]), "left-padded big-endian");
    // flowStartNanoseconds wins over the other start elements.
    assert_eq!(col::<TimestampNanosecondArray>(b, "flowStartTime").value(0), 1_549_107_584_250_000_000);
    assert_eq!(c.stats, ColumnarStats { rows: 1, sets: 1, ..ColumnarStats::default() });
}

#[test]
fn undefined_values_are_null_and_counted() {
    // RFC 7011 §6.1.5: boolean other than 1/2 is undefined; §6.1.6: ill-formed
    // UTF-8 SHOULD be ignored. 0xC3 0x28 is an invalid 2-octet sequence.
    let boolean = ie_of(DataType::Boolean);
    let mut e = encoder(1);
    e.add_template(template(256, 0, &[(boolean, 1), (ie::id::INTERFACE_NAME, VARIABLE_LENGTH)])).unwrap();
    e.push_raw(TemplateId(256), &[0, 2, 0xC3, 0x28]).unwrap();
    e.push_raw(TemplateId(256), &[1, 2, b'o', b'k']).unwrap();
    let c = convert(udp(), &e.finish(EXPORT_TIME));
    let bools = col::<BooleanArray>(&c.flows, ie::lookup(boolean).unwrap().name);
    assert!(bools.is_null(0) && bools.value(1));
    assert_eq!(strings(&c.flows, "interfaceName"), [None, Some("ok".into())]);
    assert_eq!((c.stats.values_null_invalid, c.stats.values_null_invalid_utf8), (1, 1));
}

#[test]
fn length_mismatch_goes_to_octets_column() {
    // RFC 7011 §6.2: reduced size MUST NOT be used for addresses; the plan
    // decodes such a field as octets, and its column is `{name}_octets`.
    let e = loose(encoder(1), &[ElementId::iana(8)]);
    let mut e = e;
    e.add_template(template(256, 0, &[(8, 3), (12, 4)])).unwrap();
    e.push_raw(TemplateId(256), &[192, 0, 2, 198, 51, 100, 1]).unwrap();
    let c = convert(udp(), &e.finish(EXPORT_TIME));
    assert_eq!(col::<BinaryArray>(&c.flows, "sourceIPv4Address_octets").value(0), [192, 0, 2]);
    assert!(c.flows.column_by_name("sourceIPv4Address").is_none());
    assert_eq!(c.stats.values_octets_fallback, 1);
}

// ---------------------------------------------------------------------------
// Derived: forwardingStatus
// ---------------------------------------------------------------------------

#[test]
fn forwarding_status_outcome_and_reason_per_registry() {
    // IANA "Forwarding Status (Value 89)" (facts sheet §5.2): status in bits
    // 7-6 of the least-significant octet, reason in bits 5-0; the field may
    // be 1, 2 or 4 octets with the meaningful octet last (RFC 7270 §4.12).
    let mut e = encoder(1);
    e.add_template(template(256, 0, &[(89, 1)])).unwrap();
    e.add_template(template(257, 0, &[(89, 4)])).unwrap();
    e.add_template(template(258, 0, &[(2, 4)])).unwrap();
    for v in [0x81u8, 0x40, 0x89, 0xC3, 0x00, 0xBF, 0x8F] {
        e.push_raw(TemplateId(256), &[v]).unwrap();
    }
    e.push_raw(TemplateId(257), &[0, 0, 0, 0x42]).unwrap();
    e.push_raw(TemplateId(258), &[0, 0, 0, 1]).unwrap();
    let c = convert(udp(), &e.finish(EXPORT_TIME));
    let s = |x: &str| Some(x.to_owned());
    assert_eq!(
        strings(&c.flows, "forwardingOutcome"),
        [s("dropped"), s("forwarded"), s("dropped"), s("consumed"), s("unknown"), s("dropped"), s("dropped"), s("forwarded"), None]
    );
    assert_eq!(
        strings(&c.flows, "forwardingReason"),
        [
            s("acl-deny"),     // 0x81 ACL deny
            s("unknown"),      // 0x40 Forwarded / Unknown
            s("bad-ttl"),      // 0x89 bad TTL (registry, not RFC 7270's prose)
            s("for-us"),       // 0xC3 Consumed / For us
            None,              // 0x00 unassigned
            None,              // 0xBF unassigned
            s("hardware"),     // 0x8F Hardware
            s("not-fragmented"), // 0x42 in 4 octets
            None,              // no forwardingStatus in template 258
        ]
    );
}

// ---------------------------------------------------------------------------
// Derived: MPLS
// ---------------------------------------------------------------------------

#[test]
fn mpls_label_stack_from_three_octet_sections() {
    // RFC 3032 §2.1 entry without TTL (IANA IE 70-79): label 20 bits, TC 3,
    // S 1. Label 16004 = 0x03E84: octets 0x03 0xE8 0x4_ with TC 0, S 0 →
    // 03 E8 40. Label 24001 = 0x05DC1: 05 DC 1_, TC 0, S 1 → 05 DC 11.
    // Section 3 (IE 72) follows the bottom of stack and must be ignored.
    let mut e = encoder(1);
    e.add_template(template(256, 0, &[(70, 3), (71, 3), (72, 3)])).unwrap();
    e.add_template(template(257, 0, &[(2, 4)])).unwrap();
    e.push_raw(TemplateId(256), &[0x03, 0xE8, 0x40, 0x05, 0xDC, 0x11, 0x00, 0x01, 0x01]).unwrap();
    // Label 3 (implicit null) with TC 5, S 1: 00 00 3B.
    e.push_raw(TemplateId(256), &[0x00, 0x00, 0x3B, 0xff, 0xff, 0xff, 0xff, 0xff, 0xff]).unwrap();
    // No entry: all-zero sections.
    e.push_raw(TemplateId(256), &[0; 9]).unwrap();
    e.push_raw(TemplateId(257), &[0, 0, 0, 1]).unwrap();
    let c = convert(udp(), &e.finish(EXPORT_TIME));
    assert_eq!(
        u32_lists(&c.flows, "mplsLabelStack"),
        [Some(vec![16004, 24001]), Some(vec![3]), Some(vec![]), None]
    );
    let t = c.schema.columns()[c.schema.column_index("mplsLabelStack").unwrap()].data_type.clone();
    assert_eq!(t, ArrowType::new_list(ArrowType::UInt32, true));
}

#[test]
fn mpls_label_stack_from_raw_section_316() {
    // IANA IE 316: raw 4-octet entries from the head of the stack; the
    // octets after the bottom-of-stack entry are payload.
    let mut e = encoder(1);
    e.add_template(template(256, 0, &[(316, VARIABLE_LENGTH)])).unwrap();
    let stack = [0x03, 0xE8, 0x40, 0x40, 0x05, 0xDC, 0x11, 0x3F, 0x45, 0x00, 0x00, 0x54];
    let mut r = vec![stack.len() as u8];
    r.extend_from_slice(&stack);
    e.push_raw(TemplateId(256), &r).unwrap();
    let c = convert(udp(), &e.finish(EXPORT_TIME));
    assert_eq!(u32_lists(&c.flows, "mplsLabelStack"), [Some(vec![16004, 24001])]);
}

// ---------------------------------------------------------------------------
// Derived: times
// ---------------------------------------------------------------------------

#[test]
fn times_from_delta_microseconds() {
    // RFC 7011 §5.1: flowStart/EndDeltaMicroseconds count back from the
    // Export Time of the message.
    let mut e = encoder(1);
    e.add_template(template(256, 0, &[(158, 4), (159, 4)])).unwrap();
    e.push_raw(TemplateId(256), &[0, 0x16, 0xE3, 0x60, 0, 0, 0x01, 0xF4]).unwrap(); // 1,500,000 µs; 500 µs
    let c = convert(udp(), &e.finish(EXPORT_TIME));
    let t0 = i64::from(EXPORT_TIME) * 1_000_000_000;
    assert_eq!(col::<TimestampNanosecondArray>(&c.flows, "flowStartTime").value(0), t0 - 1_500_000_000);
    assert_eq!(col::<TimestampNanosecondArray>(&c.flows, "flowEndTime").value(0), t0 - 500_000);
}

#[test]
fn times_from_sys_up_time_in_record_and_from_options() {
    // IANA IE 22/21: ms since (re)init; absolute = systemInitTimeMilliseconds
    // (160) + value. Init at 2025-12-01T23:00:00Z = 1,764,630,000,000 ms.
    let init: u64 = 1_764_630_000_000;
    let mut e = encoder(1);
    e.add_template(template(256, 0, &[(160, 8), (22, 4), (21, 4)])).unwrap();
    e.add_template(template(257, 0, &[(22, 4), (21, 4)])).unwrap();
    // Options: scope exportingProcessId (144), systemInitTimeMilliseconds.
    e.add_template(template(258, 1, &[(144, 4), (160, 8)])).unwrap();
    let mut r = init.to_be_bytes().to_vec();
    r.extend_from_slice(&1000u32.to_be_bytes());
    r.extend_from_slice(&61_000u32.to_be_bytes());
    e.push_raw(TemplateId(256), &r).unwrap();
    let mut o = 1u32.to_be_bytes().to_vec();
    o.extend_from_slice(&(init + 5).to_be_bytes());
    e.push_raw(TemplateId(258), &o).unwrap();
    e.push_raw(TemplateId(257), &[0, 0, 0, 10, 0, 0, 0, 20]).unwrap();
    let c = convert(udp(), &e.finish(EXPORT_TIME));
    let start = col::<TimestampNanosecondArray>(&c.flows, "flowStartTime");
    let end = col::<TimestampNanosecondArray>(&c.flows, "flowEndTime");
    let ns = |ms: u64| i64::try_from(ms).unwrap() * 1_000_000;
    assert_eq!((start.value(0), end.value(0)), (ns(init + 1000), ns(init + 61_000)), "160 in the record");
    assert_eq!((start.value(1), end.value(1)), (ns(init + 5 + 10), ns(init + 5 + 20)), "160 from options");
    assert_eq!(
        c.enrichment.system_init_time_ms(Some("192.0.2.1".parse().unwrap()), ObservationDomainId(1), EXPORT_TIME),
        Some(i64::try_from(init + 5).unwrap())
    );
    assert_eq!(c.stats.times_unresolved_sys_up_time, 0);
}

#[test]
fn sys_up_time_without_init_time_is_null_and_counted() {
    let mut e = encoder(1);
    e.add_template(template(256, 0, &[(22, 4)])).unwrap();
    e.push_raw(TemplateId(256), &[0, 0, 0, 10]).unwrap();
    let c = convert(udp(), &e.finish(EXPORT_TIME));
    assert!(col::<TimestampNanosecondArray>(&c.flows, "flowStartTime").is_null(0));
    assert!(col::<TimestampNanosecondArray>(&c.flows, "flowEndTime").is_null(0));
    assert_eq!(c.stats.times_unresolved_sys_up_time, 1);
}

// ---------------------------------------------------------------------------
// Derived: sampling
// ---------------------------------------------------------------------------

#[test]
fn sampling_rate_from_each_in_record_element() {
    // Facts sheet §8.3: systematic count-based (interval+space)/interval
    // (RFC 5476 §6.5.2.1 Fig. H: 1-in-10 = interval 1, space 9, sent in 1
    // octet); n-out-of-N N/n (RFC 5476 §6.5.2.3: 1 of 10); probabilistic 1/p;
    // samplingInterval 34: 100 ⇒ 1 in 100 (IANA).
    let mut e = encoder(1);
    e.add_template(template(256, 0, &[(305, 1), (306, 1)])).unwrap();
    e.add_template(template(257, 0, &[(309, 4), (310, 4)])).unwrap();
    e.add_template(template(258, 0, &[(311, 8)])).unwrap();
    e.add_template(template(259, 0, &[(311, 4)])).unwrap();
    e.add_template(template(260, 0, &[(34, 4)])).unwrap();
    e.add_template(template(261, 0, &[(2, 4)])).unwrap();
    e.push_raw(TemplateId(256), &[1, 9]).unwrap();
    e.push_raw(TemplateId(257), &[0, 0, 0, 1, 0, 0, 0, 10]).unwrap();
    e.push_raw(TemplateId(258), &0.01f64.to_be_bytes()).unwrap();
    e.push_raw(TemplateId(259), &0.25f32.to_be_bytes()).unwrap();
    e.push_raw(TemplateId(260), &100u32.to_be_bytes()).unwrap();
    e.push_raw(TemplateId(260), &0u32.to_be_bytes()).unwrap();
    e.push_raw(TemplateId(261), &[0, 0, 0, 1]).unwrap();
    let c = convert(udp(), &e.finish(EXPORT_TIME));
    let rate: Vec<Option<u32>> = col::<UInt32Array>(&c.flows, "samplingRate").iter().collect();
    assert_eq!(rate, [Some(10), Some(10), Some(100), Some(4), Some(100), None, None]);
    assert_eq!(c.stats.sampling_unresolved, 0);
}

#[test]
fn sampling_rate_from_options_by_sampler_selector_and_fallback() {
    // Options scoped by samplerId (48) with samplingInterval (34), and by
    // selectorId (302) with samplingPacketInterval/Space (305/306); the
    // records name them (facts sheet §8.1, §8.3).
    let mut e = encoder(1);
    e.add_template(template(300, 1, &[(48, 1), (34, 4)])).unwrap();
    e.add_template(template(301, 1, &[(302, 4), (305, 4), (306, 4)])).unwrap();
    e.add_template(template(256, 0, &[(48, 1), (2, 4)])).unwrap();
    e.add_template(template(257, 0, &[(302, 4), (2, 4)])).unwrap();
    e.push_raw(TemplateId(300), &[5, 0, 0, 2, 0]).unwrap(); // sampler 5: 1 in 512
    e.push_raw(TemplateId(301), &[0, 0, 0, 9, 0, 0, 0, 1, 0, 0, 0, 99]).unwrap(); // selector 9: 1 in 100
    e.push_raw(TemplateId(256), &[5, 0, 0, 0, 1]).unwrap();
    e.push_raw(TemplateId(256), &[6, 0, 0, 0, 1]).unwrap(); // unknown sampler
    e.push_raw(TemplateId(257), &[0, 0, 0, 9, 0, 0, 0, 1]).unwrap();
    let c = convert(udp(), &e.finish(EXPORT_TIME));
    let rate: Vec<Option<u32>> = col::<UInt32Array>(&c.flows, "samplingRate").iter().collect();
    assert_eq!(rate, [Some(512), None, Some(100)]);
    assert_eq!(c.stats.sampling_unresolved, 1);

    // Fallback: records naming no sampler get the one rate of the domain...
    let mut e = encoder(2);
    e.add_template(template(300, 1, &[(48, 1), (34, 4)])).unwrap();
    e.add_template(template(256, 0, &[(2, 4)])).unwrap();
    e.push_raw(TemplateId(300), &[1, 0, 0, 0, 64]).unwrap();
    e.push_raw(TemplateId(256), &[0, 0, 0, 1]).unwrap();
    let c = convert(udp(), &e.finish(EXPORT_TIME));
    assert_eq!(col::<UInt32Array>(&c.flows, "samplingRate").value(0), 64);
    // ...and none when the domain's samplers disagree.
    let mut e = encoder(2);
    e.add_template(template(300, 1, &[(48, 1), (34, 4)])).unwrap();
    e.add_template(template(256, 0, &[(2, 4)])).unwrap();
    e.push_raw(TemplateId(300), &[1, 0, 0, 0, 64]).unwrap();
    e.push_raw(TemplateId(300), &[2, 0, 0, 0, 128]).unwrap();
    e.push_raw(TemplateId(256), &[0, 0, 0, 1]).unwrap();
    let c = convert(udp(), &e.finish(EXPORT_TIME));
    assert!(col::<UInt32Array>(&c.flows, "samplingRate").is_null(0));
    assert_eq!(c.stats.sampling_unresolved, 1);
}

// ---------------------------------------------------------------------------
// Derived: names from options
// ---------------------------------------------------------------------------

fn name_record(ifindex: u32, name: &str) -> Vec<u8> {
    let mut r = ifindex.to_be_bytes().to_vec();
    r.push(u8::try_from(name.len()).unwrap());
    r.extend_from_slice(name.as_bytes());
    r
}

#[test]
fn interface_and_vrf_names_from_options() {
    let mut e = encoder(1);
    // Scope ingressInterface (10) + interfaceName (82); scope egressVRFID
    // (235) + VRFname (236). One map serves both directions.
    e.add_template(template(300, 1, &[(10, 4), (82, VARIABLE_LENGTH)])).unwrap();
    e.add_template(template(301, 1, &[(235, 4), (236, VARIABLE_LENGTH)])).unwrap();
    e.add_template(template(256, 0, &[(10, 4), (14, 4), (234, 4), (235, 4)])).unwrap();
    e.push_raw(TemplateId(300), &name_record(3, "xe-0/0/3")).unwrap();
    e.push_raw(TemplateId(300), &name_record(4, "xe-0/0/4")).unwrap();
    e.push_raw(TemplateId(301), &name_record(10, "blue")).unwrap();
    e.push_raw(TemplateId(256), &[0, 0, 0, 3, 0, 0, 0, 4, 0, 0, 0, 10, 0, 0, 0, 11]).unwrap();
    let c = convert(udp(), &e.finish(EXPORT_TIME));
    let s = |x: &str| Some(x.to_owned());
    assert_eq!(strings(&c.flows, "ingressInterfaceName"), [s("xe-0/0/3")]);
    assert_eq!(strings(&c.flows, "egressInterfaceName"), [s("xe-0/0/4")]);
    assert_eq!(strings(&c.flows, "ingressVRFname"), [s("blue")]);
    assert_eq!(strings(&c.flows, "egressVRFname"), [None]);
    assert_eq!(c.enrichment.stats().interface_names, 2);
    // Another exporter sees none of it.
    let other = Some("192.0.2.99".parse().unwrap());
    assert_eq!(c.enrichment.interface_name(other, ObservationDomainId(1), 3, EXPORT_TIME), None);
}

#[test]
fn names_follow_export_time() {
    // An interface renamed later: each record gets the name in force at its
    // own Export Time; a record before the first name gets the earliest.
    let mut e = encoder(1);
    e.add_template(template(300, 1, &[(10, 4), (82, VARIABLE_LENGTH)])).unwrap();
    e.add_template(template(256, 0, &[(10, 4)])).unwrap();
    let mut messages = Vec::new();
    e.push_raw(TemplateId(256), &[0, 0, 0, 3]).unwrap();
    messages.extend(e.finish(EXPORT_TIME - 10));
    e.push_raw(TemplateId(300), &name_record(3, "old")).unwrap();
    e.push_raw(TemplateId(256), &[0, 0, 0, 3]).unwrap();
    messages.extend(e.finish(EXPORT_TIME));
    e.push_raw(TemplateId(300), &name_record(3, "new")).unwrap();
    e.push_raw(TemplateId(256), &[0, 0, 0, 3]).unwrap();
    messages.extend(e.finish(EXPORT_TIME + 60));
    let c = convert(udp(), &messages);
    let s = |x: &str| Some(x.to_owned());
    assert_eq!(strings(&c.flows, "ingressInterfaceName"), [s("old"), s("old"), s("new")]);
}

#[test]
fn srh_endpoint_behavior_names() {
    // IANA "SRv6 Endpoint Behaviors" (facts sheet §7.1): 1 End, 5 End.X.
    let mut e = encoder(1);
    e.add_template(template(256, 0, &[(502, 2)])).unwrap();
    for v in [1u16, 5, 200] {
        e.push_raw(TemplateId(256), &v.to_be_bytes()).unwrap();
    }
    let c = convert(udp(), &e.finish(EXPORT_TIME));
    let got = strings(&c.flows, "srhEndpointBehaviorName");
    assert_eq!(got[..2], [Some("End".to_owned()), Some("End.X".to_owned())]);
    assert_eq!(got[2].as_deref(), ie::srv6_endpoint_behavior_name(200));
}

// ---------------------------------------------------------------------------
// Lists
// ---------------------------------------------------------------------------

#[test]
fn basic_lists_typed_and_generic() {
    // RFC 6313 §4.5.1: semantic, field id, element length, elements; the
    // 3-octet length prefix (§5.1). IANA IE 496 holds srhSegmentIPv6 (494).
    let mut e = encoder(1);
    e.add_template(template(256, 0, &[(496, VARIABLE_LENGTH), (291, VARIABLE_LENGTH)])).unwrap();
    let mut r = vec![0xff, 0, 5 + 32, 0x04, 0x01, 0xEE, 0x00, 0x10];
    r.extend_from_slice(&[0x20, 0x01, 0x0d, 0xb8, 0, 0, 0, 0, 0, 0, 0, 0, 0, 0, 0, 0x0a]);
    r.extend_from_slice(&[0x20, 0x01, 0x0d, 0xb8, 0, 0, 0, 0, 0, 0, 0, 0, 0, 0, 0, 0x0b]);
    // Generic basicList of ingressInterface (10), 4 octets each: 3, 4.
    r.extend_from_slice(&[0xff, 0, 13, 0xff, 0x00, 0x0a, 0x00, 0x04, 0, 0, 0, 3, 0, 0, 0, 4]);
    e.push_raw(TemplateId(256), &r).unwrap();
    let c = convert(udp(), &e.finish(EXPORT_TIME));
    let items = |name: &str| {
        let l = col::<ListArray>(&c.flows, name);
        let v = l.value(0);
        v.as_any().downcast_ref::<StringArray>().unwrap().iter().map(|s| s.unwrap().to_owned()).collect::<Vec<_>>()
    };
    assert_eq!(items("srhSegmentIPv6BasicList"), ["2001:db8::a", "2001:db8::b"]);
    assert_eq!(items("basicList"), ["3", "4"]);
}

/// (semantic, templateId, fields as (name, value)) of one list item.
type RecordItem = (u8, u16, Option<Vec<(String, String)>>);

#[test]
fn sub_template_lists_as_list_of_struct() {
    // RFC 6313 §4.5.2 (semantic, template id, records) and §4.5.3 (entries of
    // template id, length incl. the 4-octet header, records).
    let mut e = encoder(1);
    e.add_template(template(257, 0, &[(8, 4), (10, 4)])).unwrap();
    e.add_template(template(256, 0, &[(292, VARIABLE_LENGTH), (293, VARIABLE_LENGTH)])).unwrap();
    let mut r = vec![11, 0x03, 0x01, 0x01]; // allOf, template 257, one record
    r.extend_from_slice(&[192, 0, 2, 5, 0, 0, 0, 3]);
    // Multi list: undefined semantic; entry 257 with one record; entry 999 (unknown).
    r.extend_from_slice(&[1 + 12 + 6, 0xff, 0x01, 0x01, 0x00, 12, 192, 0, 2, 6, 0, 0, 0, 4, 0x03, 0xE7, 0, 6, 0xAB, 0xCD]);
    e.push_raw(TemplateId(256), &r).unwrap();
    let c = convert(udp(), &e.finish(EXPORT_TIME));
    let row = |name: &str| -> Vec<RecordItem> {
        let l = col::<ListArray>(&c.flows, name);
        let v = l.value(0);
        let s = v.as_any().downcast_ref::<StructArray>().unwrap();
        let sem = s.column(0).as_any().downcast_ref::<UInt8Array>().unwrap();
        let tid = s.column(1).as_any().downcast_ref::<UInt16Array>().unwrap();
        let fl = s.column(2).as_any().downcast_ref::<ListArray>().unwrap();
        (0..s.len())
            .map(|i| {
                let fields = fl.is_valid(i).then(|| {
                    let nv = fl.value(i);
                    let nv = nv.as_any().downcast_ref::<StructArray>().unwrap();
                    let n = nv.column(0).as_any().downcast_ref::<StringArray>().unwrap();
                    let v = nv.column(1).as_any().downcast_ref::<StringArray>().unwrap();
                    (0..nv.len()).map(|j| (n.value(j).to_owned(), v.value(j).to_owned())).collect()
                });
                (sem.value(i), tid.value(i), fields)
            })
            .collect()
    };
    let f = |a: &str, b: &str| (a.to_owned(), b.to_owned());
    assert_eq!(
        row("subTemplateList"),
        [(3, 257, Some(vec![f("sourceIPv4Address", "192.0.2.5"), f("ingressInterface", "3")]))]
    );
    assert_eq!(
        row("subTemplateMultiList"),
        [(0xff, 257, Some(vec![f("sourceIPv4Address", "192.0.2.6"), f("ingressInterface", "4")])), (0xff, 999, None)]
    );
    assert_eq!(c.stats.list_records_unknown_template, 1);
}

// ---------------------------------------------------------------------------
// Options table, other kinds, unplaced fields
// ---------------------------------------------------------------------------

#[test]
fn options_table_has_scope_fields_and_provenance() {
    // RFC 7011 Appendix A.4.1: scope lineCardId (141), then
    // exportedMessageTotalCount (41) and exportedFlowRecordTotalCount (42)
    // in 2 octets; plus a template scoped by observationDomainId (149), a
    // provenance name, so its column is observationDomainId_2.
    let mut e = encoder(4);
    e.add_template(template(258, 1, &[(141, 4), (41, 2), (42, 2)])).unwrap();
    e.add_template(template(259, 1, &[(149, 4), (166, 8)])).unwrap();
    e.push_raw(TemplateId(258), &[0, 0, 0, 1, 0x01, 0x59, 0x27, 0xd9]).unwrap(); // 1, 345, 10201 (A.4.4)
    e.push_raw(TemplateId(259), &[0, 0, 0, 4, 0, 0, 0, 0, 0, 0, 0, 7]).unwrap();
    let c = convert(udp(), &e.finish(EXPORT_TIME));
    let o = &c.options;
    assert_eq!(o.num_rows(), 2);
    let n: Vec<&str> = o.schema_ref().fields().iter().map(|f| f.name().as_str()).collect();
    assert_eq!(
        n,
        [
            "exporter", "observationDomainId", "templateId", "exportTime", "scopeFields", "lineCardId",
            "exportedMessageTotalCount", "exportedFlowRecordTotalCount", "observationDomainId_2", "notSentFlowTotalCount",
        ]
    );
    let scope = col::<ListArray>(o, "scopeFields");
    let first = scope.value(0);
    let first = first.as_any().downcast_ref::<StringArray>().unwrap();
    assert_eq!(first.value(0), "lineCardId");
    let second = scope.value(1);
    assert_eq!(second.as_any().downcast_ref::<StringArray>().unwrap().value(0), "observationDomainId_2");
    assert_eq!(col::<UInt64Array>(o, "exportedFlowRecordTotalCount").value(0), 10201);
    assert_eq!(col::<UInt32Array>(o, "observationDomainId").values().to_vec(), [4, 4]);
    assert_eq!(c.flows.num_rows(), 0);
    assert_eq!(o.schema_ref().metadata().get("flowsift.table").map(String::as_str), Some("options"));
}

#[test]
fn sets_of_the_other_table_and_unknown_plans_are_counted() {
    let known = template(256, 0, &[(2, 4)]);
    let mut e = encoder(1);
    e.add_template(known.clone()).unwrap();
    e.add_template(template(257, 0, &[(1, 4), (2, 4)])).unwrap();
    e.add_template(template(300, 1, &[(141, 4), (41, 2)])).unwrap();
    e.push_raw(TemplateId(256), &[0, 0, 0, 1]).unwrap();
    e.push_raw(TemplateId(257), &[0, 0, 0, 2, 0, 0, 0, 3]).unwrap();
    e.push_raw(TemplateId(300), &[0, 0, 0, 1, 0, 1]).unwrap();
    let messages = e.finish(EXPORT_TIME);
    // The schema only knows template 256.
    let schema = Arc::new(TableSchema::flows([&*plan(known)]));
    let mut b = TableBuilder::new(schema, 4);
    let mut d = Decoder::new(Config::default());
    let en = Enrichment::new();
    for m in &messages {
        for ev in d.decode(&udp(), None, m).unwrap() {
            if let Event::Data(set) = ev {
                b.append(&set, &en);
            }
        }
    }
    let batch = b.finish().unwrap();
    assert_eq!(batch.num_rows(), 2);
    // Template 257's packetDeltaCount has a column; its octetDeltaCount has none.
    assert_eq!(col::<UInt64Array>(&batch, "packetDeltaCount").values().to_vec(), [1, 3]);
    assert_eq!((b.stats().values_unplaced, b.stats().sets_other_table), (1, 1));
}

#[test]
fn finish_starts_a_new_batch() {
    let mut e = encoder(1);
    e.add_template(template(256, 0, &[(2, 4)])).unwrap();
    e.push_raw(TemplateId(256), &[0, 0, 0, 1]).unwrap();
    let messages = e.finish(EXPORT_TIME);
    let p = {
        let mut d = Decoder::new(Config::default());
        let mut plans = Vec::new();
        for ev in d.decode(&udp(), None, &messages[0]).unwrap() {
            if let Event::TemplateLearned { plan, .. } = ev {
                plans.push(plan);
            }
        }
        plans
    };
    let mut b = TableBuilder::new(Arc::new(TableSchema::flows(p.iter().map(|p| &**p))), 1);
    let mut d = Decoder::new(Config::default());
    let en = Enrichment::new();
    for ev in d.decode(&udp(), None, &messages[0]).unwrap() {
        if let Event::Data(set) = ev {
            b.append(&set, &en);
            b.append(&set, &en);
        }
    }
    assert_eq!(b.len(), 2);
    assert_eq!(b.finish().unwrap().num_rows(), 2);
    assert!(b.is_empty());
    assert_eq!(b.finish().unwrap().num_rows(), 0);
    assert_eq!(b.stats().rows, 2);
}

// ---------------------------------------------------------------------------
// Parquet
// ---------------------------------------------------------------------------

#[test]
fn parquet_keeps_arrow_schema_in_metadata() {
    use parquet::arrow::arrow_reader::ParquetRecordBatchReaderBuilder;
    use parquet::arrow::ARROW_SCHEMA_META_KEY;

    let mut e = encoder(1);
    e.add_template(template(256, 0, &[(89, 1), (70, 3), (2, 4)])).unwrap();
    for i in 0..5u8 {
        e.push_raw(TemplateId(256), &[0x81, 0x03, 0xE8, 0x41, 0, 0, 0, i]).unwrap();
    }
    let c = convert(udp(), &e.finish(EXPORT_TIME));
    for compression in [Compression::default(), Compression::Snappy, Compression::Lz4, Compression::None] {
        let options = SinkOptions::default().with_compression(compression).with_row_group_rows(2);
        let mut sink = ParquetSink::try_new(Vec::new(), &c.schema, options).unwrap();
        sink.write(&c.flows).unwrap();
        let (bytes, summary) = sink.finish().unwrap();
        assert_eq!((summary.rows, summary.row_groups), (5, 3));
        let reader = ParquetRecordBatchReaderBuilder::try_new(bytes::Bytes::from(bytes)).unwrap();
        let kv = reader.metadata().file_metadata().key_value_metadata().unwrap();
        assert!(kv.iter().any(|k| k.key == ARROW_SCHEMA_META_KEY), "ARROW:schema stored");
        // Parquet has no seconds unit: stored as TIMESTAMP(MILLIS, UTC)
        // like pyarrow does, and read back as milliseconds.
        let ms = ArrowType::Timestamp(TimeUnit::Millisecond, Some("UTC".into()));
        assert_eq!(reader.schema().field_with_name("exportTime").unwrap().data_type(), &ms);
        let parquet_type = reader.parquet_schema().columns().iter().find(|c| c.name() == "exportTime").unwrap().logical_type_ref().cloned();
        assert_eq!(
            parquet_type,
            Some(parquet::basic::LogicalType::timestamp(true, parquet::basic::TimeUnit::MILLIS))
        );
        assert_eq!(reader.schema().metadata().get("flowsift.contract").map(String::as_str), Some(CONTRACT_VERSION));
        let batches: Vec<RecordBatch> = reader.build().unwrap().collect::<Result<_, _>>().unwrap();
        let back = arrow::compute::concat_batches(&batches[0].schema(), &batches).unwrap();
        let seconds = ArrowType::Timestamp(TimeUnit::Second, Some("UTC".into()));
        for (i, f) in c.flows.schema().fields().iter().enumerate() {
            let got = back.column(i);
            let got = if f.name() == "exportTime" { arrow::compute::cast(got, &seconds).unwrap() } else { got.clone() };
            assert_eq!(&got, c.flows.column(i), "{} {compression:?}", f.name());
        }
    }
}

#[test]
fn sink_rejects_a_foreign_batch() {
    let s = TableSchema::flows([&*plan(template(256, 0, &[(2, 4)]))]);
    let other = Arc::new(TableSchema::flows([&*plan(template(256, 0, &[(1, 4)]))]));
    let mut sink = ParquetSink::try_new(Vec::new(), &s, SinkOptions::default()).unwrap();
    let batch = TableBuilder::new(other, 0).finish().unwrap();
    assert!(matches!(sink.write(&batch), Err(ColumnarError::SchemaMismatch)));
}

#[test]
fn table_writer_flushes_row_groups() {
    // Ten one-record messages; row groups of 4 rows: 4 + 4 + 2.
    let mut e = encoder(1);
    e.add_template(template(256, 0, &[(2, 4)])).unwrap();
    let mut messages = e.finish(EXPORT_TIME);
    for i in 0..10u8 {
        e.push_raw(TemplateId(256), &[0, 0, 0, i]).unwrap();
        messages.extend(e.finish(EXPORT_TIME));
    }
    let p = plan(template(256, 0, &[(2, 4)]));
    let schema = Arc::new(TableSchema::flows([&*p]));
    let options = SinkOptions::default().with_row_group_rows(4);
    let mut w = TableWriter::try_new(Vec::new(), schema, options).unwrap();
    let mut d = Decoder::new(Config::default());
    let en = Enrichment::new();
    for m in &messages {
        for ev in d.decode(&udp(), None, m).unwrap() {
            if let Event::Data(set) = ev {
                w.append(&set, &en).unwrap();
            }
        }
    }
    let (_, summary, stats) = w.finish().unwrap();
    assert_eq!((summary.rows, summary.row_groups, stats.rows), (10, 3, 10));
}

// ---------------------------------------------------------------------------
// Pieces
// ---------------------------------------------------------------------------

#[test]
fn text_forms() {
    use crate::record::{DateTime, Value};
    let text = |v: Value<'_>| {
        let mut s = String::new();
        write_value_text(&v, &mut s).unwrap();
        s
    };
    // 1,764,633,600 s = 2025-12-02T00:00:00Z and 1,549,107,584 s =
    // 2019-02-02T11:39:44Z (Python datetime.fromtimestamp, UTC).
    assert_eq!(text(Value::DateTime(DateTime { secs: 1_764_633_600, nanos: 0 })), "2025-12-02T00:00:00Z");
    assert_eq!(text(Value::DateTime(DateTime { secs: 1_549_107_584, nanos: 500_000_000 })), "2019-02-02T11:39:44.500Z");
    assert_eq!(text(Value::DateTime(DateTime { secs: 0, nanos: 1 })), "1970-01-01T00:00:00.000000001Z");
    assert_eq!(text(Value::DateTime(DateTime { secs: -1, nanos: 0 })), "1969-12-31T23:59:59Z");
    assert_eq!(text(Value::Octets(&[0x0a, 0xff])), "0aff");
    assert_eq!(text(Value::Mac([0xAA, 0, 1, 2, 3, 0xFF])), "aa:00:01:02:03:ff");
    assert_eq!(text(Value::Signed(-7)), "-7");
    assert_eq!(text(Value::Float(0.15)), "0.15");
    assert_eq!(text(Value::Bool(false)), "false");
    for a in ["0.0.0.0", "192.0.2.1", "198.51.100.255", "203.0.113.10", "255.255.255.255", "10.9.99.100"] {
        let ip: Ipv4Addr = a.parse().unwrap();
        assert_eq!(super::text::ipv4_text(ip), ip.to_string());
    }
}

#[test]
fn sampling_params_rates() {
    use super::enrich::SamplingParams;
    let p = |f: fn(&mut SamplingParams)| {
        let mut s = SamplingParams::default();
        f(&mut s);
        s.rate()
    };
    assert_eq!(p(|s| (s.packet_interval, s.packet_space) = (Some(1), Some(9))), Some(10));
    assert_eq!(p(|s| (s.packet_interval, s.packet_space) = (Some(2), Some(98))), Some(50));
    assert_eq!(p(|s| (s.packet_interval, s.packet_space) = (Some(0), Some(9))), None);
    assert_eq!(p(|s| (s.size, s.population) = (Some(1), Some(10))), Some(10));
    assert_eq!(p(|s| s.probability = Some(0.15)), Some(7), "1/0.15 = 6.67, nearest 7");
    assert_eq!(p(|s| s.probability = Some(1.5)), None);
    assert_eq!(p(|s| s.interval = Some(100)), Some(100));
    assert_eq!(p(|s| s.random_interval = Some(1000)), Some(1000));
    assert_eq!(p(|_| {}), None);
}

// ---------------------------------------------------------------------------
// Robustness: any record content converts without panic, columns in step
// ---------------------------------------------------------------------------

mod prop {
    use super::*;
    use proptest::prelude::*;

    /// One field of every IANA type the registry has, at its natural
    /// length, plus wrong lengths, an enterprise element and lists.
    fn fields() -> Vec<(u16, u16)> {
        let mut f: Vec<(u16, u16)> = DataType::ALL
            .iter()
            .filter(|t| !t.is_list())
            .filter_map(|t| {
                let ie = ie::all().iter().find(|e| e.data_type == Some(*t))?;
                Some((ie.id, t.natural_length().unwrap_or(VARIABLE_LENGTH)))
            })
            .collect();
        // forwardingStatus, MPLS, times, sampling, names: derived inputs.
        f.extend([(89, 2), (70, 3), (71, 3), (316, VARIABLE_LENGTH), (158, 4), (22, 4), (34, 4), (311, 4), (10, 4), (502, 2)]);
        f.extend([(156, 8), (153, 8)]); // absolute start and end times
        f.extend([(8, 3), (152, 5)]); // lengths their types do not allow
        f
    }

    fn list_fields() -> Vec<(u16, u16)> {
        vec![(291, VARIABLE_LENGTH), (496, VARIABLE_LENGTH), (292, VARIABLE_LENGTH), (293, VARIABLE_LENGTH), (2, 4)]
    }

    fn encode(fields: &[(u16, u16)], records: &[Vec<u8>]) -> Vec<Vec<u8>> {
        encode_in(fields, records, 65_000)
    }

    /// [`encode`] in messages of at most `size` octets (so in many sets).
    fn encode_in(fields: &[(u16, u16)], records: &[Vec<u8>], size: u16) -> Vec<Vec<u8>> {
        let loose: Vec<ElementId> = fields.iter().map(|(ie, _)| ElementId::iana(*ie)).collect();
        let mut e = super::loose(encoder(9).with_max_message_size(size), &loose);
        let mut t = template(256, 0, fields);
        t.fields.push(FieldSpecifier::enterprise(PEN, 1, 3));
        e.add_template(t).unwrap();
        e.add_template(template(257, 0, &[(8, 4), (82, VARIABLE_LENGTH)])).unwrap();
        for r in records {
            e.push_raw(TemplateId(256), r).unwrap();
        }
        e.finish(EXPORT_TIME)
    }

    /// Record bytes for `fields` from `noise`: fixed fields take their
    /// length, variable fields a 1-octet length prefix and up to 40 octets.
    fn record(fields: &[(u16, u16)], noise: &[u8]) -> Vec<u8> {
        let mut it = noise.iter().copied().cycle();
        let mut r = Vec::new();
        for (_, len) in fields {
            let n = if *len == VARIABLE_LENGTH {
                let n = it.next().unwrap_or(0) % 40;
                r.push(n);
                usize::from(n)
            } else {
                usize::from(*len)
            };
            r.extend(it.by_ref().take(n));
        }
        r.extend(it.take(3)); // the enterprise element
        r
    }

    proptest! {
        #![proptest_config(ProptestConfig::with_cases(64))]

        #[test]
        fn any_values_convert(noise in proptest::collection::vec(any::<u8>(), 1..200), n in 1usize..6, lists in any::<bool>()) {
            let f = if lists { list_fields() } else { fields() };
            let records: Vec<Vec<u8>> = (0..n).map(|i| record(&f, &noise[i % noise.len()..])).collect();
            let messages = encode(&f, &records);
            // The decoder may reject a malformed list (the whole message,
            // RFC 7011 §9.1); whatever it accepts must convert.
            let mut accepted = 0;
            let mut d = Decoder::new(Config::default());
            for m in &messages {
                if let Ok(events) = d.decode(&udp(), None, m) {
                    accepted += events.filter(|e| matches!(e, Event::Data(_))).count();
                }
            }
            let c = convert_lenient(udp(), &messages);
            prop_assert!(c.flows.num_rows() <= n);
            if !lists {
                // Without lists nothing can be malformed: every record converts.
                prop_assert_eq!(c.flows.num_rows(), n);
            }
            prop_assert_eq!(accepted > 0, c.flows.num_rows() > 0);
        }
    }

    /// `n` records of every fixed-length field of [`fields`], from `noise`.
    fn fixed_messages(noise: &[u8], n: usize) -> Vec<Vec<u8>> {
        let f: Vec<(u16, u16)> = fields().into_iter().filter(|(_, len)| *len != VARIABLE_LENGTH).collect();
        let records: Vec<Vec<u8>> = (0..n).map(|i| record(&f, noise.get(i % noise.len()..).unwrap_or_default())).collect();
        encode(&f, &records)
    }

    proptest! {
        #![proptest_config(ProptestConfig::with_cases(96))]

        /// Fixed-layout sets are appended column by column; the result is
        /// the same as appending them record by record (the path every
        /// other test checks against the RFCs).
        #[test]
        fn column_path_equals_record_path(noise in proptest::collection::vec(any::<u8>(), 1..300), n in 1usize..40) {
            let messages = fixed_messages(&noise, n);
            let by_columns = convert_by(udp(), &messages, false);
            let by_rows = convert_by(udp(), &messages, true);
            prop_assert_eq!(by_columns.flows.num_rows(), n);
            prop_assert_eq!(&by_columns.flows, &by_rows.flows);
            prop_assert_eq!(&by_columns.stats, &by_rows.stats);
        }
    }

    /// The value of a native-layout column in the readable layout's form:
    /// addresses through std's `Display` (RFC 5952 for IPv6) and MAC
    /// addresses as six colon-separated lower-case hex pairs, for
    /// FixedSizeBinary(4/16/6); `None` for columns both layouts share.
    fn readable_text(c: &dyn Array) -> Option<Vec<Option<String>>> {
        let fixed = c.as_any().downcast_ref::<FixedSizeBinaryArray>()?;
        let text = |v: &[u8]| match v.len() {
            4 => <[u8; 4]>::try_from(v).map(|a| Ipv4Addr::from(a).to_string()).ok(),
            16 => <[u8; 16]>::try_from(v).map(|a| std::net::Ipv6Addr::from(a).to_string()).ok(),
            6 => Some(v.iter().map(|b| format!("{b:02x}")).collect::<Vec<_>>().join(":")),
            _ => None,
        };
        (fixed.value_length() != 32).then(|| fixed.iter().map(|v| v.and_then(text)).collect())
    }

    proptest! {
        #![proptest_config(ProptestConfig::with_cases(64))]

        /// The native layout keeps every value: its column path equals its
        /// record path, every column it shares with the readable layout is
        /// equal, and its address and MAC octets give the readable texts.
        #[test]
        fn native_layout_keeps_every_value(noise in proptest::collection::vec(any::<u8>(), 1..300), n in 1usize..40) {
            let messages = fixed_messages(&noise, n);
            let native = convert_in(udp(), &messages, false, Layout::Native);
            let native_rows = convert_in(udp(), &messages, true, Layout::Native);
            let readable = convert_by(udp(), &messages, false);
            prop_assert_eq!(native.flows.num_rows(), n);
            prop_assert_eq!(&native.flows, &native_rows.flows);
            prop_assert_eq!(&native.stats, &native_rows.stats);
            let mut addresses = 0;
            for field in native.flows.schema().fields() {
                let (a, b) = (native.flows.column_by_name(field.name()).unwrap(), readable.flows.column_by_name(field.name()));
                let b = b.unwrap_or_else(|| panic!("{} missing from the readable layout", field.name()));
                match readable_text(a.as_ref()) {
                    Some(texts) => {
                        addresses += 1;
                        let r = b.as_any().downcast_ref::<StringArray>().unwrap();
                        let expected: Vec<Option<String>> = r.iter().map(|s| s.map(str::to_owned)).collect();
                        prop_assert_eq!(texts, expected, "{}", field.name());
                    }
                    None => prop_assert_eq!(a.as_ref(), b.as_ref(), "{}", field.name()),
                }
            }
            // ipv4Address, ipv6Address, macAddress at least (IANA types).
            prop_assert!(addresses >= 3);
            prop_assert_eq!(native.stats.values_null_invalid, readable.stats.values_null_invalid);
            prop_assert_eq!(native.stats.values_octets_fallback, readable.stats.values_octets_fallback);
        }

        /// The same for lists: srhSegmentIPv6BasicList items become
        /// FixedSizeBinary(16) in the native layout; the generic basicList
        /// (IE 291) keeps its text items.
        #[test]
        fn native_layout_lists(
            noise in proptest::collection::vec(any::<u8>(), 1..64),
            lists in proptest::collection::vec((any::<u8>(), 0usize..5, 0usize..5), 1..20),
        ) {
            // (element id, length): srhSegmentIPv6, sourceIPv4Address,
            // packetDeltaCount in 4 octets, egressInterface, sourceMacAddress.
            let elements = [(494u16, 16u16), (8, 4), (2, 4), (14, 4), (56, 6)];
            let f = [(8u16, 4u16), (496, VARIABLE_LENGTH), (291, VARIABLE_LENGTH), (2, 4)];
            let records: Vec<Vec<u8>> = lists
                .iter()
                .map(|(sem, a, n)| {
                    let mut r: Vec<u8> = noise.iter().copied().cycle().skip(usize::from(*sem)).take(4).collect();
                    r.extend(basic_list(*sem, elements[*a], *n, &noise));
                    r.extend(basic_list(*sem, elements[(*a + 1) % 5], *n, &noise));
                    r.extend_from_slice(&[0, 0, 0, 7]);
                    r
                })
                .collect();
            let messages = one_template(&f, &records);
            let native = convert_in(udp(), &messages, false, Layout::Native);
            let native_rows = convert_in(udp(), &messages, true, Layout::Native);
            let readable = convert_by(udp(), &messages, false);
            prop_assert_eq!(native.flows.num_rows(), records.len());
            prop_assert_eq!(&native.flows, &native_rows.flows);
            prop_assert_eq!(&native.stats, &native_rows.stats);
            let texts = |b: &RecordBatch, name: &str| -> Vec<Option<Vec<Option<String>>>> {
                let l = col::<ListArray>(b, name);
                (0..l.len())
                    .map(|i| {
                        l.is_valid(i).then(|| {
                            let v = l.value(i);
                            readable_text(v.as_ref()).unwrap_or_else(|| {
                                v.as_any().downcast_ref::<StringArray>().unwrap().iter().map(|s| s.map(str::to_owned)).collect()
                            })
                        })
                    })
                    .collect()
            };
            // Items agree, except elements of another type than the list's
            // registered element (an IPv4 address in a list of IPv6
            // segments): readable text takes any value, a FixedSizeBinary(16)
            // item cannot, so they are null and counted.
            let mut mismatched = 0u64;
            for name in ["srhSegmentIPv6BasicList", "basicList"] {
                let (a, b) = (texts(&native.flows, name), texts(&readable.flows, name));
                prop_assert_eq!(a.len(), b.len());
                for (x, y) in a.iter().zip(&b) {
                    let (x, y) = (x.as_ref().unwrap(), y.as_ref().unwrap());
                    prop_assert_eq!(x.len(), y.len());
                    for (u, v) in x.iter().zip(y) {
                        if u != v {
                            prop_assert!(u.is_none(), "{}: {:?} vs {:?}", name, u, v);
                            mismatched += 1;
                        }
                    }
                }
            }
            prop_assert_eq!(native.stats.list_elements_null, readable.stats.list_elements_null + mismatched);
        }
    }

    proptest! {
        #![proptest_config(ProptestConfig::with_cases(48))]

        /// Sets of several templates interleaved (two fixed-layout ones,
        /// which are gathered and converted in runs, and a variable one,
        /// which is not) give the same table as record-by-record appends,
        /// in both layouts: every column receives the sets in order.
        #[test]
        fn gathered_sets_keep_their_order(
            noise in proptest::collection::vec(any::<u8>(), 1..64),
            sets in proptest::collection::vec((0usize..3, 1usize..30), 1..12),
        ) {
            // RFC 7011 Appendix A.2.1's five fields; a second fixed template
            // with forwardingStatus (IANA IE 89) and an MPLS section (IE 70);
            // a third with a variable-length interfaceName (IE 82).
            let shapes: [(u16, Vec<(u16, u16)>); 3] = [
                (256, vec![(8, 4), (12, 4), (15, 4), (2, 4), (1, 4)]),
                (257, vec![(8, 4), (89, 1), (70, 3), (2, 8), (153, 8)]),
                (258, vec![(10, 4), (82, VARIABLE_LENGTH), (2, 4)]),
            ];
            let loose: Vec<ElementId> = shapes.iter().flat_map(|(_, f)| f.iter().map(|(ie, _)| ElementId::iana(*ie))).collect();
            let mut e = super::loose(encoder(9), &loose);
            for (id, f) in &shapes {
                e.add_template(template(*id, 0, f)).unwrap();
            }
            for (k, (shape, count)) in sets.iter().enumerate() {
                let (id, f) = &shapes[*shape];
                for i in 0..*count {
                    let mut r = record(f, noise.get((k + i) % noise.len()..).unwrap_or_default());
                    r.truncate(r.len() - 3); // no enterprise element in these templates
                    e.push_raw(TemplateId(*id), &r).unwrap();
                }
            }
            let messages = e.finish(EXPORT_TIME);
            for layout in [Layout::Readable, Layout::Native] {
                let gathered = convert_in(udp(), &messages, false, layout);
                let rows = convert_in(udp(), &messages, true, layout);
                prop_assert_eq!(gathered.flows.num_rows(), sets.iter().map(|(_, c)| c).sum::<usize>());
                prop_assert_eq!(&gathered.flows, &rows.flows);
                prop_assert_eq!(&gathered.stats, &rows.stats);
            }
        }
    }

    /// Messages of template 256 with `fields` and the raw `records`.
    fn one_template(fields: &[(u16, u16)], records: &[Vec<u8>]) -> Vec<Vec<u8>> {
        let loose: Vec<ElementId> = fields.iter().map(|(ie, _)| ElementId::iana(*ie)).collect();
        let mut e = super::loose(encoder(9), &loose);
        e.add_template(template(256, 0, fields)).unwrap();
        for r in records {
            e.push_raw(TemplateId(256), r).unwrap();
        }
        e.finish(EXPORT_TIME)
    }

    /// A basicList field value (with its 1-octet length prefix): semantic,
    /// element (id, length) and `n` elements of `noise` octets (RFC 6313 §4.5.1).
    fn basic_list(semantic: u8, (id, len): (u16, u16), n: usize, noise: &[u8]) -> Vec<u8> {
        let mut body = vec![semantic];
        body.extend_from_slice(&id.to_be_bytes());
        body.extend_from_slice(&len.to_be_bytes());
        body.extend(noise.iter().copied().cycle().take(n * usize::from(len)));
        let mut v = vec![u8::try_from(body.len()).unwrap()];
        v.extend(body);
        v
    }

    proptest! {
        #![proptest_config(ProptestConfig::with_cases(96))]

        /// basicLists of fixed-length scalars are appended from their octets;
        /// the result is the same as through decoded values, for typed item
        /// columns (srhSegmentIPv6BasicList, IE 496) and generic text ones
        /// (basicList, IE 291), with elements of the expected type or not.
        #[test]
        fn scalar_lists_from_octets_equal_the_value_path(
            noise in proptest::collection::vec(any::<u8>(), 1..64),
            lists in proptest::collection::vec((any::<u8>(), 0usize..5, 0usize..5, 0usize..5), 1..20),
        ) {
            // (element id, length): srhSegmentIPv6, sourceIPv4Address,
            // packetDeltaCount sent in 4 octets, egressInterface, an octetArray.
            let elements = [(494u16, 16u16), (8, 4), (2, 4), (14, 4), (ie::id::MPLS_VPN_ROUTE_DISTINGUISHER, 8)];
            // A fixed prefix (appended a column at a time) before the lists.
            let f = [(8u16, 4u16), (27, 16), (1, 8), (496, VARIABLE_LENGTH), (291, VARIABLE_LENGTH), (2, 4)];
            let records: Vec<Vec<u8>> = lists
                .iter()
                .map(|(sem, a, b, n)| {
                    let mut r: Vec<u8> = noise.iter().copied().cycle().skip(usize::from(*sem)).take(28).collect();
                    r.extend(basic_list(*sem, elements[*a], *n, &noise));
                    r.extend(basic_list(*sem, elements[*b], *n, &noise));
                    r.extend_from_slice(&[0, 0, 0, 7]);
                    r
                })
                .collect();
            let messages = one_template(&f, &records);
            let fast = convert_by(udp(), &messages, false);
            let values = convert_by(udp(), &messages, true);
            prop_assert_eq!(fast.flows.num_rows(), records.len());
            prop_assert_eq!(&fast.flows, &values.flows);
            prop_assert_eq!(&fast.stats, &values.stats);
        }
    }

    /// A 1-octet length prefix and `body` (RFC 7011 §7).
    fn var(body: Vec<u8>) -> Vec<u8> {
        let mut v = vec![u8::try_from(body.len()).unwrap()];
        v.extend(body);
        v
    }

    /// `k` records of template 257 (sourceIPv4Address, a variable-length
    /// interfaceName) from `noise`.
    fn records_257(k: usize, noise: &[u8]) -> Vec<u8> {
        let mut it = noise.iter().copied().cycle();
        let mut r = Vec::new();
        for _ in 0..k {
            r.extend(it.by_ref().take(4));
            let n = usize::from(it.next().unwrap_or(0) % 8);
            r.extend(var(it.by_ref().take(n).collect()));
        }
        r
    }

    /// A record of [`list_fields`] whose lists are well formed: two
    /// basicLists (RFC 6313 §4.5.1), a subTemplateList (§4.5.2) and a
    /// subTemplateMultiList (§4.5.3) of template 257 records, the last with
    /// an entry of an unknown template too.
    fn list_record(noise: &[u8], (sem, a, b, n): (u8, usize, usize, usize)) -> Vec<u8> {
        let elements = [(494u16, 16u16), (8, 4), (2, 4), (14, 4), (ie::id::MPLS_VPN_ROUTE_DISTINGUISHER, 8)];
        let mut r = basic_list(sem, elements[a], n.min(4), noise);
        r.extend(basic_list(sem, elements[b], n.min(4), noise));
        let mut stl = vec![sem, 1, 1];
        stl.extend(records_257(n, noise));
        r.extend(var(stl));
        let mut stml = vec![sem];
        for (tid, k) in [(257u16, n), (300, 1)] {
            let recs = records_257(k, noise);
            stml.extend_from_slice(&tid.to_be_bytes());
            stml.extend_from_slice(&u16::try_from(4 + recs.len()).unwrap().to_be_bytes());
            stml.extend(recs);
        }
        r.extend(var(stml));
        r.extend(noise.iter().copied().cycle().take(4 + 3)); // packetDeltaCount, the enterprise element
        r
    }

    proptest! {
        #![proptest_config(ProptestConfig::with_cases(64))]

        /// Sets of plans without a fixed layout (variable-length fields of
        /// every type, lists of every kind) are walked once and appended a
        /// column at a time; the result is the same as appending them
        /// record by record, in both layouts, whether the records come in
        /// one set or in many (which are gathered).
        #[test]
        fn stepped_sets_equal_record_path(
            noise in proptest::collection::vec(any::<u8>(), 1..200),
            shapes in proptest::collection::vec((any::<u8>(), 0usize..5, 0usize..5, 0usize..6), 1..24),
            lists in any::<bool>(),
            size in prop_oneof![Just(65_000u16), 1_200u16..3_000],
        ) {
            let f = if lists { list_fields() } else { fields() };
            let records: Vec<Vec<u8>> = shapes
                .iter()
                .enumerate()
                .map(|(i, shape)| {
                    let noise = &noise[i % noise.len()..];
                    if lists { list_record(noise, *shape) } else { record(&f, noise) }
                })
                .collect();
            let messages = encode_in(&f, &records, size);
            for layout in [Layout::Readable, Layout::Native] {
                let by_steps = convert_in(udp(), &messages, false, layout);
                let by_rows = convert_in(udp(), &messages, true, layout);
                prop_assert_eq!(by_steps.flows.num_rows(), records.len());
                prop_assert_eq!(&by_steps.flows, &by_rows.flows);
                prop_assert_eq!(&by_steps.stats, &by_rows.stats);
            }
        }
    }

    /// [`convert`] that skips messages the decoder rejects.
    fn convert_lenient(session: TransportSession, messages: &[Vec<u8>]) -> Converted {
        let mut d = Decoder::new(Config::default());
        let ok: Vec<Vec<u8>> = messages.iter().filter(|m| d.decode(&session, None, m).is_ok()).cloned().collect();
        convert(session, &ok)
    }
}

// ---------------------------------------------------------------------------
// Native layout
// ---------------------------------------------------------------------------

/// RFC 7011 Appendix A.2.1's template (sourceIPv4Address,
/// destinationIPv4Address, ipNextHopIPv4Address, packetDeltaCount,
/// octetDeltaCount) and the first record of A.3, in the native layout:
/// addresses are their four octets in network order, no derived columns,
/// and the schema says which layout it is.
#[test]
fn native_layout_rfc7011_appendix_a() {
    let fields = [(8, 4), (12, 4), (15, 4), (2, 4), (1, 4)];
    let mut e = encoder(0);
    e.add_template(template(256, 0, &fields)).unwrap();
    let mut r = vec![192, 0, 2, 12, 192, 0, 2, 254, 192, 0, 2, 1];
    r.extend_from_slice(&[0, 0, 0x13, 0x91, 0, 0x51, 0x8c, 0x81]); // 5009 packets, 5344385 octets
    e.push_raw(TemplateId(256), &r).unwrap();
    let c = convert_in(udp(), &e.finish(EXPORT_TIME), false, Layout::Native);
    assert_eq!(c.schema.layout(), Layout::Native);
    assert_eq!(c.flows.schema().metadata().get("flowsift.layout").map(String::as_str), Some("native"));
    assert!(c.schema.columns().iter().all(|s| !matches!(s.role, ColumnRole::Derived(_))));
    let addr = |name: &str| col::<FixedSizeBinaryArray>(&c.flows, name).value(0).to_vec();
    assert_eq!(addr("sourceIPv4Address"), [192, 0, 2, 12]);
    assert_eq!(addr("destinationIPv4Address"), [192, 0, 2, 254]);
    assert_eq!(addr("ipNextHopIPv4Address"), [192, 0, 2, 1]);
    assert_eq!(col::<UInt64Array>(&c.flows, "packetDeltaCount").value(0), 5009);
    assert_eq!(col::<UInt64Array>(&c.flows, "octetDeltaCount").value(0), 5_344_385);
    // The readable layout has no layout key (files written before it existed
    // look the same).
    let readable = convert(udp(), &e.finish(EXPORT_TIME));
    assert!(!readable.flows.schema().metadata().contains_key("flowsift.layout"));
}

/// Native types per IANA abstract type (RFC 7011 §6.1): only addresses
/// and MAC addresses differ from the readable layout; registered basicLists
/// of addresses get FixedSizeBinary items (srhSegmentIPv6BasicList, IE 496,
/// holds srhSegmentIPv6 values per the IANA registry).
#[test]
fn native_layout_types() {
    for t in DataType::ALL {
        let Some(ie) = ie::all().iter().find(|e| e.data_type == Some(t)) else { continue };
        let Some(len) = t.natural_length() else { continue };
        let p = plan(template(256, 0, &[(ie.id, len)]));
        let field = &p.fields()[0];
        let expected = match t {
            DataType::Ipv4Address => ArrowType::FixedSizeBinary(4),
            DataType::Ipv6Address => ArrowType::FixedSizeBinary(16),
            DataType::MacAddress => ArrowType::FixedSizeBinary(6),
            _ => element_type(field),
        };
        assert_eq!(element_type_in(field, Layout::Native), expected, "type {t}");
    }
    assert_eq!(
        basic_list_item_type_in(ElementId::iana(ie::id::SRH_SEGMENT_IPV6_BASIC_LIST), Layout::Native),
        ArrowType::FixedSizeBinary(16)
    );
    assert_eq!(basic_list_item_type_in(ElementId::iana(291), Layout::Native), ArrowType::Utf8);
}
