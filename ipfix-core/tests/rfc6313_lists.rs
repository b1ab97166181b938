//! RFC 6313 structured data: basicList, subTemplateList and
//! subTemplateMultiList (§4.5), built byte by byte from the layouts (facts
//! sheet §2.3), decoded, and re-encoded identically.
//!
//! The scenarios follow the kinds of examples RFC 6313 §9 gives (a
//! multicast flow's egress interfaces with allOf, a load-balanced flow with
//! exactlyOneOf, per-flow sub-records) (from memory, unconfirmed); values
//! are ours, with documentation addresses (RFC 5737, RFC 3849).
#![allow(clippy::unwrap_used, clippy::indexing_slicing)]

mod common;

use std::net::{Ipv4Addr, Ipv6Addr};

use common::{decode, hex, message, set, values_of, PEN, PEN_HEX};
use ipfix_core::{
    semantic, Config, DataType, Decoder, EncodeError, Event, FieldSpecifier, LengthPrefix, MessageEncoder,
    ObservationDomainId, OwnedValue, Template, TemplateId, TransportSession, Value,
};

const EXPORT_TIME: u32 = 1_700_000_000;

/// A Template Record (RFC 7011 §3.4.1) of IANA fields.
fn tpl(id: u16, fields: &[(u16, u16)]) -> Vec<u8> {
    let mut out = id.to_be_bytes().to_vec();
    out.extend_from_slice(&u16::try_from(fields.len()).unwrap().to_be_bytes());
    for (ie, len) in fields {
        out.extend_from_slice(&ie.to_be_bytes());
        out.extend_from_slice(&len.to_be_bytes());
    }
    out
}

fn template(id: u16, fields: &[(u16, u16)]) -> Template {
    Template { id: TemplateId(id), scope_field_count: 0, fields: fields.iter().map(|(ie, len)| FieldSpecifier::iana(*ie, *len)).collect() }
}

/// Decodes `msg` (domain 1, file session) and returns the records of `id`.
fn decoded(msg: &[u8], id: u16) -> Vec<Vec<OwnedValue>> {
    let mut decoder = Decoder::new(Config::default());
    let out = decode(&mut decoder, &TransportSession::file(0), None, msg).unwrap();
    assert!(out.skipped.is_empty() && out.rejected.is_empty());
    values_of(&out, id)
}

/// Encodes templates and records with default settings (3-octet prefix for
/// lists, RFC 6313 §5.1).
fn encoded(templates: &[Template], records: &[(u16, Vec<OwnedValue>)]) -> Vec<u8> {
    let mut enc = MessageEncoder::new(ObservationDomainId(1));
    for t in templates {
        enc.add_template(t.clone()).unwrap();
    }
    for (id, values) in records {
        enc.push_record(TemplateId(*id), values).unwrap();
    }
    let mut msgs = enc.finish(EXPORT_TIME);
    assert_eq!(msgs.len(), 1);
    msgs.remove(0)
}

fn v4(a: u8, b: u8, c: u8, d: u8) -> OwnedValue {
    OwnedValue::Ipv4(Ipv4Addr::new(a, b, c, d))
}

fn u(v: u64) -> OwnedValue {
    OwnedValue::Unsigned(v)
}

fn basic(semantic: u8, element: FieldSpecifier, values: Vec<OwnedValue>) -> OwnedValue {
    OwnedValue::BasicList { semantic, element, values }
}

