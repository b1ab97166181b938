//! `flowsift convert` and `inspect` through the library, on captures built
//! by an independent writer: frames from etherparse's `PacketBuilder` in a
//! classic pcap container written here (file and record header layouts:
//! draft-ietf-opsawg-pcap §4-5, from memory, unconfirmed; every file is
//! also read by the capture module's pcap-parser-based reader), IPFIX
//! payloads from the workspace `MessageEncoder`.
//!
//! Values are read back by pyarrow and DuckDB in `tests/py/test_convert.py`;
//! here the checks are the accounting (RFC 7011 rules named per test) and
//! the row counts of the files written.
#![allow(clippy::indexing_slicing)]

use std::net::Ipv4Addr;
use std::path::{Path, PathBuf};

use flowsift::pipeline::{self, ConvertSettings, Inputs, Progress, Runner, StrictViolation};
use ipfix_core::columnar::SinkOptions;
use ipfix_core::{FieldSpecifier, MessageEncoder, ObservationDomainId, OwnedValue, Template, TemplateId};

const T0: u32 = 1_796_000_400; // 2026-11-30T01:00:00Z

/// Classic pcap, little endian, microseconds, Ethernet (link type 1).
struct Pcap(Vec<u8>);

impl Pcap {
    fn new() -> Self {
        let mut v = Vec::new();
        v.extend(0xa1b2_c3d4u32.to_le_bytes());
        v.extend(2u16.to_le_bytes());
        v.extend(4u16.to_le_bytes());
        for x in [0u32, 0, 65535, 1] {
            v.extend(x.to_le_bytes());
        }
        Self(v)
    }

    fn packet(&mut self, secs: u32, frame: &[u8]) {
        let len = frame.len() as u32;
        for x in [secs, 0, len, len] {
            self.0.extend(x.to_le_bytes());
        }
        self.0.extend_from_slice(frame);
    }
}

fn udp_frame(payload: &[u8]) -> Vec<u8> {
    let mut frame = Vec::new();
    etherparse::PacketBuilder::ethernet2([0, 0, 0x5e, 0, 0x53, 1], [0, 0, 0x5e, 0, 0x53, 2])
        .ipv4([192, 0, 2, 1], [198, 51, 100, 9], 64)
        .udp(50000, 4739)
        .write(&mut frame, payload)
        .expect("frame");
    frame
}

fn template() -> Template {
    Template {
        id: TemplateId(256),
        scope_field_count: 0,
        fields: vec![FieldSpecifier::iana(8, 4), FieldSpecifier::iana(2, 8), FieldSpecifier::iana(82, 65535)],
    }
}

/// `messages` messages of `per` records each from domain 7, templates in the first.
fn messages(count: usize, per: usize) -> Vec<Vec<u8>> {
    let mut enc = MessageEncoder::new(ObservationDomainId(7));
    let mut out = Vec::new();
    let mut k = 0u64;
    for m in 0..count {
        if m == 0 {
            enc.add_template(template()).expect("template");
        }
        for _ in 0..per {
            let values = [
                OwnedValue::Ipv4(Ipv4Addr::new(192, 0, 2, (k % 200) as u8 + 1)),
                OwnedValue::Unsigned(100 + k),
                OwnedValue::String(format!("if-{}", k % 3)),
            ];
            enc.push_record(TemplateId(256), &values).expect("record");
            k += 1;
        }
        out.extend(enc.finish(T0 + m as u32));
    }
    out
}

fn write_pcap(dir: &Path, name: &str, msgs: &[Vec<u8>]) -> PathBuf {
    let mut pcap = Pcap::new();
    for (i, m) in msgs.iter().enumerate() {
        pcap.packet(T0 + i as u32, &udp_frame(m));
    }
    let path = dir.join(name);
    std::fs::write(&path, pcap.0).expect("write");
    path
}

fn run_convert(dir: &Path, inputs: &[&Path], strict: bool) -> anyhow::Result<pipeline::ConvertOutcome> {
    let raw: Vec<String> = inputs.iter().map(|p| p.display().to_string()).collect();
    let inputs = Inputs::open(&raw)?;
    let flows = dir.join("out.parquet");
    let settings = ConvertSettings {
        options: pipeline::options_path_for(&flows),
        flows,
        sink: SinkOptions::default().with_row_group_rows(64),
        runner: Runner { strict, ..Runner::default() },
    };
    pipeline::convert(&inputs, &settings, &Progress::hidden())
}

#[test]
fn udp_capture_every_record_written() {
    let dir = tempfile::tempdir().expect("tempdir");
    let cap = write_pcap(dir.path(), "a.pcap", &messages(10, 25));
    let o = run_convert(dir.path(), &[&cap], false).expect("convert");
    let a = &o.accounting;
    assert_eq!(a.records_decoded, 250);
    assert_eq!(o.flows.rows, 250);
    assert_eq!(o.flows.row_groups, 4); // 64-row groups: 64+64+64+58
    assert_eq!(o.options.rows, 0);
    assert_eq!((a.records_skipped, a.sequence_gap_records, a.messages_malformed), (0, 0, 0));
    assert_eq!(a.messages, 10);
    let e = &a.exporters[0];
    assert_eq!(e.session.transport, "udp");
    assert_eq!(e.session.exporter.as_deref(), Some("192.0.2.1:50000"));
    assert_eq!(e.domains[0].records_by_template.get(&256), Some(&250));
    assert!(dir.path().join("out.options.parquet").exists());
}

