//! RFC 7011 Appendix A (non-normative examples), rebuilt byte by byte from
//! the field lists (facts sheet §9), decoded, and re-encoded identically.
//!
//! Export Time, Sequence Number and Observation Domain ID of A.1 are not
//! given by the RFC; the values here are ours. The enterprise examples
//! (A.2.2, A.4.2, A.4.3) use the documentation PEN 32473 (RFC 5612).
#![allow(clippy::unwrap_used, clippy::indexing_slicing)]

mod common;

use std::net::Ipv4Addr;

use common::{decode, hex, message, set, values_of, PEN, PEN_HEX};
use ipfix_core::{
    Config, DataType, Decoder, ElementId, Event, FieldSpecifier, LengthPrefix, MessageEncoder, MessageHeader,
    ObservationDomainId, OwnedValue, Template, TemplateId, TransportSession,
};

const EXPORT_TIME: u32 = 1_700_000_000; // 0x6553f100, ours
const DOMAIN: u32 = 1; // ours

// RFC 7011 App. A.2.1: Template Set, template 256, five 4-octet fields.
const A21: &str = "00 02 00 1c 01 00 00 05 00 08 00 04 00 0c 00 04 00 0f 00 04 00 02 00 04 00 01 00 04";
// RFC 7011 App. A.3: Data Set for template 256, three records, no padding.
const A3: &str = "01 00 00 40
    c0 00 02 0c c0 00 02 fe c0 00 02 01 00 00 13 91 00 51 8c 81
    c0 00 02 1b c0 00 02 17 c0 00 02 02 00 00 02 ec 00 05 ef 46
    c0 00 02 38 c0 00 02 41 c0 00 02 03 00 00 00 05 00 00 19 86";
// RFC 7011 App. A.4.1: Options Template Set, template 258, 2 octets of padding.
const A41: &str = "00 03 00 18 01 02 00 03 00 01 00 8d 00 04 00 29 00 02 00 2a 00 02 00 00";
// The 20-octet Data Set for template 258 that A.1 counts: A.4.4's records
// under Set ID 258 (facts sheet §9, derived).
const DATA_258: &str = "01 02 00 14 00 00 00 01 01 59 27 d9 00 00 00 02 02 b2 4f b2";
// RFC 7011 App. A.4.4: Data Set for template 260.
const A44: &str = "01 04 00 14 00 00 00 01 01 59 27 d9 00 00 00 02 02 b2 4f b2";

fn a22() -> Vec<u8> {
    // RFC 7011 App. A.2.2: E=1 id 15 with the PEN.
    hex(&format!("00 02 00 20 01 01 00 05 00 08 00 04 00 0c 00 04 80 0f 00 04 {PEN_HEX} 00 02 00 04 00 01 00 04"))
}

fn a42() -> Vec<u8> {
    // RFC 7011 App. A.4.2: non-scope E=1 id 42, length 4, 2 octets padding.
    hex(&format!("00 03 00 1c 01 03 00 03 00 01 00 8d 00 04 00 29 00 02 80 2a 00 04 {PEN_HEX} 00 00"))
}

fn a43() -> Vec<u8> {
    // RFC 7011 App. A.4.3: scope E=1 id 123, length 4, 2 octets padding.
    hex(&format!("00 03 00 1c 01 04 00 03 00 01 80 7b 00 04 {PEN_HEX} 00 29 00 02 00 2a 00 02 00 00"))
}

/// RFC 7011 App. A.1: the one message of the appendix, 152 octets.
fn a1() -> Vec<u8> {
    let header = format!("00 0a 00 98 65 53 f1 00 00 00 00 00 00 00 00 {DOMAIN:02x}");
    hex(&[header.as_str(), A21, A3, A41, DATA_258].join(" "))
}

fn ip(last: u8) -> OwnedValue {
    OwnedValue::Ipv4(Ipv4Addr::new(192, 0, 2, last))
}

