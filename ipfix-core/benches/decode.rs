//! Decode throughput against a byte-sum baseline over the same buffer.
//!
//! Two shapes: (a) a 20-field IPv4 template with forwardingStatus, MPLS label
//! stack sections and BGP fields; (b) an IPv6/SRv6 template with a basicList
//! of three segments. Each benchmark decodes every message of a capture-like
//! buffer and appends every typed value to column vectors (with the
//! `columnar` feature: to the Arrow builders the converter uses).
//!
//! Run: `cargo bench -p ipfix-core --features columnar --bench decode`.

use std::hint::black_box;
use std::time::Duration;

use criterion::{criterion_group, Criterion, Throughput};
use ipfix_core::{Config, Decoder, Event, TransportSession, Value};

/// A capture in memory: one template message, then data messages.
struct Workload {
    messages: Vec<Vec<u8>>,
    records: u64,
    bytes: u64,
}

fn header(len: usize, seq: u32, domain: u32) -> Vec<u8> {
    let mut h = Vec::with_capacity(len);
    h.extend_from_slice(&10u16.to_be_bytes());
    h.extend_from_slice(&(len as u16).to_be_bytes());
    h.extend_from_slice(&1_764_633_600u32.to_be_bytes());
    h.extend_from_slice(&seq.to_be_bytes());
    h.extend_from_slice(&domain.to_be_bytes());
    h
}

fn template_set(id: u16, fields: &[(u16, u16)]) -> Vec<u8> {
    let mut s = Vec::new();
    s.extend_from_slice(&2u16.to_be_bytes());
    s.extend_from_slice(&((8 + 4 * fields.len()) as u16).to_be_bytes());
    s.extend_from_slice(&id.to_be_bytes());
    s.extend_from_slice(&(fields.len() as u16).to_be_bytes());
    for (ie, len) in fields {
        s.extend_from_slice(&ie.to_be_bytes());
        s.extend_from_slice(&len.to_be_bytes());
    }
    s
}

fn build(template: Vec<u8>, id: u16, mut record: impl FnMut(u32, &mut Vec<u8>), records: u32) -> Workload {
    let mut messages = vec![];
    let mut body = template.clone();
    let first = header(16 + body.len(), 0, 1);
    messages.push([first, std::mem::take(&mut body)].concat());
    let mut seq = 0u32;
    let mut i = 0;
    let mut total = 0u64;
    while i < records {
        let mut set = vec![0, 0, 0, 0];
        let mut n = 0;
        let mut rec = Vec::new();
        loop {
            rec.clear();
            record(i, &mut rec);
            if 16 + set.len() + rec.len() > 1400 || i >= records {
                break;
            }
            set.extend_from_slice(&rec);
            i += 1;
            n += 1;
        }
        set[..2].copy_from_slice(&id.to_be_bytes());
        let set_len = set.len() as u16;
        set[2..4].copy_from_slice(&set_len.to_be_bytes());
        let msg = [header(16 + set.len(), seq, 1), set].concat();
        seq += n;
        total += n as u64;
        messages.push(msg);
    }
    let bytes = messages.iter().map(|m| m.len() as u64).sum();
    Workload { messages, records: total, bytes }
}

fn ipv4_workload() -> Workload {
    // 20 fields, 81 octets a record.
    let fields = [
        (8, 4), (12, 4), (7, 2), (11, 2), (4, 1), (5, 1), (10, 4), (14, 4), (15, 4), (18, 4),
        (16, 4), (17, 4), (128, 4), (2, 8), (1, 8), (152, 8), (153, 8), (89, 1), (70, 3), (71, 3),
    ];
    build(template_set(256, &fields), 256, |i, r| {
        r.extend_from_slice(&[198, 51, 100, (i % 250) as u8]);
        r.extend_from_slice(&[203, 0, 113, (i % 200) as u8]);
        r.extend_from_slice(&((i % 60000) as u16).to_be_bytes());
        r.extend_from_slice(&443u16.to_be_bytes());
        r.extend_from_slice(&[6, 0]);
        r.extend_from_slice(&(i % 48).to_be_bytes());
        r.extend_from_slice(&(i % 32).to_be_bytes());
        r.extend_from_slice(&[192, 0, 2, (i % 8) as u8]);
        r.extend_from_slice(&[192, 0, 2, 100 + (i % 4) as u8]);
        r.extend_from_slice(&64512u32.to_be_bytes());
        r.extend_from_slice(&(64600 + i % 10).to_be_bytes());
        r.extend_from_slice(&(65001 + i % 3).to_be_bytes());
        r.extend_from_slice(&u64::from(i % 1000 + 1).to_be_bytes());
        r.extend_from_slice(&u64::from(i % 1000 * 700 + 64).to_be_bytes());
        r.extend_from_slice(&(1_764_633_600_000u64 + u64::from(i)).to_be_bytes());
        r.extend_from_slice(&(1_764_633_601_000u64 + u64::from(i)).to_be_bytes());
        r.push(if i % 50 == 0 { 0x83 } else { 0x40 });
        r.extend_from_slice(&[0x03, 0xe8, 0x40]); // label 16004
        r.extend_from_slice(&[0x05, 0xdc, 0x11]); // label 24001, bottom of stack
    }, 400_000)
}