#[test]
fn malformed_message_and_gap_are_told_apart() {
    // RFC 7011 §9.1: a malformed message is discarded whole; the records
    // of its neighbours are kept. §3.1 (errata 4396): the next Sequence
    // Number tells how many records it held.
    let dir = tempfile::tempdir().expect("tempdir");
    let mut msgs = messages(8, 10);
    let bad = msgs.get_mut(2).expect("message 2");
    // The Data Set Length (after the 16-octet header) now overruns.
    bad.splice(18..20, 4000u16.to_be_bytes());
    msgs.remove(5); // lost before the capture
    let cap = write_pcap(dir.path(), "b.pcap", &msgs);
    let o = run_convert(dir.path(), &[&cap], false).expect("convert");
    let a = &o.accounting;
    assert_eq!(a.records_decoded, 60);
    assert_eq!(o.flows.rows, 60);
    assert_eq!(a.messages_malformed, 1);
    assert_eq!(a.records_skipped, 10);
    assert_eq!(a.records_skipped_by_reason.get("malformed-message"), Some(&10));
    assert_eq!(a.sequence_gap_records, 10);

    let err = run_convert(dir.path(), &[&cap], true).expect_err("strict");
    let v = err.downcast_ref::<StrictViolation>().expect("a strict violation");
    assert!(v.to_string().contains("IPFIX message #3"), "{v}");
}

#[test]
fn each_ipfix_file_is_its_own_session() {
    // RFC 5655 §7.1: templates do not carry from one file to the next, so
    // the second file's sets never find their template and are counted.
    let dir = tempfile::tempdir().expect("tempdir");
    let msgs = messages(4, 5);
    let (first, second) = msgs.split_at(2);
    let a_path = dir.path().join("a.ipfix");
    let b_path = dir.path().join("b.ipfix");
    std::fs::write(&a_path, first.concat()).expect("write");
    std::fs::write(&b_path, second.concat()).expect("write");
    let o = run_convert(dir.path(), &[&a_path, &b_path], false).expect("convert");
    let a = &o.accounting;
    assert_eq!(a.records_decoded, 10);
    assert_eq!(a.sets_skipped_by_reason.get("template-never-arrived"), Some(&2));
    assert_eq!(a.exporters.len(), 2);
    assert!(a.exporters.iter().all(|e| e.session.transport == "file"));
    // A split pcap keeps its UDP templates across files.
    let p1 = write_pcap(dir.path(), "p1.pcap", first);
    let p2 = write_pcap(dir.path(), "p2.pcap", second);
    let o = run_convert(dir.path(), &[&p1, &p2], false).expect("convert");
    assert_eq!(o.accounting.records_decoded, 20);
    assert_eq!(o.accounting.sets_skipped, 0);
}

#[test]
fn inputs_are_checked_before_any_work() {
    let dir = tempfile::tempdir().expect("tempdir");
    let text = dir.path().join("readme.txt");
    std::fs::write(&text, "hello, this is text").expect("write");
    let err = Inputs::open(&[text.display().to_string()]).expect_err("text").to_string();
    assert!(err.contains("readme.txt") && err.contains("looks like text"), "{err}");
    let missing = dir.path().join("nope.pcap");
    let err = format!("{:#}", Inputs::open(&[missing.display().to_string()]).expect_err("missing"));
    assert!(err.contains("nope.pcap"), "{err}");
    let err = Inputs::open(&[dir.path().display().to_string()]).expect_err("dir").to_string();
    assert!(err.contains("is a directory"), "{err}");
}

#[test]
fn truncated_capture_keeps_what_came_before() {
    let dir = tempfile::tempdir().expect("tempdir");
    let cap = write_pcap(dir.path(), "t.pcap", &messages(6, 10));
    let bytes = std::fs::read(&cap).expect("read");
    std::fs::write(&cap, bytes.get(..bytes.len() - 30).expect("cut")).expect("write");
    let o = run_convert(dir.path(), &[&cap], false).expect("convert");
    assert_eq!(o.accounting.records_decoded, 50);
    let stopped = o.accounting.inputs[0].stopped_early.as_ref().expect("stopped early");
    assert!(stopped.offset.is_some());
    assert!(o.accounting.warnings.iter().any(|w| w.contains("truncated")));
    assert!(run_convert(dir.path(), &[&cap], true).expect_err("strict").downcast_ref::<StrictViolation>().is_some());
}

#[test]
fn stats_document_has_the_promised_keys() {
    let dir = tempfile::tempdir().expect("tempdir");
    let cap = write_pcap(dir.path(), "s.pcap", &messages(2, 3));
    let o = run_convert(dir.path(), &[&cap], false).expect("convert");
    let v = serde_json::to_value(flowsift::convert::stats_document(&o)).expect("json");
    for key in [
        "recordsDecoded",
        "recordsSkipped",
        "recordsSkippedByReason",
        "sequenceGapRecords",
        "messages",
        "messagesMalformed",
        "malformedByReason",
        "templates",
        "bytes",
        "capture",
        "exporters",
        "recordsWritten",
        "output",
    ] {
        assert!(v.get(key).is_some(), "missing {key}");
    }
    assert_eq!(v["recordsWritten"], 6);
    assert_eq!(v["exporters"][0]["domains"][0]["observationDomainId"], 7);
}