/// RFC 7011 App. A.3: the three flow records.
fn a3_records() -> Vec<Vec<OwnedValue>> {
    let r = |s, d, n, p, o| vec![ip(s), ip(d), ip(n), OwnedValue::Unsigned(p), OwnedValue::Unsigned(o)];
    vec![r(12, 254, 1, 5009, 5_344_385), r(27, 23, 2, 748, 388_934), r(56, 65, 3, 5, 6534)]
}

/// RFC 7011 App. A.4.4: (line card or scope 1, 345 messages, 10201 flows), (2, 690, 20402).
fn a44_records() -> Vec<Vec<OwnedValue>> {
    let r = |c, m, f| vec![OwnedValue::Unsigned(c), OwnedValue::Unsigned(m), OwnedValue::Unsigned(f)];
    vec![r(1, 345, 10201), r(2, 690, 20402)]
}

fn t256() -> Template {
    // RFC 7011 App. A.2.1: sourceIPv4Address, destinationIPv4Address,
    // ipNextHopIPv4Address, packetDeltaCount, octetDeltaCount, 4 octets each.
    Template { id: TemplateId(256), scope_field_count: 0, fields: [8, 12, 15, 2, 1].map(|id| FieldSpecifier::iana(id, 4)).to_vec() }
}

fn t258() -> Template {
    // RFC 7011 App. A.4.1: scope lineCardId (141) 4; exportedMessageTotalCount
    // (41) 2; exportedFlowRecordTotalCount (42) 2.
    Template {
        id: TemplateId(258),
        scope_field_count: 1,
        fields: vec![FieldSpecifier::iana(141, 4), FieldSpecifier::iana(41, 2), FieldSpecifier::iana(42, 2)],
    }
}

#[test]
fn a1_message_is_152_octets_and_sets_sum_to_it() {
    // RFC 7011 App. A.1: Length 152; §3.3.2 Set Lengths walk the message.
    let msg = a1();
    assert_eq!(msg.len(), 152);
    let header = MessageHeader::parse_checked(&msg).unwrap();
    assert_eq!(header.length, 152);
    let sets: Vec<_> = ipfix_core::Sets::new(&msg[16..], 16).collect::<Result<_, _>>().unwrap();
    let lens: Vec<u16> = sets.iter().map(|s| s.header.length).collect();
    assert_eq!(lens, [28, 64, 24, 20]);
    let ids: Vec<u16> = sets.iter().map(|s| s.header.set_id).collect();
    assert_eq!(ids, [2, 256, 3, 258]);
}

#[test]
fn a1_decodes_every_value() {
    for session in [common::udp(), common::tcp(), TransportSession::file(0)] {
        let mut decoder = Decoder::new(Config::default());
        let out = decode(&mut decoder, &session, None, &a1()).unwrap();
        // A.2.1 and A.4.1 each define one template; the 2 padding octets of
        // A.4.1 are not a record (RFC 7011 §3.3.1).
        assert_eq!(out.learned, [(DOMAIN, 256, false), (DOMAIN, 258, false)]);
        assert!(out.rejected.is_empty() && out.skipped.is_empty());
        // RFC 7011 App. A.3.
        assert_eq!(values_of(&out, 256), a3_records());
        // RFC 7011 App. A.4.4 values, under template 258.
        assert_eq!(values_of(&out, 258), a44_records());
        let stats = decoder.stats();
        assert_eq!(stats.records_decoded, 5);
        // RFC 7011 §3.1, §2: options data records are Data Records too.
        assert_eq!(stats.options_records_decoded, 2);
        assert_eq!(stats.templates_learned, 2);
        // RFC 7011 §3.1 + Errata EID 4396: the next message should carry 5.
        let (_, _, ds) = decoder.domain_stats().next().unwrap();
        assert_eq!(ds.sequence.expected, Some(5));
    }
}