#[test]
fn basic_list_of_egress_interfaces() {
    // RFC 6313 §4.5.1 layout. A multicast flow leaving by three interfaces
    // (allOf) and a load-balanced one leaving by one of two (exactlyOneOf).
    // Template 256: sourceIPv4Address, destinationIPv4Address,
    // ingressInterface, basicList (291) variable length.
    let t = [(8, 4), (12, 4), (10, 4), (291, 65535)];
    let list_all = "ff 00 11  03  00 0e  00 04  00 00 00 01 00 00 00 02 00 00 00 03";
    let list_one = "ff 00 0d  01  00 0e  00 04  00 00 00 04 00 00 00 05";
    let rec1 = format!("c0 00 02 01 c6 33 64 01 00 00 00 09 {list_all}");
    let rec2 = format!("c0 00 02 02 c6 33 64 02 00 00 00 09 {list_one}");
    let msg = message(1, 0, EXPORT_TIME, &[set(2, &tpl(256, &t)), set(256, &hex(&format!("{rec1} {rec2}")))]);

    let egress = FieldSpecifier::iana(14, 4);
    let expected = vec![
        vec![v4(192, 0, 2, 1), v4(198, 51, 100, 1), u(9), basic(semantic::ALL_OF, egress, vec![u(1), u(2), u(3)])],
        vec![v4(192, 0, 2, 2), v4(198, 51, 100, 2), u(9), basic(semantic::EXACTLY_ONE_OF, egress, vec![u(4), u(5)])],
    ];
    assert_eq!(decoded(&msg, 256), expected);
    let records: Vec<_> = expected.iter().map(|r| (256, r.clone())).collect();
    assert_eq!(encoded(&[template(256, &t)], &records), msg);

    // The borrowed view: element type from the registry (egressInterface is unsigned32).
    let mut decoder = Decoder::new(Config::default());
    for event in decoder.decode(&TransportSession::file(0), None, &msg).unwrap() {
        if let Event::Data(set) = event {
            let r = set.records().next().unwrap();
            let Some(Value::BasicList(list)) = r.value(3) else { panic!("basicList expected") };
            assert_eq!(list.semantic(), semantic::ALL_OF);
            assert_eq!(list.element(), egress);
            assert_eq!(list.data_type(), DataType::Unsigned32);
            assert_eq!(list.iter().count(), 3);
        }
    }
}

#[test]
fn srv6_segment_list_basic_list() {
    // srhSegmentIPv6BasicList (496) of srhSegmentIPv6 (494, ipv6Address),
    // semantic ordered; IANA (IE 496): Segment List[0] is the last segment
    // of the path, so wire order is kept as is. Also srhActiveSegmentIPv6
    // (495) and srhSegmentsIPv6Left (498).
    let t = [(495, 16), (498, 1), (496, 65535)];
    let segs: Vec<Ipv6Addr> = ["2001:db8:0:3::1", "2001:db8:0:2::1", "2001:db8:0:1::1"].iter().map(|s| s.parse().unwrap()).collect();
    let seg_hex = "20 01 0d b8 00 00 00 03 00 00 00 00 00 00 00 01
                   20 01 0d b8 00 00 00 02 00 00 00 00 00 00 00 01
                   20 01 0d b8 00 00 00 01 00 00 00 00 00 00 00 01";
    // Active segment = Segment List[Segments Left] (from memory, unconfirmed).
    let rec = format!("20 01 0d b8 00 00 00 02 00 00 00 00 00 00 00 01  01  ff 00 35  04  01 ee  00 10  {seg_hex}");
    let msg = message(1, 0, EXPORT_TIME, &[set(2, &tpl(256, &t)), set(256, &hex(&rec))]);
    let expected = vec![vec![
        OwnedValue::Ipv6(segs[1]),
        u(1),
        basic(semantic::ORDERED, FieldSpecifier::iana(494, 16), segs.iter().map(|s| OwnedValue::Ipv6(*s)).collect()),
    ]];
    let got = decoded(&msg, 256);
    assert_eq!(got, expected);
    let OwnedValue::BasicList { values, .. } = &got[0][2] else { panic!() };
    // Element 0 is the last segment of the path (IANA, IE 496).
    assert_eq!(values[0], OwnedValue::Ipv6("2001:db8:0:3::1".parse().unwrap()));
    assert_eq!(encoded(&[template(256, &t)], &[(256, expected[0].clone())]), msg);
}

#[test]
fn sub_template_list() {
    // RFC 6313 §4.5.2: Semantic, Template ID, records of that template.
    // Template 257: egressInterface, packetDeltaCount (4 octets, RFC 7011 §6.2).
    // Template 256: sourceIPv4Address, subTemplateList (292).
    let t257 = [(14, 4), (2, 4)];
    let t256 = [(8, 4), (292, 65535)];
    let list = "ff 00 13  03  01 01  00 00 00 05 00 00 00 64  00 00 00 06 00 00 00 c8";
    let tset = [tpl(256, &t256), tpl(257, &t257)].concat();
    let msg = message(1, 0, EXPORT_TIME, &[set(2, &tset), set(256, &hex(&format!("c0 00 02 01 {list}")))]);
    let expected = vec![vec![
        v4(192, 0, 2, 1),
        OwnedValue::SubTemplateList { semantic: semantic::ALL_OF, template_id: 257, records: vec![vec![u(5), u(100)], vec![u(6), u(200)]] },
    ]];
    assert_eq!(decoded(&msg, 256), expected);
    assert_eq!(encoded(&[template(256, &t256), template(257, &t257)], &[(256, expected[0].clone())]), msg);
}