fn srv6_workload() -> Workload {
    let fields = [(27, 16), (28, 16), (2, 8), (1, 8), (153, 8), (89, 1), (495, 16), (502, 2), (234, 4), (496, 65535)];
    build(template_set(300, &fields), 300, |i, r| {
        let mut a = [0x20, 0x01, 0x0d, 0xb8, 0, 0, 0, 0, 0, 0, 0, 0, 0, 0, 0, 0];
        a[15] = (i % 250) as u8;
        r.extend_from_slice(&a);
        a[7] = 1;
        r.extend_from_slice(&a);
        r.extend_from_slice(&u64::from(i % 500 + 1).to_be_bytes());
        r.extend_from_slice(&u64::from(i % 500 * 900).to_be_bytes());
        r.extend_from_slice(&(1_764_633_601_000u64 + u64::from(i)).to_be_bytes());
        r.push(0x40);
        a[7] = 0xfe;
        r.extend_from_slice(&a);
        r.extend_from_slice(&19u16.to_be_bytes());
        r.extend_from_slice(&(i % 16).to_be_bytes());
        // basicList of 3 srhSegmentIPv6 (494), 3-octet length form (RFC 6313 §5.1).
        let list_len = 5 + 3 * 16;
        r.extend_from_slice(&[0xff, 0, list_len as u8, 0x04]);
        r.extend_from_slice(&494u16.to_be_bytes());
        r.extend_from_slice(&16u16.to_be_bytes());
        for s in 0..3u8 {
            a[7] = 0x10 + s;
            r.extend_from_slice(&a);
        }
    }, 200_000)
}

/// Column vectors standing in for Arrow builders when `columnar` is off.
#[derive(Default)]
struct Columns {
    ints: Vec<u64>,
    addrs4: Vec<u32>,
    addrs6: Vec<u128>,
    times: Vec<i64>,
    bytes: Vec<u8>,
    list_items: Vec<u128>,
}

impl Columns {
    fn with_capacity(records: usize) -> Self {
        Self {
            ints: Vec::with_capacity(records * 12),
            addrs4: Vec::with_capacity(records * 4),
            addrs6: Vec::with_capacity(records * 3),
            times: Vec::with_capacity(records * 2),
            bytes: Vec::with_capacity(records * 6),
            list_items: Vec::with_capacity(records * 3),
        }
    }
}

fn decode_into_columns(w: &Workload, cols: &mut Columns) -> u64 {
    let mut decoder = Decoder::new(Config::default());
    let session = TransportSession::udp("192.0.2.1:50000".parse().unwrap(), "198.51.100.1:4739".parse().unwrap());
    let mut n = 0u64;
    for m in &w.messages {
        for ev in decoder.decode(&session, Some(Duration::from_secs(1_764_633_600)), m).unwrap() {
            if let Event::Data(set) = ev {
                for rec in set.records() {
                    n += 1;
                    for f in rec.fields() {
                        match f.value {
                            Value::Unsigned(v) => cols.ints.push(v),
                            Value::Ipv4(a) => cols.addrs4.push(a.into()),
                            Value::Ipv6(a) => cols.addrs6.push(a.into()),
                            Value::DateTime(t) => cols.times.push(t.unix_millis()),
                            Value::Octets(b) => cols.bytes.extend_from_slice(b),
                            Value::BasicList(l) => {
                                for v in l.iter() {
                                    if let Value::Ipv6(a) = v {
                                        cols.list_items.push(a.into());
                                    }
                                }
                            }
                            _ => {}
                        }
                    }
                }
            }
        }
    }
    n
}

/// A second reference: a hand-written extraction of twelve fixed 4-octet
/// words from every record into plain vectors, knowing the layout in
/// advance (no template, no checks beyond slicing): what a decoder for one
/// fixed format could do at best.
fn hand_extract(w: &Workload, record_len: usize, cols: &mut [Vec<u32>; 12]) -> usize {
    let mut n = 0;
    for m in w.messages.iter().skip(1) {
        // Message header (16) and Set Header (4); records to the set's end.
        let set_len = m.get(18..20).map_or(0, |b| usize::from(u16::from_be_bytes([b[0], b[1]])));
        let body = m.get(20..16 + set_len).unwrap_or_default();
        for r in body.chunks_exact(record_len) {
            for (k, col) in cols.iter_mut().enumerate() {
                if let Some(b) = r.get(4 * k..4 * k + 4) {
                    col.push(u32::from_be_bytes([b[0], b[1], b[2], b[3]]));
                }
            }
            n += 1;
        }
    }
    n
}