#[test]
fn a1_field_names_types_and_scope() {
    let mut decoder = Decoder::new(Config::default());
    let msg = a1();
    let mut seen = Vec::new();
    for event in decoder.decode(&TransportSession::file(0), None, &msg).unwrap() {
        if let Event::Data(set) = event {
            let record = set.records().next().unwrap();
            for field in record.fields() {
                seen.push((field.spec.name().unwrap(), field.spec.is_scope, field.spec.spec.length));
            }
        }
    }
    // Names from the IANA registry; packetDeltaCount and octetDeltaCount are
    // unsigned64 sent in 4 octets, the two options counters in 2 (RFC 7011 §6.2).
    assert_eq!(
        seen,
        [
            ("sourceIPv4Address", false, 4),
            ("destinationIPv4Address", false, 4),
            ("ipNextHopIPv4Address", false, 4),
            ("packetDeltaCount", false, 4),
            ("octetDeltaCount", false, 4),
            ("lineCardId", true, 4),
            ("exportedMessageTotalCount", false, 2),
            ("exportedFlowRecordTotalCount", false, 2),
        ]
    );
}

#[test]
fn a1_encoder_is_byte_identical() {
    // The same content through the encoder, with Set padding as A.4.1 has it.
    let mut enc = MessageEncoder::new(ObservationDomainId(DOMAIN)).with_set_padding(true);
    enc.add_template(t256()).unwrap();
    for r in a3_records() {
        enc.push_record(TemplateId(256), &r).unwrap();
    }
    enc.add_template(t258()).unwrap();
    for r in a44_records() {
        enc.push_record(TemplateId(258), &r).unwrap();
    }
    let msgs = enc.finish(EXPORT_TIME);
    assert_eq!(msgs, vec![a1()]);
    // RFC 7011 §3.1 + EID 4396: five Data Records sent, templates not counted.
    assert_eq!(enc.sequence_number(), 5);
}

#[test]
fn a1_encoder_without_padding_differs_only_by_padding() {
    // RFC 7011 §3.3.1: padding is optional.
    let mut enc = MessageEncoder::new(ObservationDomainId(DOMAIN));
    enc.add_template(t256()).unwrap();
    for r in a3_records() {
        enc.push_record(TemplateId(256), &r).unwrap();
    }
    enc.add_template(t258()).unwrap();
    for r in a44_records() {
        enc.push_record(TemplateId(258), &r).unwrap();
    }
    let msg = enc.finish(EXPORT_TIME).remove(0);
    assert_eq!(msg.len(), 150);
    // The Options Template Set is 22 octets instead of 24.
    let a41 = hex(A41);
    assert_eq!(&msg[108..110], &[0x00, 0x03]);
    assert_eq!(&msg[110..112], &[0x00, 0x16]);
    assert_eq!(&msg[112..130], &a41[4..22]);
    let mut decoder = Decoder::new(Config::default());
    let out = decode(&mut decoder, &TransportSession::file(0), None, &msg).unwrap();
    assert_eq!(values_of(&out, 256), a3_records());
    assert_eq!(values_of(&out, 258), a44_records());
}