#[test]
fn sub_template_multi_list() {
    // RFC 6313 §4.5.3: Semantic, then per entry Template ID, Data Records
    // Length (including these 4 octets) and records.
    let t257 = [(14, 4), (2, 4)];
    let t258 = [(10, 4)];
    let t256 = [(8, 4), (293, 65535)];
    let list = "ff 00 1d  02  01 01 00 14  00 00 00 05 00 00 00 64 00 00 00 06 00 00 00 c8  01 02 00 08  00 00 00 09";
    let tset = [tpl(256, &t256), tpl(257, &t257), tpl(258, &t258)].concat();
    let msg = message(1, 0, EXPORT_TIME, &[set(2, &tset), set(256, &hex(&format!("c0 00 02 01 {list}")))]);
    let expected = vec![vec![
        v4(192, 0, 2, 1),
        OwnedValue::SubTemplateMultiList {
            semantic: semantic::ONE_OR_MORE_OF,
            entries: vec![(257, vec![vec![u(5), u(100)], vec![u(6), u(200)]]), (258, vec![vec![u(9)]])],
        },
    ]];
    assert_eq!(decoded(&msg, 256), expected);
    let templates = [template(256, &t256), template(257, &t257), template(258, &t258)];
    assert_eq!(encoded(&templates, &[(256, expected[0].clone())]), msg);
}

#[test]
fn nested_lists() {
    // RFC 6313 §5.5 (from memory, unconfirmed): lists may nest. A
    // subTemplateList whose template holds a basicList, and a basicList of
    // basicLists (element basicList 291, variable length).
    let t257 = [(10, 4), (291, 65535)];
    let t256 = [(292, 65535), (291, 65535)];
    // Inner basicList of egressInterface: 5-octet header + 2 elements.
    let inner = "ff 00 0d  03 00 0e 00 04 00 00 00 01 00 00 00 02";
    let stl_body = format!("03 01 01  00 00 00 09 {inner}");
    let stl = format!("ff 00 {:02x} {stl_body}", hex(&stl_body).len());
    // basicList of basicLists: element 291 with Element Length 65535, each
    // element carries its own 3-octet prefix (RFC 6313 §5.1 recommends it).
    let bl_body = format!("04 01 23 ff ff {inner} ff 00 09 03 00 0e 00 04 00 00 00 07");
    let bl = format!("ff 00 {:02x} {bl_body}", hex(&bl_body).len());
    let tset = [tpl(256, &t256), tpl(257, &t257)].concat();
    let msg = message(1, 0, EXPORT_TIME, &[set(2, &tset), set(256, &hex(&format!("{stl} {bl}")))]);

    let egress = FieldSpecifier::iana(14, 4);
    let inner_v = basic(semantic::ALL_OF, egress, vec![u(1), u(2)]);
    let expected = vec![vec![
        OwnedValue::SubTemplateList { semantic: semantic::ALL_OF, template_id: 257, records: vec![vec![u(9), inner_v.clone()]] },
        basic(semantic::ORDERED, FieldSpecifier::iana(291, 65535), vec![inner_v, basic(semantic::ALL_OF, egress, vec![u(7)])]),
    ]];
    assert_eq!(decoded(&msg, 256), expected);
    assert_eq!(encoded(&[template(256, &t256), template(257, &t257)], &[(256, expected[0].clone())]), msg);
}

