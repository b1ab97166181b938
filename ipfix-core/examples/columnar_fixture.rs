//! Writes a small, fully known capture through the columnar writer, for the
//! cross-check with a general-purpose Parquet reader
//! (`tests/py/test_columnar_pyarrow.py` reads it back with pyarrow).
//!
//! Usage: `columnar_fixture OUT` writes the flows table to `OUT` and the
//! options table to `OUT.options.parquet`, the converter's naming, and
//! prints the builder counters as JSON.
//!
//! Build: `cargo build -p ipfix-core --features columnar --example columnar_fixture`.
//!
//! The capture (documentation addresses, RFC 5737/3849; private ASNs,
//! RFC 6996; PEN 32473, RFC 5612), one UDP exporter 192.0.2.1, domain 7,
//! Export Time 1,764,633,600 (2025-12-02T00:00:00Z):
//!
//! Options records
//! - template 300, scope ingressInterface (10) + interfaceName (82):
//!   (3, "xe-0/0/3"), (4, "xe-0/0/4")
//! - template 301, scope samplerId (48) + samplingInterval (34): (1, 1000)
//! - template 302, scope ingressVRFID (234) + VRFname (236): (10, "blue")
//! - template 303, scope exportingProcessId (144) + systemInitTimeMilliseconds
//!   (160): (1, 1,764,630,000,000 ms = 2025-12-01T23:00:00Z)
//!
//! Template 256 (IPv4): sourceIPv4Address, destinationIPv4Address,
//! ingressInterface, egressInterface, ingressVRFID, packetDeltaCount (4
//! octets, reduced), octetDeltaCount, flowStartSysUpTime, flowEndSysUpTime,
//! forwardingStatus (1 octet), mplsTopLabelStackSection,
//! mplsLabelStackSection2, samplerId, bgpSourceAsNumber.
//! - r1: 192.0.2.10 → 198.51.100.20, in 3, out 4, VRF 10, 5 packets, 1500
//!   octets, up 1000 → 61000 ms, status 0x81, labels 16004 then 24001
//!   (bottom), sampler 1, AS 64512
//! - r2: 192.0.2.11 → 203.0.113.5, in 4, out 3, VRF 11, 7 packets, 900
//!   octets, up 2000 → 3000 ms, status 0x40, no labels (zero sections),
//!   sampler 1, AS 64513
//!
//! Template 257 (IPv6/SRv6): sourceIPv6Address, destinationIPv6Address,
//! flowStartSeconds, flowStartMilliseconds, flowEndMilliseconds,
//! forwardingStatus (4 octets), srhSegmentIPv6EndpointBehavior,
//! srhSegmentIPv6BasicList, enterprise element 32473/1 (4 octets),
//! sourceMacAddress.
//! - r3: 2001:db8::1 → 2001:db8:0:1::2, start 1,764,633,599 s and
//!   1,764,633,599,000 ms, end 1,764,633,599,750 ms, status 0x00000083,
//!   behavior 5, segments 2001:db8::a and 2001:db8::b, enterprise value
//!   de ad be ef, MAC 00:1B:2C:3D:4E:FA.

#[cfg(feature = "columnar")]
mod fixture {
    use std::error::Error;
    use std::fs::File;
    use std::io::BufWriter;
    use std::sync::Arc;

    use ipfix_core::columnar::{Enrichment, SinkOptions, TableSchema, TableWriter};
    use ipfix_core::{
        Config, Decoder, Event, FieldSpecifier, MessageEncoder, ObservationDomainId, Template, TemplateId,
        TransportSession, VARIABLE_LENGTH,
    };

    const EXPORT_TIME: u32 = 1_764_633_600;
    const INIT_MS: u64 = 1_764_630_000_000;

    fn template(id: u16, scope: u16, fields: &[(u16, u16)]) -> Template {
        Template {
            id: TemplateId(id),
            scope_field_count: scope,
            fields: fields.iter().map(|(ie, len)| FieldSpecifier::iana(*ie, *len)).collect(),
        }
    }