#[test]
fn a1_encoder_record_builder_and_raw_agree() {
    // Three ways to add the same records give the same octets.
    let by_values = {
        let mut enc = MessageEncoder::new(ObservationDomainId(DOMAIN)).with_set_padding(true);
        enc.add_template(t256()).unwrap();
        for r in a3_records() {
            enc.push_record(TemplateId(256), &r).unwrap();
        }
        enc.finish(EXPORT_TIME)
    };
    let by_builder = {
        let mut enc = MessageEncoder::new(ObservationDomainId(DOMAIN)).with_set_padding(true);
        enc.add_template(t256()).unwrap();
        // RFC 7011 App. A.3 record 1.
        let mut r = enc.record(TemplateId(256)).unwrap();
        r.ipv4(Ipv4Addr::new(192, 0, 2, 12)).unwrap().ipv4(Ipv4Addr::new(192, 0, 2, 254)).unwrap();
        r.ipv4(Ipv4Addr::new(192, 0, 2, 1)).unwrap().unsigned(5009).unwrap().unsigned(5_344_385).unwrap();
        r.finish().unwrap();
        for values in &a3_records()[1..] {
            let mut r = enc.record(TemplateId(256)).unwrap();
            for v in values {
                r.value(v).unwrap();
            }
            r.finish().unwrap();
        }
        enc.finish(EXPORT_TIME)
    };
    let by_raw = {
        let mut enc = MessageEncoder::new(ObservationDomainId(DOMAIN)).with_set_padding(true);
        enc.add_template(t256()).unwrap();
        for rec in hex(A3)[4..].chunks(20) {
            enc.push_raw(TemplateId(256), rec).unwrap();
        }
        enc.finish(EXPORT_TIME)
    };
    let expected = message(DOMAIN, 0, EXPORT_TIME, &[hex(A21), hex(A3)]);
    assert_eq!(by_values, vec![expected.clone()]);
    assert_eq!(by_builder, vec![expected.clone()]);
    assert_eq!(by_raw, vec![expected]);
}

#[test]
fn a22_enterprise_field_is_kept_and_surfaced() {
    // RFC 7011 App. A.2.2 with A.3's records under template 257 (ours).
    let data = set(257, &hex(A3)[4..]);
    let msg = message(DOMAIN, 0, EXPORT_TIME, &[a22(), data]);
    let mut decoder = Decoder::new(Config::default());
    let mut checked = 0;
    for event in decoder.decode(&TransportSession::file(0), None, &msg).unwrap() {
        if let Event::Data(set) = event {
            let f = &set.plan().fields()[2];
            // RFC 7011 §3.2: E=1, id 15, PEN follows; not the IANA element 15.
            assert_eq!(f.spec, FieldSpecifier::enterprise(PEN, 15, 4));
            assert!(f.ie.is_none());
            assert_eq!(f.data_type, DataType::OctetArray);
            let values: Vec<_> = set.records().map(|r| r.value(2).unwrap().to_owned_value()).collect();
            assert_eq!(values, [[192, 0, 2, 1], [192, 0, 2, 2], [192, 0, 2, 3]].map(|o| OwnedValue::Octets(o.to_vec())));
            // The IANA fields around it decode as usual.
            assert_eq!(set.records().next().unwrap().get(2).unwrap().as_u64(), Some(5009));
            checked += 1;
        }
    }
    assert_eq!(checked, 1);

    // The encoder writes the same Template Set; with the element typed as
    // ipv4Address by the caller it takes an address value.
    let template = Template {
        id: TemplateId(257),
        scope_field_count: 0,
        fields: vec![
            FieldSpecifier::iana(8, 4),
            FieldSpecifier::iana(12, 4),
            FieldSpecifier::enterprise(PEN, 15, 4),
            FieldSpecifier::iana(2, 4),
            FieldSpecifier::iana(1, 4),
        ],
    };
    let mut enc = MessageEncoder::new(ObservationDomainId(DOMAIN))
        .with_element_type(ElementId::enterprise(PEN, 15), DataType::Ipv4Address);
    enc.add_template(template).unwrap();
    for r in a3_records() {
        enc.push_record(TemplateId(257), &r).unwrap();
    }
    assert_eq!(enc.finish(EXPORT_TIME), vec![msg]);
}