#[test]
fn empty_lists() {
    // RFC 6313 §4.5.1-§4.5.3: an empty basicList keeps its header (Element
    // Length included); an empty subTemplateList is Semantic + Template ID;
    // an empty subTemplateMultiList is the Semantic alone; an entry without
    // records has Data Records Length 4 (its own header).
    let t257 = [(14, 4)];
    let t256 = [(291, 65535), (292, 65535), (293, 65535), (293, 65535)];
    let rec = "ff 00 05 03 00 0e 00 04   ff 00 03 03 01 01   ff 00 01 ff   ff 00 05 03 01 01 00 04";
    let tset = [tpl(256, &t256), tpl(257, &t257)].concat();
    let msg = message(1, 0, EXPORT_TIME, &[set(2, &tset), set(256, &hex(rec))]);
    let expected = vec![vec![
        basic(semantic::ALL_OF, FieldSpecifier::iana(14, 4), vec![]),
        OwnedValue::SubTemplateList { semantic: semantic::ALL_OF, template_id: 257, records: vec![] },
        OwnedValue::SubTemplateMultiList { semantic: semantic::UNDEFINED, entries: vec![] },
        OwnedValue::SubTemplateMultiList { semantic: semantic::ALL_OF, entries: vec![(257, vec![])] },
    ]];
    assert_eq!(decoded(&msg, 256), expected);
    assert_eq!(encoded(&[template(256, &t256), template(257, &t257)], &[(256, expected[0].clone())]), msg);
}

#[test]
fn enterprise_and_variable_length_elements() {
    // RFC 6313 §4.5.1: with E = 1 the header carries the Enterprise Number
    // (9 octets); Element Length 65535 gives each element its own RFC 7011
    // §7 prefix. interfaceName (82) is a string.
    let t = [(291, 65535), (291, 65535)];
    let ent = format!("ff 00 11  03 80 01 00 04 {PEN_HEX}  de ad be ef 01 02 03 04");
    let names = "ff 00 0f  02 00 52 ff ff  04 65 74 68 30  04 65 74 68 31";
    let msg = message(1, 0, EXPORT_TIME, &[set(2, &tpl(256, &t)), set(256, &hex(&format!("{ent} {names}")))]);
    let expected = vec![vec![
        basic(semantic::ALL_OF, FieldSpecifier::enterprise(PEN, 1, 4), vec![OwnedValue::Octets(hex("de ad be ef")), OwnedValue::Octets(hex("01 02 03 04"))]),
        basic(
            semantic::ONE_OR_MORE_OF,
            FieldSpecifier::iana(82, 65535),
            vec![OwnedValue::String("eth0".into()), OwnedValue::String("eth1".into())],
        ),
    ]];
    assert_eq!(decoded(&msg, 256), expected);
    assert_eq!(encoded(&[template(256, &t)], &[(256, expected[0].clone())]), msg);
}

#[test]
fn one_octet_prefix_for_lists_also_decodes() {
    // RFC 6313 §5.1 only recommends the 3-octet form; RFC 7011 §7 allows
    // the 1-octet form for any length below 255.
    let t = [(291, 65535)];
    let msg = message(1, 0, EXPORT_TIME, &[set(2, &tpl(256, &t)), set(256, &hex("09 03 00 0e 00 04 00 00 00 01"))]);
    let expected = vec![vec![basic(semantic::ALL_OF, FieldSpecifier::iana(14, 4), vec![u(1)])]];
    assert_eq!(decoded(&msg, 256), expected);
    let mut enc = MessageEncoder::new(ObservationDomainId(1)).with_length_prefix(LengthPrefix::Shortest);
    enc.add_template(template(256, &t)).unwrap();
    enc.push_record(TemplateId(256), &expected[0]).unwrap();
    assert_eq!(enc.finish(EXPORT_TIME), vec![msg]);
}

#[test]
fn semantic_registry_values() {
    // IANA "IPFIX Structured Data Types Semantics" (RFC 6313 §4.4).
    let names: Vec<_> = [0x00, 0x01, 0x02, 0x03, 0x04, 0xff].into_iter().map(semantic::name).collect();
    assert_eq!(
        names,
        [Some("noneOf"), Some("exactlyOneOf"), Some("oneOrMoreOf"), Some("allOf"), Some("ordered"), Some("undefined")]
    );
    // 0x05-0xFE are unassigned.
    assert_eq!(semantic::name(0x05), None);
    assert_eq!(semantic::name(0xfe), None);
    // List IEs (IANA): basicList 291, subTemplateList 292, subTemplateMultiList 293.
    let types: Vec<_> = [291, 292, 293].into_iter().map(|id| ipfix_core::ie::lookup(id).unwrap().data_type).collect();
    assert_eq!(types, [Some(DataType::BasicList), Some(DataType::SubTemplateList), Some(DataType::SubTemplateMultiList)]);
}