    fn named(key: u32, name: &str) -> Vec<u8> {
        let mut r = key.to_be_bytes().to_vec();
        r.push(u8::try_from(name.len()).unwrap_or(0));
        r.extend_from_slice(name.as_bytes());
        r
    }

    fn messages() -> Result<Vec<Vec<u8>>, Box<dyn Error>> {
        let mut e = MessageEncoder::new(ObservationDomainId(7)).with_max_message_size(1400);
        e.add_template(template(300, 1, &[(10, 4), (82, VARIABLE_LENGTH)]))?;
        e.add_template(template(301, 1, &[(48, 1), (34, 4)]))?;
        e.add_template(template(302, 1, &[(234, 4), (236, VARIABLE_LENGTH)]))?;
        e.add_template(template(303, 1, &[(144, 4), (160, 8)]))?;
        e.add_template(template(
            256,
            0,
            &[(8, 4), (12, 4), (10, 4), (14, 4), (234, 4), (2, 4), (1, 8), (22, 4), (21, 4), (89, 1), (70, 3), (71, 3), (48, 1), (16, 4)],
        ))?;
        let mut t257 = template(257, 0, &[(27, 16), (28, 16), (150, 4), (152, 8), (153, 8), (89, 4), (502, 2), (496, VARIABLE_LENGTH)]);
        t257.fields.push(FieldSpecifier::enterprise(32473, 1, 4));
        t257.fields.push(FieldSpecifier::iana(56, 6));
        e.add_template(t257)?;

        e.push_raw(TemplateId(300), &named(3, "xe-0/0/3"))?;
        e.push_raw(TemplateId(300), &named(4, "xe-0/0/4"))?;
        e.push_raw(TemplateId(301), &[1, 0, 0, 0x03, 0xE8])?;
        e.push_raw(TemplateId(302), &named(10, "blue"))?;
        let mut init = 1u32.to_be_bytes().to_vec();
        init.extend_from_slice(&INIT_MS.to_be_bytes());
        e.push_raw(TemplateId(303), &init)?;

        let ipv4 = |src: [u8; 4], dst: [u8; 4], i: u32, o: u32, vrf: u32, pkts: u32, octs: u64, up: (u32, u32), fwd: u8, mpls: [u8; 6], asn: u32| {
            let mut r = Vec::new();
            r.extend_from_slice(&src);
            r.extend_from_slice(&dst);
            for v in [i, o, vrf, pkts] {
                r.extend_from_slice(&v.to_be_bytes());
            }
            r.extend_from_slice(&octs.to_be_bytes());
            r.extend_from_slice(&up.0.to_be_bytes());
            r.extend_from_slice(&up.1.to_be_bytes());
            r.push(fwd);
            r.extend_from_slice(&mpls);
            r.push(1);
            r.extend_from_slice(&asn.to_be_bytes());
            r
        };
        // Labels 16004 (03 E8 40) and 24001 with bottom of stack (05 DC 11), RFC 3032 §2.1.
        e.push_raw(TemplateId(256), &ipv4([192, 0, 2, 10], [198, 51, 100, 20], 3, 4, 10, 5, 1500, (1000, 61_000), 0x81, [0x03, 0xE8, 0x40, 0x05, 0xDC, 0x11], 64512))?;
        e.push_raw(TemplateId(256), &ipv4([192, 0, 2, 11], [203, 0, 113, 5], 4, 3, 11, 7, 900, (2000, 3000), 0x40, [0; 6], 64513))?;

        let v6 = |last: [u8; 8]| {
            let mut a = [0x20, 0x01, 0x0d, 0xb8, 0, 0, 0, 0, 0, 0, 0, 0, 0, 0, 0, 0];
            if let Some(tail) = a.get_mut(8..) {
                tail.copy_from_slice(&last);
            }
            a
        };
        let mut r = Vec::new();
        r.extend_from_slice(&v6([0, 0, 0, 0, 0, 0, 0, 1]));
        let mut dst = v6([0, 0, 0, 0, 0, 0, 0, 2]);
        if let Some(b) = dst.get_mut(7) {
            *b = 1;
        }
        r.extend_from_slice(&dst);
        r.extend_from_slice(&(EXPORT_TIME - 1).to_be_bytes());
        r.extend_from_slice(&1_764_633_599_000u64.to_be_bytes());
        r.extend_from_slice(&1_764_633_599_750u64.to_be_bytes());
        r.extend_from_slice(&0x83u32.to_be_bytes());
        r.extend_from_slice(&5u16.to_be_bytes());
        // basicList (RFC 6313 §4.5.1) in the 3-octet length form (§5.1):
        // semantic ordered (4), element 494 srhSegmentIPv6, length 16.
        r.extend_from_slice(&[0xff, 0, 5 + 32, 0x04, 0x01, 0xEE, 0x00, 0x10]);
        r.extend_from_slice(&v6([0, 0, 0, 0, 0, 0, 0, 0x0a]));
        r.extend_from_slice(&v6([0, 0, 0, 0, 0, 0, 0, 0x0b]));
        r.extend_from_slice(&[0xde, 0xad, 0xbe, 0xef]);
        r.extend_from_slice(&[0x00, 0x1B, 0x2C, 0x3D, 0x4E, 0xFA]);
        e.push_raw(TemplateId(257), &r)?;
        Ok(e.finish(EXPORT_TIME))
    }