#[test]
fn a42_a43_a44_enterprise_options_templates() {
    // RFC 7011 App. A.4.2, A.4.3 and A.4.4 in one message (ours).
    let msg = message(DOMAIN, 0, EXPORT_TIME, &[a42(), a43(), hex(A44)]);
    let mut decoder = Decoder::new(Config::default());
    let mut plans = Vec::new();
    let mut records = Vec::new();
    for event in decoder.decode(&TransportSession::file(0), None, &msg).unwrap() {
        match event {
            Event::TemplateLearned { plan, .. } => plans.push(plan),
            Event::Data(set) => records.extend(set.records().map(|r| r.fields().map(|f| f.value.to_owned_value()).collect::<Vec<_>>())),
            _ => {}
        }
    }
    assert_eq!(plans.len(), 2, "the 2 padding octets of each set are not records");
    // A.4.2: scope lineCardId, non-scope enterprise 42 in 4 octets.
    assert_eq!(plans[0].id(), TemplateId(259));
    assert_eq!(plans[0].template().scope_field_count, 1);
    assert_eq!(plans[0].template().fields[2], FieldSpecifier::enterprise(PEN, 42, 4));
    // A.4.3: the scope field itself is enterprise-specific.
    assert_eq!(plans[1].id(), TemplateId(260));
    assert_eq!(plans[1].template().scope_fields(), &[FieldSpecifier::enterprise(PEN, 123, 4)]);
    assert!(plans[1].fields()[0].is_scope);
    // A.4.4: (1, 345, 10201), (2, 690, 20402); the enterprise scope is octets.
    let scope = |n: u8| OwnedValue::Octets(vec![0, 0, 0, n]);
    assert_eq!(
        records,
        [
            vec![scope(1), OwnedValue::Unsigned(345), OwnedValue::Unsigned(10201)],
            vec![scope(2), OwnedValue::Unsigned(690), OwnedValue::Unsigned(20402)],
        ]
    );

    // Encoder: identical sets, with the enterprise scope typed unsigned32.
    let mut enc = MessageEncoder::new(ObservationDomainId(DOMAIN))
        .with_set_padding(true)
        .with_element_type(ElementId::enterprise(PEN, 123), DataType::Unsigned32);
    enc.add_template(Template {
        id: TemplateId(259),
        scope_field_count: 1,
        fields: vec![FieldSpecifier::iana(141, 4), FieldSpecifier::iana(41, 2), FieldSpecifier::enterprise(PEN, 42, 4)],
    })
    .unwrap();
    enc.add_template(Template {
        id: TemplateId(260),
        scope_field_count: 1,
        fields: vec![FieldSpecifier::enterprise(PEN, 123, 4), FieldSpecifier::iana(41, 2), FieldSpecifier::iana(42, 2)],
    })
    .unwrap();
    for r in a44_records() {
        enc.push_record(TemplateId(260), &r).unwrap();
    }
    let out = enc.finish(EXPORT_TIME);
    // Both options templates share one Options Template Set in our output
    // (4 + 22 + 22 octets, already aligned); the records inside are the A.4.2
    // and A.4.3 records byte for byte, and the Data Set is A.4.4.
    let ot = &out[0][16..16 + 48];
    assert_eq!(&ot[..4], &[0x00, 0x03, 0x00, 0x30]);
    assert_eq!(&ot[4..26], &a42()[4..26]);
    assert_eq!(&ot[26..48], &a43()[4..26]);
    assert_eq!(&out[0][64..], hex(A44).as_slice());
}

#[test]
fn a4x_each_set_alone_is_byte_identical() {
    // One options template per message reproduces A.4.1, A.4.2, A.4.3 exactly.
    let cases: [(Template, Vec<u8>); 3] = [
        (t258(), hex(A41)),
        (
            Template {
                id: TemplateId(259),
                scope_field_count: 1,
                fields: vec![FieldSpecifier::iana(141, 4), FieldSpecifier::iana(41, 2), FieldSpecifier::enterprise(PEN, 42, 4)],
            },
            a42(),
        ),
        (
            Template {
                id: TemplateId(260),
                scope_field_count: 1,
                fields: vec![FieldSpecifier::enterprise(PEN, 123, 4), FieldSpecifier::iana(41, 2), FieldSpecifier::iana(42, 2)],
            },
            a43(),
        ),
    ];
    for (template, expected) in cases {
        let mut enc = MessageEncoder::new(ObservationDomainId(DOMAIN)).with_set_padding(true);
        enc.add_template(template).unwrap();
        let msg = enc.finish(EXPORT_TIME).remove(0);
        assert_eq!(&msg[16..], expected.as_slice());
    }
    // And A.2.2 alone.
    let mut enc = MessageEncoder::new(ObservationDomainId(DOMAIN)).with_set_padding(true);
    let mut t = t256();
    t.id = TemplateId(257);
    t.fields[2] = FieldSpecifier::enterprise(PEN, 15, 4);
    enc.add_template(t).unwrap();
    assert_eq!(&enc.finish(EXPORT_TIME)[0][16..], a22().as_slice());
}

