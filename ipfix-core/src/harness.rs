//! Invariant checks shared by the fuzz targets (`fuzz/`) and the corpus
//! replay test (`tests/fuzz_corpus.rs`). Not part of the stable API.

use std::time::Duration;

use crate::plan::Plan;
use crate::session::{Config, Decoder, Event};
use crate::template::{parse_template_set, TemplateRecord};
use crate::transport::{Transport, TransportSession};

/// The transport fuzz byte 0 picks, and the messages that follow it as
/// `[len_hi, len_lo, bytes...]` chunks.
fn session_and_messages(data: &[u8]) -> Option<(u8, TransportSession, Vec<&[u8]>)> {
    let (&mode, mut rest) = data.split_first()?;
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
    let mut messages = Vec::new();
    while let Some((len_bytes, tail)) = rest.split_first_chunk::<2>() {
        let len = usize::from(u16::from_be_bytes(*len_bytes)).min(tail.len());
        let (msg, next) = tail.split_at(len);
        messages.push(msg);
        rest = next;
    }
    Some((mode, session, messages))
}

/// The decoder configuration the harnesses use (`mode` bit 2: no buffering
/// of sets whose template is unknown).
fn config(mode: u8) -> Config {
    Config::default()
        .with_max_pending_bytes(if mode & 4 != 0 { 0 } else { 4096 })
        .with_max_templates_per_session(64)
        .with_max_list_depth(4)
}

/// Feeds fuzz input (laid out as for [`decode_session`]) through a decoder
/// and on to the column builders of both layouts, as `flowsift convert`
/// does: a first pass learns the plans and the options, a second appends
/// every Data Set of each kind to its table, finishing small batches.
///
/// Invariants: no panic; every decoded record becomes exactly one row;
/// every batch finishes into a record batch Arrow accepts (so its columns
/// hold one value per row).
#[cfg(feature = "columnar")]
pub fn decode_to_columns(data: &[u8]) {
    use std::sync::Arc;

    use crate::columnar::{Enrichment, Layout, TableBuilder, TableKind, TableSchema};

    let Some((mode, session, messages)) = session_and_messages(data) else { return };
    let clock = |i: usize| Some(Duration::from_secs(1_700_000_000 + 7 * i as u64));
    let mut plans = Vec::new();
    let mut enrichment = Enrichment::new();
    let mut decoder = Decoder::new(config(mode));
    for (i, msg) in messages.iter().enumerate() {
        let Ok(events) = decoder.decode(&session, clock(i), msg) else { continue };
        for event in events {
            match event {
                Event::TemplateLearned { plan, .. } => plans.push(plan),
                Event::Data(set) if set.plan().is_options() => {
                    enrichment.add_options_set(&set);
                }
                _ => {}
            }
        }
    }
    for layout in [Layout::Readable, Layout::Native] {
        let schema = |kind| Arc::new(TableSchema::with_layout(kind, plans.iter().map(|p| &**p), layout));
        let mut tables = [TableBuilder::new(schema(TableKind::Flows), 8), TableBuilder::new(schema(TableKind::Options), 8)];
        let mut decoder = Decoder::new(config(mode));
        let (mut records, mut rows) = (0usize, 0usize);
        for (i, msg) in messages.iter().enumerate() {
            let Ok(events) = decoder.decode(&session, clock(i), msg) else { continue };
            for event in events {
                let Event::Data(set) = event else { continue };
                records += set.len();
                for table in &mut tables {
                    rows += table.append(&set, &enrichment);
                    // A batch whose columns differ in length does not finish.
                    if table.len() >= 8 {
                        assert!(table.finish().is_ok(), "a batch finishes");
                    }
                }
            }
        }
        for table in &mut tables {
            assert!(table.finish().is_ok(), "a batch finishes");
        }
        assert_eq!(rows, records, "every record becomes one row");
    }
}

/// Splits fuzz input into messages and feeds them to one decoder, checking
/// invariants. Layout: byte 0 picks the transport; then repeated
/// `[len_hi, len_lo, bytes...]` chunks, each handed over as one message.
///
/// Invariants: no panic; every accepted message's Data Sets yield exactly
/// the record count they announce, each record yields one value per plan
/// field, and the decoder's record counter grows by exactly that many; a
/// rejected message changes no counter but `messagesMalformed`.
pub fn decode_session(data: &[u8]) {
    let Some((mode, session, messages)) = session_and_messages(data) else { return };
    let mut decoder = Decoder::new(config(mode));
    let mut now = 1_700_000_000u64;
    for msg in messages {
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