#[test]
fn list_templates_resolve_in_the_same_domain_only() {
    // RFC 6313 §5.2 (facts sheet §2.3): templates referenced inside lists
    // come from the same session and Observation Domain. Template 257 exists
    // only in domain 2; a list naming it in domain 1 is undecodable, not
    // malformed.
    let t256 = [(8, 4), (292, 65535)];
    let t257 = [(14, 4), (2, 4)];
    let list = "ff 00 0b  03  01 01  00 00 00 05 00 00 00 64";
    let mut decoder = Decoder::new(Config::default());
    let session = TransportSession::file(0);
    let m2 = message(2, 0, EXPORT_TIME, &[set(2, &tpl(257, &t257))]);
    decode(&mut decoder, &session, None, &m2).unwrap();
    let m1 = message(1, 0, EXPORT_TIME, &[set(2, &tpl(256, &t256)), set(256, &hex(&format!("c0 00 02 01 {list}")))]);
    let out = decode(&mut decoder, &session, None, &m1).unwrap();
    assert_eq!(
        values_of(&out, 256),
        [vec![v4(192, 0, 2, 1), OwnedValue::SubTemplateList { semantic: semantic::ALL_OF, template_id: 257, records: vec![] }]]
    );
    // Once domain 1 learns 257 the same list decodes.
    let m1b = message(1, 1, EXPORT_TIME, &[set(2, &tpl(257, &t257)), set(256, &hex(&format!("c0 00 02 01 {list}")))]);
    let out = decode(&mut decoder, &session, None, &m1b).unwrap();
    assert_eq!(
        values_of(&out, 256),
        [vec![v4(192, 0, 2, 1), OwnedValue::SubTemplateList { semantic: semantic::ALL_OF, template_id: 257, records: vec![vec![u(5), u(100)]] }]]
    );
}

#[test]
fn encoder_list_errors() {
    let mut enc = MessageEncoder::new(ObservationDomainId(1));
    enc.add_template(template(256, &[(292, 65535), (291, 65535)])).unwrap();
    // RFC 6313 §5.2: a list's template must be known in the domain.
    let stl = OwnedValue::SubTemplateList { semantic: semantic::ALL_OF, template_id: 300, records: vec![vec![u(1)]] };
    let bl = basic(semantic::ALL_OF, FieldSpecifier::iana(14, 4), vec![u(1)]);
    assert_eq!(enc.push_record(TemplateId(256), &[stl, bl.clone()]), Err(EncodeError::UnknownTemplate { template_id: TemplateId(300) }));
    // An element of the wrong kind: egressInterface is unsigned32.
    let empty = OwnedValue::SubTemplateList { semantic: semantic::ALL_OF, template_id: 300, records: vec![] };
    let bad = basic(semantic::ALL_OF, FieldSpecifier::iana(14, 4), vec![OwnedValue::String("x".into())]);
    assert!(matches!(
        enc.push_record(TemplateId(256), &[empty.clone(), bad]),
        Err(EncodeError::WrongType { field_index: 1, data_type: DataType::Unsigned32, .. })
    ));
    // A list value in a list field of another list type.
    assert!(matches!(enc.push_record(TemplateId(256), &[bl.clone(), bl.clone()]), Err(EncodeError::WrongType { field_index: 0, .. })));
    // Element Length 0 with elements could never be decoded.
    let zero = basic(semantic::ALL_OF, FieldSpecifier::iana(313, 0), vec![OwnedValue::Octets(vec![])]);
    assert!(matches!(enc.push_record(TemplateId(256), &[empty.clone(), zero]), Err(EncodeError::FieldLength { length: 0, .. })));
    // Element Length not allowed for the type (RFC 7011 §6.2: addresses are never reduced).
    let short = basic(semantic::ALL_OF, FieldSpecifier::iana(8, 3), vec![]);
    assert!(matches!(enc.push_record(TemplateId(256), &[empty.clone(), short]), Err(EncodeError::FieldLength { length: 3, .. })));
    // Nothing was added.
    assert_eq!(enc.sequence_number(), 0);
    enc.push_record(TemplateId(256), &[empty, bl]).unwrap();
    assert_eq!(enc.sequence_number(), 1);
}