#[test]
fn data_set_padding_is_not_a_record() {
    // RFC 7011 §3.3.1: padding shorter than a record; §9: the collector MUST
    // accept it. Even non-zero padding is not a malformed message (§9.1, facts
    // sheet §1.3).
    for pad in [hex("00 00 00"), hex("00"), hex("ab cd")] {
        let mut body = hex(A3)[4..].to_vec();
        body.extend_from_slice(&pad);
        let msg = message(DOMAIN, 0, EXPORT_TIME, &[hex(A21), set(256, &body)]);
        let mut decoder = Decoder::new(Config::default());
        let out = decode(&mut decoder, &TransportSession::file(0), None, &msg).unwrap();
        assert_eq!(values_of(&out, 256), a3_records());
    }
}

#[test]
fn a5_variable_length_forms() {
    // interfaceName (82, string) and ipHeaderPacketSection (313, octetArray),
    // both variable length (RFC 7011 §7).
    let template = Template {
        id: TemplateId(300),
        scope_field_count: 0,
        fields: vec![FieldSpecifier::iana(82, 65535), FieldSpecifier::iana(313, 65535)],
    };
    let name = "ge0/1"; // 5 octets
    let section = vec![0x45u8; 1000];
    let mut enc = MessageEncoder::new(ObservationDomainId(DOMAIN)).with_length_prefix(LengthPrefix::Shortest);
    enc.add_template(template.clone()).unwrap();
    enc.push_record(TemplateId(300), &[OwnedValue::String(name.into()), OwnedValue::Octets(section.clone())]).unwrap();
    let msg = enc.finish(EXPORT_TIME).remove(0);
    // Template Set: 4 + 4 + 2 × 4 = 16 octets; Data Set header at 32.
    let record = &msg[36..];
    // RFC 7011 App. A.5.1: length below 255 in one octet.
    assert_eq!(record[0], 0x05);
    assert_eq!(&record[1..6], name.as_bytes());
    // RFC 7011 App. A.5.2: 255 then a 2-octet length, 1000 = 0x03e8.
    assert_eq!(&record[6..9], &[0xff, 0x03, 0xe8]);
    assert_eq!(record.len(), 9 + 1000);

    let expected = vec![OwnedValue::String(name.into()), OwnedValue::Octets(section.clone())];
    let mut decoder = Decoder::new(Config::default());
    let out = decode(&mut decoder, &TransportSession::file(0), None, &msg).unwrap();
    assert_eq!(values_of(&out, 300), std::slice::from_ref(&expected));

    // RFC 7011 §7: the 3-octet form may be used for short values too.
    let mut enc = MessageEncoder::new(ObservationDomainId(DOMAIN)).with_length_prefix(LengthPrefix::ThreeOctet);
    enc.add_template(template).unwrap();
    enc.push_record(TemplateId(300), &expected).unwrap();
    let msg = enc.finish(EXPORT_TIME).remove(0);
    assert_eq!(&msg[36..39], &[0xff, 0x00, 0x05]);
    let mut decoder = Decoder::new(Config::default());
    let out = decode(&mut decoder, &TransportSession::file(0), None, &msg).unwrap();
    assert_eq!(values_of(&out, 300), [expected]);
}