    pub fn main() -> Result<(), Box<dyn Error>> {
        let out = std::env::args().nth(1).ok_or("usage: columnar_fixture OUT")?;
        let session = TransportSession::udp("192.0.2.1:50000".parse()?, "198.51.100.9:4739".parse()?);
        let messages = messages()?;

        // Pass 1: templates and options records.
        let mut plans = Vec::new();
        let mut enrichment = Enrichment::new();
        let mut decoder = Decoder::new(Config::default());
        for m in &messages {
            for event in decoder.decode(&session, None, m)? {
                match event {
                    Event::TemplateLearned { plan, .. } => plans.push(plan),
                    Event::Data(set) if set.plan().is_options() => {
                        enrichment.add_options_set(&set);
                    }
                    _ => {}
                }
            }
        }
        let flows = Arc::new(TableSchema::flows(plans.iter().map(|p| &**p)));
        let options = Arc::new(TableSchema::options(plans.iter().map(|p| &**p)));

        // Pass 2: every Data Set to its table.
        let mut fw = TableWriter::try_new(BufWriter::new(File::create(&out)?), flows, SinkOptions::default())?;
        let options_path = format!("{out}.options.parquet");
        let mut ow = TableWriter::try_new(BufWriter::new(File::create(&options_path)?), options, SinkOptions::default())?;
        let mut decoder = Decoder::new(Config::default());
        for m in &messages {
            for event in decoder.decode(&session, None, m)? {
                if let Event::Data(set) = event {
                    if set.plan().is_options() {
                        ow.append(&set, &enrichment)?;
                    } else {
                        fw.append(&set, &enrichment)?;
                    }
                }
            }
        }
        let (_, flows_summary, flows_stats) = fw.finish()?;
        let (_, options_summary, _) = ow.finish()?;
        let report = serde_json::json!({
            "flows": flows_summary,
            "options": options_summary,
            "stats": flows_stats,
            "enrichment": enrichment.stats(),
        });
        println!("{report}");
        Ok(())
    }
}

fn main() {
    #[cfg(feature = "columnar")]
    if let Err(e) = fixture::main() {
        eprintln!("columnar_fixture: {e}");
        std::process::exit(1);
    }
    #[cfg(not(feature = "columnar"))]
    {
        eprintln!("columnar_fixture: build with --features columnar");
        std::process::exit(2);
    }
}