fn byte_sum(w: &Workload) -> u64 {
    w.messages.iter().map(|m| m.iter().map(|b| u64::from(*b)).sum::<u64>()).sum()
}

fn bench(c: &mut Criterion) {
    for (name, w) in [("ipv4-20-fields", ipv4_workload()), ("srv6-basiclist", srv6_workload())] {
        let mut g = c.benchmark_group(format!("decode/{name}"));
        g.throughput(Throughput::Bytes(w.bytes));
        g.sample_size(20);
        g.measurement_time(Duration::from_secs(8));
        g.bench_function("byte-sum-baseline", |b| b.iter(|| black_box(byte_sum(black_box(&w)))));
        // Records are fixed-length in the IPv4 shape; in the SRv6 shape the
        // list has one length throughout, so the stride is fixed too.
        let record_len = if name.starts_with("ipv4") { 81 } else { 135 };
        g.bench_function("hand-extract-12-words", |b| {
            b.iter(|| {
                let mut cols: [Vec<u32>; 12] = std::array::from_fn(|_| Vec::with_capacity(w.records as usize));
                let n = hand_extract(black_box(&w), record_len, &mut cols);
                assert_eq!(n as u64, w.records);
                black_box(cols[11].len())
            })
        });
        g.bench_function("decode-to-columns", |b| {
            b.iter(|| {
                let mut cols = Columns::with_capacity(w.records as usize);
                let n = decode_into_columns(black_box(&w), &mut cols);
                assert_eq!(n, w.records);
                black_box(cols.ints.len())
            })
        });
        #[cfg(feature = "columnar")]
        columnar::bench_arrow(&mut g, &w);
        g.finish();
        eprintln!("{name}: {} records, {} bytes, {} messages", w.records, w.bytes, w.messages.len());
    }
}

#[cfg(feature = "columnar")]
mod columnar {
    //! The same messages decoded and appended to the Arrow builders of the
    //! Parquet writer (`ipfix_core::columnar::TableBuilder`), the way
    //! `flowsift convert` does it, one batch per `DEFAULT_BATCH_ROWS` rows;
    //! and the same in the native layout (values as typed on the wire,
    //! no text, no derived columns), as an embedder would take them.
    use std::hint::black_box;
    use std::sync::Arc;
    use std::time::Duration;

    use criterion::measurement::WallTime;
    use criterion::BenchmarkGroup;
    use ipfix_core::columnar::{Enrichment, Layout, TableBuilder, TableKind, TableSchema, DEFAULT_BATCH_ROWS};
    use ipfix_core::{Config, Decoder, Event, TransportSession};

    pub fn bench_arrow(g: &mut BenchmarkGroup<'_, WallTime>, w: &super::Workload) {
        let session = TransportSession::udp("192.0.2.1:50000".parse().unwrap(), "198.51.100.1:4739".parse().unwrap());
        let now = Some(Duration::from_secs(1_764_633_600));
        let mut plans = Vec::new();
        let mut d = Decoder::new(Config::default());
        for ev in d.decode(&session, now, &w.messages[0]).unwrap() {
            if let Event::TemplateLearned { plan, .. } = ev {
                plans.push(plan);
            }
        }
        let enrichment = Enrichment::new();
        for (bench, layout) in [("decode-to-arrow-builders", Layout::Readable), ("decode-to-arrow-native", Layout::Native)] {
            let schema = Arc::new(TableSchema::with_layout(TableKind::Flows, plans.iter().map(|p| &**p), layout));
            bench_one(g, w, bench, &schema, &enrichment);
        }
    }

    fn bench_one(
        g: &mut BenchmarkGroup<'_, WallTime>,
        w: &super::Workload,
        bench: &str,
        schema: &Arc<TableSchema>,
        enrichment: &Enrichment,
    ) {
        let session = TransportSession::udp("192.0.2.1:50000".parse().unwrap(), "198.51.100.1:4739".parse().unwrap());
        let now = Some(Duration::from_secs(1_764_633_600));
        g.bench_function(bench, |b| {
            b.iter(|| {
                let mut decoder = Decoder::new(Config::default());
                let mut builder = TableBuilder::new(schema.clone(), DEFAULT_BATCH_ROWS);
                let mut rows = 0usize;
                for m in &w.messages {
                    for ev in decoder.decode(&session, now, m).unwrap() {
                        if let Event::Data(set) = ev {
                            rows += builder.append(&set, enrichment);
                            if builder.len() >= DEFAULT_BATCH_ROWS {
                                black_box(builder.finish().unwrap());
                            }
                        }
                    }
                }
                black_box(builder.finish().unwrap());
                assert_eq!(rows as u64, w.records);
            })
        });
    }
}

criterion_group!(benches, bench);

fn main() {
    // Without it, whether each batch's freed buffers came back as faulting
    // fresh pages depended on what ran before in the process, and doubled
    // decode times in some runs (see `settle_allocator`).
    ipfix_core::settle_allocator();
    benches();
    Criterion::default().configure_from_args().final_summary();
}
