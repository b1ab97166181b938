//! Invariant checks shared by the fuzz targets (`fuzz/`) and the corpus
//! replay test (`tests/fuzz_corpus.rs`). Not part of the stable API.

use std::time::Duration;

use crate::plan::Plan;
use crate::session::{Config, Decoder, Event};
use crate::template::{parse_template_set, TemplateRecord};
use crate::transport::{Transport, TransportSession};

/// Splits fuzz input into messages and feeds them to one decoder, checking
/// invariants. Layout: byte 0 picks the transport; then repeated
/// `[len_hi, len_lo, bytes...]` chunks, each handed over as one message.
///
/// Invariants: no panic; every accepted message's Data Sets yield exactly
/// the record count they announce, each record yields one value per plan
/// field, and the decoder's record counter grows by exactly that many; a
/// rejected message changes no counter but `messagesMalformed`.
pub fn decode_session(data: &[u8]) {
    let Some((&mode, mut rest)) = data.split_first() else { return };
    let transport = match mode % 4 {
        0 => Transport::Udp,
        1 => Transport::Tcp,
        2 => Transport::Sctp,
        _ => Transport::File,
    };
    let session = TransportSession {
        exporter: Some(std::net::SocketAddr::from(([192, 0, 2, 1], 4739))),
        collector: None,
        transport,
        instance: 0,
    };
    let config = Config::default()
        .with_max_pending_bytes(if mode & 4 != 0 { 0 } else { 4096 })
        .with_max_templates_per_session(64)
        .with_max_list_depth(4);
    let mut decoder = Decoder::new(config);
    let mut now = 1_700_000_000u64;
    while let Some((len_bytes, tail)) = rest.split_first_chunk::<2>() {
        let len = usize::from(u16::from_be_bytes(*len_bytes)).min(tail.len());
        let (msg, next) = tail.split_at(len);
        rest = next;
        now += 7;
        let before = decoder.stats().clone();
        match decoder.decode(&session, Some(Duration::from_secs(now)), msg) {
            Ok(events) => {
                let mut records = 0u64;
                for event in events {
                    if let Event::Data(set) = event {
                        let mut n = 0;
                        for record in set.records() {
                            let fields = record.fields().count();
                            assert_eq!(fields, record.plan().fields().len(), "every field decodes");
                            for f in record.fields() {
                                let _ = f.value.to_owned_value();
                            }
                            n += 1;
                        }
                        assert_eq!(n, set.len(), "record count matches the set");
                        records += n as u64;
                    }
                }
                assert_eq!(decoder.stats().records_decoded - before.records_decoded, records, "counters match events");
            }
            Err(_) => {
                let after = decoder.stats();
                assert_eq!(after.records_decoded, before.records_decoded, "rejected message decodes nothing");
                assert_eq!(after.templates_learned, before.templates_learned, "rejected message learns nothing");
                assert_eq!(after.messages_malformed, before.messages_malformed + 1);
            }
        }
    }
    decoder.flush_pending();
}

/// Parses fuzz input as a Template Set body (byte 0 bit 0: options) and
/// compiles every definition, checking plan invariants: fixed offsets are
/// consecutive, the record length is the sum of fixed lengths, the minimum
/// record length is positive.
pub fn template_compile(data: &[u8]) {
    let Some((&mode, body)) = data.split_first() else { return };
    let Ok(records) = parse_template_set(body, 20, mode & 1 == 1) else { return };
    for rec in records {
        let TemplateRecord::Define(t) = rec.record else { continue };
        let n = t.fields.len();
        let Ok(plan) = Plan::compile(t) else { continue };
        assert_eq!(plan.fields().len(), n);
        assert!(plan.min_len() > 0);
        let mut expect = Some(0usize);
        for f in plan.fields() {
            assert_eq!(f.offset, expect, "fixed offsets are consecutive");
            expect = if f.is_variable() { None } else { expect.map(|o| o + usize::from(f.spec.length)) };
        }
        assert_eq!(plan.fixed_len(), expect);
    }
}
