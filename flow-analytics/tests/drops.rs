//! Drop queries over Parquet fixtures written with polars.
//!
//! Expected figures are worked out by hand beside each check from the
//! measure definitions in the crate docs; the interval checks follow the
//! Horvitz–Thompson estimator (Horvitz & Thompson 1952) under independent
//! 1-in-N selection (RFC 5475 §5.2.2.1). The same figures are cross-checked
//! against DuckDB SQL in `tests/py/test_drops_duckdb.py`.

#![allow(clippy::unwrap_used, clippy::indexing_slicing)]

use std::path::{Path, PathBuf};
use std::time::Duration;

use flow_analytics::{
    parse_time, render, Dimension, DropQuery, DropTable, Error, SamplingCoverage, SortKey,
};
use polars::prelude::*;

const T0: i64 = 1_796_000_400; // 2026-11-30T01:00:00Z

fn utc_ns() -> DataType {
    DataType::Datetime(TimeUnit::Nanoseconds, Some(TimeZone::UTC))
}

fn u64s(name: &str, values: &[Option<u64>]) -> Column {
    Column::new(name.into(), values)
}

fn u32s(name: &str, values: &[Option<u32>]) -> Column {
    Column::new(name.into(), values)
}

fn strs(name: &str, values: &[Option<&str>]) -> Column {
    Column::new(name.into(), values)
}

/// Timestamps in seconds after T0, stored as ns UTC.
fn times(name: &str, offsets: &[Option<i64>]) -> Column {
    let ns: Vec<Option<i64>> = offsets
        .iter()
        .map(|o| o.map(|s| (T0 + s) * 1_000_000_000))
        .collect();
    Column::new(name.into(), ns).cast(&utc_ns()).unwrap()
}

fn u32_lists(name: &str, values: &[Option<&[u32]>]) -> Column {
    let lists: ListChunked = values
        .iter()
        .map(|v| v.map(|v| Series::new(PlSmallStr::EMPTY, v)))
        .collect();
    lists.into_series().with_name(name.into()).into_column()
}

fn str_lists(name: &str, values: &[Option<&[&str]>]) -> Column {
    let lists: ListChunked = values
        .iter()
        .map(|v| v.map(|v| Series::new(PlSmallStr::EMPTY, v)))
        .collect();
    lists.into_series().with_name(name.into()).into_column()
}

fn write(path: &Path, columns: Vec<Column>) -> PathBuf {
    if let Some(parent) = path.parent() {
        std::fs::create_dir_all(parent).unwrap();
    }
    let mut df = DataFrame::new_infer_height(columns).unwrap();
    ParquetWriter::new(std::fs::File::create(path).unwrap())
        .finish(&mut df)
        .unwrap();
    path.to_path_buf()
}

/// Rows of a result as (dimension text, droppedPackets, totalPackets).
fn rows(table: &DropTable, key: &str) -> Vec<(Option<String>, u64, u64)> {
    let df = table.frame();
    let keys = df.column(key).unwrap().cast(&DataType::String).unwrap();
    let dropped = df.column("droppedPackets").unwrap().u64().unwrap().clone();
    let total = df.column("totalPackets").unwrap().u64().unwrap().clone();
    (0..df.height())
        .map(|i| {
            (
                keys.str().unwrap().get(i).map(str::to_string),
                dropped.get(i).unwrap(),
                total.get(i).unwrap(),
            )
        })
        .collect()
}

fn f64_col(table: &DropTable, name: &str) -> Vec<Option<f64>> {
    let ca = table.frame().column(name).unwrap().f64().unwrap().clone();
    (0..ca.len()).map(|i| ca.get(i)).collect()
}

/// Six records over two next hops (one IPv6) and two reasons, unsampled.
fn basic(dir: &Path) -> PathBuf {
    write(
        &dir.join("basic.parquet"),
        vec![
            strs(
                "ipNextHopIPv4Address",
                &[Some("192.0.2.1"), Some("192.0.2.1"), Some("192.0.2.1"), None, None, Some("198.51.100.9")],
            ),
            strs(
                "ipNextHopIPv6Address",
                &[None, None, None, Some("2001:db8::1"), Some("2001:db8::1"), None],
            ),
            u64s("packetDeltaCount", &[Some(100), Some(40), Some(10), Some(7), Some(1000), Some(50)]),
            u64s("octetDeltaCount", &[Some(10_000), Some(4_000), Some(1_000), Some(700), Some(100_000), Some(5_000)]),
            u64s("droppedPacketDeltaCount", &[None, None, Some(3), None, Some(20), None]),
            strs(
                "forwardingOutcome",
                &[Some("forwarded"), Some("dropped"), Some("forwarded"), Some("dropped"), Some("forwarded"), Some("dropped")],
            ),
            strs(
                "forwardingReason",
                &[None, Some("acl-deny"), Some("policer"), Some("unroutable"), Some("policer"), Some("acl-deny")],
            ),
            times("flowEndTime", &[Some(10), Some(70), Some(130), Some(200), Some(250), Some(310)]),
        ],
    )
}

#[test]
fn by_reason_unsampled() {
    let dir = tempfile::tempdir().unwrap();
    let file = basic(dir.path());
    let table = DropQuery::new([&file]).run().unwrap();
    // Per record dropped: 0, 40 (outcome dropped), 3 (delta), 7, 20, 50.
    // acl-deny 40+50=90 of 90; policer 3+20=23 of 1010; unroutable 7 of 7;
    // null reason 0 of 100.
    assert_eq!(
        rows(&table, "forwardingReason"),
        vec![
            (Some("acl-deny".into()), 90, 90),
            (Some("policer".into()), 23, 1010),
            (Some("unroutable".into()), 7, 7),
            (None, 0, 100),
        ]
    );
    let s = table.summary();
    assert_eq!((s.dropped_packets, s.total_packets, s.flow_records), (120, 1207, 6));
    assert_eq!(s.sampling, SamplingCoverage::Absent);
    assert!(!s.scaled);
    assert_eq!(s.first.map(|t| t.timestamp()), Some(T0 + 10));
    assert_eq!(s.last.map(|t| t.timestamp()), Some(T0 + 310));
    // Without sampling the interval collapses to the count.
    assert_eq!(f64_col(&table, "droppedPacketsLow")[0], Some(90.0));
    assert_eq!(f64_col(&table, "droppedPacketsHigh")[0], Some(90.0));
    // Octets: acl-deny 4000 + 5000.
    let octets = table.frame().column("droppedOctets").unwrap().u64().unwrap().get(0);
    assert_eq!(octets, Some(9_000));
    assert!(table.frame().column("topReason").is_err());
}

#[test]
fn by_next_hop_coalesces_families_and_names_top_reason() {
    let dir = tempfile::tempdir().unwrap();
    let file = basic(dir.path());
    let table = DropQuery::new([&file])
        .with_by([Dimension::NextHop])
        .run()
        .unwrap();
    // 198.51.100.9: 50 dropped; 192.0.2.1: 40+3=43 of 150; 2001:db8::1: 27 of 1007.
    assert_eq!(
        rows(&table, "nextHop"),
        vec![
            (Some("198.51.100.9".into()), 50, 50),
            (Some("192.0.2.1".into()), 43, 150),
            (Some("2001:db8::1".into()), 27, 1007),
        ]
    );
    let reasons_ca = table.frame().column("topReason").unwrap().str().unwrap().clone();
    let reasons: Vec<Option<&str>> = (0..reasons_ca.len()).map(|i| reasons_ca.get(i)).collect();
    // 2001:db8::1: policer 20 beats unroutable 7.
    assert_eq!(reasons, vec![Some("acl-deny"), Some("acl-deny"), Some("policer")]);
    let top = table.summary().top.clone().unwrap();
    assert_eq!(top.dimensions, vec![("next hop".to_string(), "198.51.100.9".to_string())]);
    assert_eq!(top.reason.as_deref(), Some("acl-deny"));
    let headline = render::headline(&table);
    assert!(headline.contains("9.94% of 1,207 packets dropped"), "{headline}");
    assert!(headline.contains("top: next hop 198.51.100.9, mostly acl-deny"), "{headline}");
    assert!(headline.contains("2026-11-30T01:00:10Z to 2026-11-30T01:05:10Z"), "{headline}");
}

#[test]
fn sorting_and_top() {
    let dir = tempfile::tempdir().unwrap();
    let file = basic(dir.path());
    let table = DropQuery::new([&file])
        .with_by([Dimension::NextHop])
        .with_sort(SortKey::TotalPackets)
        .with_top(2)
        .run()
        .unwrap();
    let keys: Vec<_> = rows(&table, "nextHop").into_iter().map(|r| r.0.unwrap()).collect();
    assert_eq!(keys, vec!["2001:db8::1", "192.0.2.1"]);
    // Totals cover all records, not only the rows kept.
    assert_eq!(table.summary().total_packets, 1207);
    assert_eq!(table.group_count(), 3);
    let mut text = Vec::new();
    render::write_table(&table, &mut text).unwrap();
    let text = String::from_utf8(text).unwrap();
    assert!(text.ends_with("(showing 2 of 3 rows)\n"), "{text}");

    let by_ratio = DropQuery::new([&file])
        .with_by([Dimension::NextHop])
        .with_sort(SortKey::DropRatio)
        .run()
        .unwrap();
    let ratios = f64_col(&by_ratio, "dropRatio");
    assert_eq!(ratios[0], Some(1.0));
    assert!(ratios.windows(2).all(|w| w[0] >= w[1]));
}

/// Sampled records: (N, sampled packets, sampled dropped).
fn sampled(dir: &Path, name: &str, rates: &[Option<u32>]) -> PathBuf {
    let n = rates.len();
    let packets: Vec<Option<u64>> = (0..n).map(|i| Some(10 + i as u64)).collect();
    let dropped: Vec<Option<u64>> = (0..n).map(|i| Some(i as u64 % 3)).collect();
    let reasons: Vec<Option<&str>> = (0..n).map(|i| Some(if i % 2 == 0 { "wred" } else { "policer" })).collect();
    write(
        &dir.join(name),
        vec![
            u64s("packetDeltaCount", &packets),
            u64s("droppedPacketDeltaCount", &dropped),
            strs("forwardingOutcome", &vec![Some("forwarded"); n]),
            strs("forwardingReason", &reasons),
            u32s("samplingRate", rates),
            times("flowEndTime", &(0..n).map(|i| Some(i as i64 * 30)).collect::<Vec<_>>()),
        ],
    )
}

#[test]
fn sampling_scales_counts_and_gives_interval() {
    let dir = tempfile::tempdir().unwrap();
    // Records i = 0..4: packets 10+i, dropped i%3 = 0,1,2,0; N = 100, 100, 1000, 1.
    let file = sampled(dir.path(), "s.parquet", &[Some(100), Some(100), Some(1000), Some(1)]);
    let table = DropQuery::new([&file]).with_by([]).run().unwrap();
    let s = table.summary();
    // dropped = 0·100 + 1·100 + 2·1000 + 0·1 = 2100
    assert_eq!(s.dropped_packets, 2100);
    // total = 10·100 + 11·100 + 12·1000 + 13·1 = 14113
    assert_eq!(s.total_packets, 14_113);
    assert_eq!(s.sampling, SamplingCoverage::Complete);
    assert!(s.scaled);
    // var = Σ N(N−1)k = 100·99·1 + 1000·999·2 = 9_900 + 1_998_000 = 2_007_900
    let half = 1.96 * 2_007_900f64.sqrt();
    let low = s.dropped_packets_low.unwrap();
    let high = s.dropped_packets_high.unwrap();
    assert!((high - (2100.0 + half)).abs() < 1e-6, "{high}");
    // 2100 − 2777.3 < 3 sampled drops: clipped at the sampled count 3.
    assert_eq!(low, 3.0);
    // One row of totals when grouping by nothing.
    assert_eq!(table.frame().height(), 1);
}

#[test]
fn sampling_partial_and_mixed_files() {
    let dir = tempfile::tempdir().unwrap();
    let a = sampled(dir.path(), "a.parquet", &[Some(10), None, Some(10)]);
    // A second file without any samplingRate column at all.
    let b = write(
        &dir.path().join("b.parquet"),
        vec![
            u64s("packetDeltaCount", &[Some(5)]),
            strs("forwardingOutcome", &[Some("dropped")]),
            strs("forwardingReason", &[Some("bad-ttl")]),
        ],
    );
    let table = DropQuery::new([&a, &b]).run().unwrap();
    let s = table.summary();
    assert_eq!(s.sampling, SamplingCoverage::Partial { known: 2, unknown: 2 });
    // a: dropped 0·10 + 1·1 + 2·10 = 21; b: 5 → 26.
    assert_eq!(s.dropped_packets, 26);
    // a: 10·10 + 11·1 + 12·10 = 231; b: 5 → 236.
    assert_eq!(s.total_packets, 236);
    let headline = render::headline(&table);
    assert!(headline.contains("sampling rate unknown for 2 of 4 records"), "{headline}");
}

#[test]
fn every_buckets_with_export_time_fallback() {
    let dir = tempfile::tempdir().unwrap();
    let export_ms: Vec<Option<i64>> = vec![Some(0), Some(0), Some((T0 + 400) * 1000)];
    let file = write(
        &dir.path().join("e.parquet"),
        vec![
            u64s("packetDeltaCount", &[Some(10), Some(20), Some(30)]),
            strs("forwardingOutcome", &[Some("dropped"); 3]),
            strs("forwardingReason", &[Some("adjacency"), Some("adjacency"), Some("adjacency")]),
            times("flowEndTime", &[Some(59), Some(61), None]),
            Column::new("exportTime".into(), export_ms)
                .cast(&DataType::Datetime(TimeUnit::Milliseconds, Some(TimeZone::UTC)))
                .unwrap(),
        ],
    );
    let table = DropQuery::new([&file])
        .with_every(Duration::from_secs(60))
        .run()
        .unwrap();
    let df = table.frame();
    let buckets_col = df.column("bucketStart").unwrap().cast(&DataType::Int64).unwrap();
    let buckets_ca = buckets_col.i64().unwrap();
    let buckets: Vec<Option<i64>> = (0..buckets_ca.len()).map(|i| buckets_ca.get(i)).collect();
    // 59 s → bucket 0; 61 s → 60; the third falls back to exportTime 400 s → 360.
    let ns = |s: i64| Some((T0 + s) * 1_000_000_000);
    assert_eq!(buckets, vec![ns(0), ns(60), ns(360)]);
    assert_eq!(rows(&table, "forwardingReason").iter().map(|r| r.1).collect::<Vec<_>>(), vec![10, 20, 30]);

    let mut json = Vec::new();
    render::write_json(&table, &mut json).unwrap();
    let parsed: serde_json::Value = serde_json::from_slice(&json).unwrap();
    assert_eq!(parsed[0]["bucketStart"], "2026-11-30T01:00:00Z");
    assert_eq!(parsed[2]["bucketStart"], "2026-11-30T01:06:00Z");
    assert_eq!(parsed[1]["droppedPackets"], 20);
}

#[test]
fn every_keeps_top_per_bucket() {
    let dir = tempfile::tempdir().unwrap();
    let file = basic(dir.path());
    // Buckets of 2 min: [0,120): records at 10, 70; [120,240): 130, 200; [240,360): 250, 310.
    let table = DropQuery::new([&file])
        .with_by([Dimension::NextHop])
        .with_every(Duration::from_secs(120))
        .with_top(1)
        .run()
        .unwrap();
    assert_eq!(
        rows(&table, "nextHop"),
        vec![
            (Some("192.0.2.1".into()), 40, 140),
            (Some("2001:db8::1".into()), 7, 7),
            (Some("198.51.100.9".into()), 50, 50),
        ]
    );
    // The headline's top group is over the whole range, not per bucket.
    let top = table.summary().top.clone().unwrap();
    assert_eq!(top.dimensions[0].1, "198.51.100.9");
}

#[test]
fn from_to_and_where() {
    let dir = tempfile::tempdir().unwrap();
    let file = basic(dir.path());
    let table = DropQuery::new([&file])
        .with_from(parse_time("2026-11-30T01:01:00Z").unwrap())
        .with_to(parse_time("2026-11-30T01:05:00Z").unwrap())
        .run()
        .unwrap();
    // Records at 70, 130, 200, 250 s.
    assert_eq!(table.summary().flow_records, 4);
    assert_eq!(table.summary().dropped_packets, 40 + 3 + 7 + 20);

    let table = DropQuery::new([&file])
        .with_filter_sql("ipNextHopIPv4Address = '192.0.2.1' AND packetDeltaCount >= 40")
        .run()
        .unwrap();
    assert_eq!(table.summary().flow_records, 2);
    assert_eq!(table.summary().dropped_packets, 40);

    let bad = DropQuery::new([&file]).with_filter_sql("packetDeltaCount >").run();
    assert!(matches!(bad, Err(Error::BadFilter { .. })), "{bad:?}");
    let not_bool = DropQuery::new([&file]).with_filter_sql("packetDeltaCount + 1").run();
    assert!(matches!(not_bool, Err(Error::FilterNotBoolean { .. })), "{not_bool:?}");
    let unknown = DropQuery::new([&file]).with_filter_sql("noSuchColumn = 1").run();
    assert!(matches!(unknown, Err(Error::UnknownColumn { .. })), "{unknown:?}");
    let empty = DropQuery::new([&file])
        .with_from(parse_time("2026-11-30T02:00:00Z").unwrap())
        .with_to(parse_time("2026-11-30T01:00:00Z").unwrap())
        .run();
    assert!(matches!(empty, Err(Error::EmptyTimeRange { .. })));
    let none = DropQuery::new([&file])
        .with_from(parse_time("2030-01-01T00:00:00Z").unwrap())
        .run()
        .unwrap();
    assert_eq!(none.summary().sampling, SamplingCoverage::NoRecords);
    assert_eq!(render::headline(&none), "no matching flow records");
}

#[test]
fn missing_columns_across_files() {
    let dir = tempfile::tempdir().unwrap();
    // File 1 has interfaces but no names; file 2 has names and VRFs, and
    // uses packetTotalCount instead of packetDeltaCount.
    let one = write(
        &dir.path().join("one.parquet"),
        vec![
            u32s("ingressInterface", &[Some(7), Some(8)]),
            u64s("packetDeltaCount", &[Some(10), Some(20)]),
            u64s("droppedPacketDeltaCount", &[Some(1), Some(2)]),
            strs("forwardingReason", &[Some("wred"), Some("wred")]),
        ],
    );
    let two = write(
        &dir.path().join("two.parquet"),
        vec![
            u32s("ingressInterface", &[Some(7)]),
            strs("ingressInterfaceName", &[Some("xe-0/0/7")]),
            u32s("ingressVRFID", &[Some(3)]),
            strs("ingressVRFname", &[Some("cust-blue")]),
            u64s("packetTotalCount", &[Some(5)]),
            strs("forwardingOutcome", &[Some("dropped")]),
            strs("forwardingReason", &[Some("acl-deny")]),
        ],
    );
    let table = DropQuery::new([&one, &two])
        .with_by([Dimension::IngressInterface])
        .run()
        .unwrap();
    // if 7: 1 + 5 = 6 of 15, name from file two; if 8: 2 of 20.
    assert_eq!(
        rows(&table, "ingressInterface"),
        vec![(Some("7".into()), 6, 15), (Some("8".into()), 2, 20)]
    );
    let mut text = Vec::new();
    render::write_table(&table, &mut text).unwrap();
    let text = String::from_utf8(text).unwrap();
    assert!(text.contains("7 (xe-0/0/7)"), "{text}");
    // if 7's top reason: acl-deny 5 beats wred 1.
    assert!(text.contains("acl-deny"), "{text}");

    // VRF columns exist only in file two; egress VRF in no file at all (a
    // contract column: reads as null).
    let table = DropQuery::new([&one, &two])
        .with_by([Dimension::IngressVrf, Dimension::EgressVrf])
        .run()
        .unwrap();
    assert_eq!(
        rows(&table, "ingressVRFID"),
        vec![(Some("3".into()), 5, 5), (None, 3, 30)]
    );
    let names = table.frame().column("ingressVRFname").unwrap().str().unwrap().get(0);
    assert_eq!(names, Some("cust-blue"));

    // A column that is in no file and not in the contract is an error.
    let err = DropQuery::new([&one, &two])
        .with_by(["noSuchThing".parse::<Dimension>().unwrap()])
        .run();
    assert!(matches!(err, Err(Error::UnknownColumn { .. })), "{err:?}");
}

#[test]
fn hive_partitions_become_columns() {
    let dir = tempfile::tempdir().unwrap();
    let root = dir.path().join("exports");
    for (exporter, dropped) in [("192.0.2.1", 4u64), ("192.0.2.2", 9)] {
        for part in 0..2u64 {
            write(
                &root
                    .join("date=2026-11-30")
                    .join(format!("exporter={exporter}"))
                    .join(format!("part-{part}.parquet")),
                vec![
                    u64s("packetDeltaCount", &[Some(100)]),
                    u64s("droppedPacketDeltaCount", &[Some(dropped + part)]),
                    strs("forwardingReason", &[Some("policer")]),
                    // RFC 5655 file input: exporter column present but null.
                    strs("exporter", &[None]),
                ],
            );
        }
    }
    std::fs::write(root.join("_SUCCESS"), b"").unwrap();
    let table = DropQuery::new([&root])
        .with_by([Dimension::Exporter, Dimension::Column("date".into())])
        .run()
        .unwrap();
    // 192.0.2.2: 9 + 10 = 19; 192.0.2.1: 4 + 5 = 9.
    assert_eq!(
        rows(&table, "exporter"),
        vec![(Some("192.0.2.2".into()), 19, 200), (Some("192.0.2.1".into()), 9, 200)]
    );
    let dates = table.frame().column("date").unwrap().str().unwrap().get(0);
    assert_eq!(dates, Some("2026-11-30"));

    let filtered = DropQuery::new([&root])
        .with_filter_sql("exporter = '192.0.2.1'")
        .run()
        .unwrap();
    assert_eq!(filtered.summary().dropped_packets, 9);

    // A glob over the same tree reads the partitions too.
    let pattern = format!("{}/date=*/exporter=*/*.parquet", root.display());
    let globbed = DropQuery::new([pattern]).with_by([Dimension::Exporter]).run().unwrap();
    assert_eq!(globbed.summary().dropped_packets, 28);
    assert_eq!(globbed.frame().height(), 2);
}

#[test]
fn labels_segments_and_rendering() {
    let dir = tempfile::tempdir().unwrap();
    let stack_a: &[u32] = &[16005, 24001, 3];
    let stack_b: &[u32] = &[16007];
    // Stored last segment first (IANA IE 496).
    let segs: &[&str] = &["2001:db8:0:3::", "2001:db8:0:2::", "2001:db8:0:1::"];
    let file = write(
        &dir.path().join("l.parquet"),
        vec![
            u32_lists("mplsLabelStack", &[Some(stack_a), Some(stack_a), Some(stack_b)]),
            Column::new("mplsTopLabelType".into(), [Some(5u8), Some(5), Some(8)]),
            str_lists("srhSegmentIPv6BasicList", &[Some(segs), Some(segs), None]),
            strs("srhEndpointBehaviorName", &[Some("End.DT4"), Some("End.DT4"), None]),
            u64s("packetDeltaCount", &[Some(10), Some(10), Some(10)]),
            u64s("droppedPacketDeltaCount", &[Some(2), Some(3), Some(1)]),
            strs("forwardingReason", &[Some("adjacency"); 3]),
        ],
    );
    let table = DropQuery::new([&file])
        .with_by([Dimension::LabelStack, Dimension::SegmentList])
        .run()
        .unwrap();
    let mut text = Vec::new();
    render::write_table(&table, &mut text).unwrap();
    let text = String::from_utf8(text).unwrap();
    assert!(text.contains("16005/24001/3"), "{text}");
    assert!(
        text.contains("2001:db8:0:1:: → 2001:db8:0:2:: → 2001:db8:0:3::"),
        "{text}"
    );
    assert_eq!(table.summary().dropped_packets, 6);
    assert_eq!(table.frame().height(), 2);

    let mut json = Vec::new();
    render::write_json(&table, &mut json).unwrap();
    let parsed: serde_json::Value = serde_json::from_slice(&json).unwrap();
    assert_eq!(parsed[0]["mplsLabelStack"], serde_json::json!([16005, 24001, 3]));
    assert_eq!(parsed[0]["srhSegmentIPv6BasicList"][0], "2001:db8:0:3::");
    assert_eq!(parsed[0]["droppedPackets"], 5);

    let mut csv = Vec::new();
    render::write_csv(&table, &mut csv).unwrap();
    let csv = String::from_utf8(csv).unwrap();
    let mut lines = csv.lines();
    assert_eq!(
        lines.next(),
        Some("mplsLabelStack,srhSegmentIPv6BasicList,topReason,droppedPackets,droppedOctets,totalPackets,totalOctets,dropRatio,flowRecords,droppedPacketsLow,droppedPacketsHigh")
    );
    assert_eq!(
        lines.next(),
        Some("16005 24001 3,2001:db8:0:3:: 2001:db8:0:2:: 2001:db8:0:1::,adjacency,5,0,20,0,0.25,2,5,5")
    );

    let table = DropQuery::new([&file])
        .with_by([Dimension::TopLabel, Dimension::EndpointBehavior])
        .run()
        .unwrap();
    let mut text = Vec::new();
    render::write_table(&table, &mut text).unwrap();
    let text = String::from_utf8(text).unwrap();
    assert!(text.contains("16005 (LDP)"), "{text}");
    assert!(text.contains("End.DT4"), "{text}");
    assert_eq!(
        rows(&table, "topLabel"),
        vec![(Some("16005".into()), 5, 20), (Some("16007".into()), 1, 10)]
    );
}

#[test]
fn reads_only_needed_columns() {
    let dir = tempfile::tempdir().unwrap();
    let file = write(
        &dir.path().join("wide.parquet"),
        vec![
            u64s("packetDeltaCount", &[Some(1)]),
            strs("forwardingReason", &[Some("wred")]),
            strs("sourceIPv4Address", &[Some("203.0.113.5")]),
            strs("destinationIPv4Address", &[Some("203.0.113.6")]),
            u32s("bgpSourceAsNumber", &[Some(64512)]),
        ],
    );
    let plan = DropQuery::new([&file])
        .with_filter_sql("bgpSourceAsNumber = 64512")
        .explain()
        .unwrap();
    assert!(plan.contains("packetDeltaCount"), "{plan}");
    assert!(plan.contains("bgpSourceAsNumber"), "{plan}");
    assert!(!plan.contains("sourceIPv4Address"), "{plan}");
    assert!(!plan.contains("destinationIPv4Address"), "{plan}");
}

/// exportTime in seconds after T0, stored as ms UTC.
fn export_times(offsets: &[Option<i64>]) -> Column {
    let ms: Vec<Option<i64>> = offsets.iter().map(|o| o.map(|s| (T0 + s) * 1000)).collect();
    Column::new("exportTime".into(), ms)
        .cast(&DataType::Datetime(TimeUnit::Milliseconds, Some(TimeZone::UTC)))
        .unwrap()
}

#[test]
fn time_range_from_footers_matches_the_rows() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let counts = |n: usize| u64s("packetDeltaCount", &vec![Some(1); n]);
    // flowEndTime everywhere: exportTime does not count.
    let whole = write(
        &d.join("whole.parquet"),
        vec![
            counts(3),
            times("flowEndTime", &[Some(300), Some(10), Some(20)]),
            export_times(&[Some(-500), Some(-500), Some(900)]),
        ],
    );
    // No flowEndTime column: exportTime.
    let export_only = write(&d.join("export-only.parquet"), vec![counts(2), export_times(&[Some(-40), Some(20)])]);
    // flowEndTime null throughout: exportTime.
    let end_null = write(
        &d.join("end-null.parquet"),
        vec![counts(1), times("flowEndTime", &[None]), export_times(&[Some(400)])],
    );
    // flowEndTime null in some rows only: the footer cannot tell.
    let partial = write(
        &d.join("partial.parquet"),
        vec![
            counts(2),
            times("flowEndTime", &[Some(50), None]),
            export_times(&[Some(-900), Some(-60)]),
        ],
    );
    let at = |s: i64| Some(chrono::DateTime::from_timestamp(T0 + s, 0).unwrap());
    let cases: [(Vec<&PathBuf>, bool, (i64, i64)); 3] = [
        (vec![&whole], true, (10, 300)),
        (vec![&whole, &export_only, &end_null], true, (-40, 400)),
        (vec![&whole, &partial], false, (-60, 300)),
    ];
    for (inputs, from_footers, (first, last)) in cases {
        let plan = DropQuery::new(inputs.clone()).explain().unwrap();
        assert_eq!(!plan.contains("flowEndTime"), from_footers, "{plan}");
        let footers = DropQuery::new(inputs.clone()).run().unwrap();
        // A filter that keeps every row makes the query read the times.
        let rows = DropQuery::new(inputs.clone())
            .with_filter_sql("packetDeltaCount >= 0")
            .run()
            .unwrap();
        for table in [&footers, &rows] {
            assert_eq!(table.summary().first, at(first), "{inputs:?}");
            assert_eq!(table.summary().last, at(last), "{inputs:?}");
        }
    }
}

/// Per group, straight from the per-record definitions in the crate docs.
#[derive(Default, Debug, PartialEq)]
struct Expected {
    dropped_packets: u64,
    dropped_octets: u64,
    total_packets: u64,
    total_octets: u64,
    records: u64,
    var: f64,
    name: Option<String>,
}

#[test]
fn grouped_figures_match_the_per_record_definitions() {
    // A fixed pseudo-random sequence (64-bit LCG, Knuth's MMIX constants).
    let mut state: u64 = 0x2545_f491_4f6c_dd1d;
    let mut next = move |n: u64| {
        state = state.wrapping_mul(6_364_136_223_846_793_005).wrapping_add(1_442_695_040_888_963_407);
        (state >> 33) % n
    };
    let rows = 600;
    let mut cols: Vec<Vec<Option<u64>>> = vec![Vec::new(); 6];
    let (mut outcome, mut reason, mut rate, mut iface, mut name) =
        (Vec::new(), Vec::new(), Vec::new(), Vec::new(), Vec::new());
    let outcomes = [Some("dropped"), Some("forwarded"), Some("consumed"), None];
    let reasons = [Some("acl-deny"), Some("policer"), None];
    let rates = [None, Some(0u32), Some(1), Some(10), Some(1000)];
    for _ in 0..rows {
        for col in cols.iter_mut() {
            // Null about a third of the time.
            col.push((next(3) > 0).then(|| next(50)));
        }
        outcome.push(outcomes[next(4) as usize]);
        reason.push(reasons[next(3) as usize]);
        rate.push(rates[next(5) as usize]);
        let id = next(3) as u32;
        iface.push(Some(id));
        // Names vary per id and are sometimes missing: the first seen counts.
        name.push((next(4) > 0).then(|| format!("if{id}-{}", next(3))));
    }
    let names: [&str; 6] = [
        "packetDeltaCount",
        "packetTotalCount",
        "droppedPacketDeltaCount",
        "octetDeltaCount",
        "octetTotalCount",
        "droppedOctetDeltaCount",
    ];
    let mut columns: Vec<Column> = names.iter().zip(&cols).map(|(n, v)| u64s(n, v)).collect();
    columns.push(strs("forwardingOutcome", &outcome));
    columns.push(strs("forwardingReason", &reason));
    columns.push(u32s("samplingRate", &rate));
    columns.push(u32s("egressInterface", &iface));
    let name_refs: Vec<Option<&str>> = name.iter().map(|n| n.as_deref()).collect();
    columns.push(strs("egressInterfaceName", &name_refs));
    let dir = tempfile::tempdir().unwrap();
    let file = write(&dir.path().join("model.parquet"), columns);

    let mut expected: std::collections::BTreeMap<(u32, Option<&str>), Expected> = Default::default();
    let mut by_iface: std::collections::BTreeMap<u32, Option<String>> = Default::default();
    for i in 0..rows {
        let c = |j: usize| cols[j][i];
        let n = match rate[i] {
            Some(r) if r > 0 => u64::from(r),
            _ => 1,
        };
        let whole = outcome[i] == Some("dropped");
        let counts = |delta: usize, total: usize, dropped: usize| {
            let t = c(delta).or(c(total));
            let k = if whole { t.or(c(dropped)).unwrap_or(0) } else { c(dropped).unwrap_or(0) };
            (t.unwrap_or(0), k)
        };
        let (tp, kp) = counts(0, 1, 2);
        let (to, ko) = counts(3, 4, 5);
        let e = expected.entry((iface[i].unwrap(), reason[i])).or_default();
        e.dropped_packets += n * kp;
        e.dropped_octets += n * ko;
        e.total_packets += n * tp;
        e.total_octets += n * to;
        e.records += 1;
        e.var += (n * (n - 1) * kp) as f64;
        let first = by_iface.entry(iface[i].unwrap()).or_default();
        if first.is_none() {
            *first = name[i].clone();
        }
    }
    // The name beside an id is the first non-null one seen for the id in
    // input order, whatever the other keys of the row (the documented
    // rule; DuckDB's `arg_min(name, file_row_number)` per id agrees).
    for ((id, _), e) in expected.iter_mut() {
        e.name = by_iface[id].clone();
    }

    let table = DropQuery::new([&file])
        .with_by([Dimension::EgressInterface, Dimension::Reason])
        .run()
        .unwrap();
    let df = table.frame();
    assert_eq!(df.height(), expected.len());
    let u = |name: &str, i: usize| df.column(name).unwrap().get(i).unwrap().extract::<u64>().unwrap();
    for i in 0..df.height() {
        let id = df.column("egressInterface").unwrap().get(i).unwrap().extract::<u32>().unwrap();
        let reason = df.column("forwardingReason").unwrap().get(i).unwrap();
        let reason = reasons.iter().flatten().copied().find(|r| reason == AnyValue::String(r));
        let want = &expected[&(id, reason)];
        let name = df.column("egressInterfaceName").unwrap().get(i).unwrap();
        let got = Expected {
            dropped_packets: u("droppedPackets", i),
            dropped_octets: u("droppedOctets", i),
            total_packets: u("totalPackets", i),
            total_octets: u("totalOctets", i),
            records: u("flowRecords", i),
            // The interval's half-width gives the variance back.
            var: {
                let high = df.column("droppedPacketsHigh").unwrap().get(i).unwrap().extract::<f64>().unwrap();
                let half = high - want.dropped_packets as f64;
                let var = (half / 1.96).powi(2);
                if (var - want.var).abs() <= 1e-6 * want.var.max(1.0) { want.var } else { var }
            },
            name: match name {
                AnyValue::String(s) => Some(s.to_string()),
                _ => None,
            },
        };
        assert_eq!(&got, want, "egressInterface {id}, reason {reason:?}");
    }

    // Merged over reasons, the name is still the first seen for the id.
    let table = DropQuery::new([&file])
        .with_by([Dimension::EgressInterface])
        .run()
        .unwrap();
    let df = table.frame();
    for i in 0..df.height() {
        let id = df.column("egressInterface").unwrap().get(i).unwrap().extract::<u32>().unwrap();
        let name = match df.column("egressInterfaceName").unwrap().get(i).unwrap() {
            AnyValue::String(s) => Some(s.to_string()),
            _ => None,
        };
        assert_eq!(name, by_iface[&id], "egressInterface {id}");
    }
}

#[test]
fn input_errors() {
    let dir = tempfile::tempdir().unwrap();
    let capture = dir.path().join("export.pcap");
    std::fs::write(&capture, [0xd4, 0xc3, 0xb2, 0xa1, 2, 0, 4, 0]).unwrap();
    assert!(matches!(DropQuery::new([&capture]).run(), Err(Error::NotParquet { .. })));
    assert!(matches!(
        DropQuery::new([dir.path().join("absent.parquet")]).run(),
        Err(Error::InputNotFound { .. })
    ));
    let empty = dir.path().join("empty");
    std::fs::create_dir(&empty).unwrap();
    assert!(matches!(DropQuery::new([&empty]).run(), Err(Error::NoParquetFiles { .. })));
    assert!(matches!(DropQuery::new(Vec::<PathBuf>::new()).run(), Err(Error::NoInputs)));
    let file = basic(dir.path());
    assert!(matches!(
        DropQuery::new([&file]).with_every(Duration::ZERO).run(),
        Err(Error::BadEvery)
    ));
}

#[test]
#[ignore = "prints the optimized plan for inspection"]
fn print_plan() {
    let dir = tempfile::tempdir().unwrap();
    let file = basic(dir.path());
    let plan = DropQuery::new([&file])
        .with_by([Dimension::NextHop])
        .with_filter_sql("packetDeltaCount > 5")
        .with_from(parse_time("2026-11-30T01:01:00Z").unwrap())
        .explain()
        .unwrap();
    println!("{plan}");
}

/// forwardingStatus codes and the outcome and reason texts `flowsift
/// convert` writes beside them. Source: IANA "Forwarding Status (Value
/// 89)" sub-registry and RFC 7270 §4.12 (status in bits 7–6 of the
/// least-significant octet; only that octet has a meaning, so 0x1234_5681
/// is 0x81). Reasons: 0x81 ACL deny, 0x83 unroutable, 0x8A policer, 0x8D
/// for us, 0xC3 for us (consumed), 0x40 unknown (forwarded); 0x00, 0x45
/// and 0xBF are unassigned (no reason).
const STATUS_TEXTS: [(u32, &str, Option<&str>); 10] = [
    (0x81, "dropped", Some("acl-deny")),
    (0x83, "dropped", Some("unroutable")),
    (0x8A, "dropped", Some("policer")),
    (0x8D, "dropped", Some("for-us")),
    (0xC3, "consumed", Some("for-us")),
    (0x40, "forwarded", Some("unknown")),
    (0x00, "unknown", None),
    (0x45, "forwarded", None),
    (0xBF, "dropped", None),
    (0x1234_5681, "dropped", Some("acl-deny")),
];

/// The same records twice: `status.parquet` with forwardingStatus beside
/// its texts, `texts.parquet` with the texts alone. Sampled in part, with
/// interface names that vary and are sometimes missing.
fn status_and_texts(dir: &Path) -> (PathBuf, PathBuf) {
    // A fixed pseudo-random sequence (64-bit LCG, Knuth's MMIX constants).
    let mut state: u64 = 0x1234_5678_9abc_def1;
    let mut next = move |n: u64| {
        state = state.wrapping_mul(6_364_136_223_846_793_005).wrapping_add(1_442_695_040_888_963_407);
        (state >> 33) % n
    };
    let rows = 800;
    let (mut status, mut outcome, mut reason) = (Vec::new(), Vec::new(), Vec::new());
    let (mut packets, mut octets, mut dropped) = (Vec::new(), Vec::new(), Vec::new());
    let (mut rate, mut iface, mut name, mut end) = (Vec::new(), Vec::new(), Vec::new(), Vec::new());
    for _ in 0..rows {
        let (code, o, r) = STATUS_TEXTS[next(STATUS_TEXTS.len() as u64) as usize];
        status.push(Some(code));
        outcome.push(Some(o));
        reason.push(r);
        packets.push((next(10) > 0).then(|| next(5000)));
        octets.push(Some(next(1 << 20)));
        dropped.push((next(3) == 0).then(|| next(20)));
        rate.push([None, Some(0u32), Some(1), Some(100), Some(1000)][next(5) as usize]);
        let id = next(4) as u32;
        iface.push((id > 0).then_some(id));
        name.push((next(3) > 0 && id > 0).then(|| format!("xe-0/0/{id}.{}", next(2))));
        end.push(Some(next(3600) as i64));
    }
    let name_refs: Vec<Option<&str>> = name.iter().map(|n| n.as_deref()).collect();
    let common = || {
        vec![
            u64s("packetDeltaCount", &packets),
            u64s("octetDeltaCount", &octets),
            u64s("droppedPacketDeltaCount", &dropped),
            u32s("samplingRate", &rate),
            u32s("egressInterface", &iface),
            strs("egressInterfaceName", &name_refs),
            times("flowEndTime", &end),
            strs("forwardingOutcome", &outcome),
            strs("forwardingReason", &reason),
        ]
    };
    let mut with_status = common();
    with_status.push(u32s("forwardingStatus", &status));
    (
        write(&dir.join("status.parquet"), with_status),
        write(&dir.join("texts.parquet"), common()),
    )
}

/// Frame and summary of a query, for comparing two inputs.
fn outcome_of(query: DropQuery) -> (DataFrame, String) {
    let table = query.run().unwrap();
    (table.frame().clone(), format!("{:?}", table.summary()))
}

#[test]
fn status_grouping_equals_text_grouping() {
    let dir = tempfile::tempdir().unwrap();
    let (status, texts) = status_and_texts(dir.path());
    let queries: Vec<Box<dyn Fn(&Path) -> DropQuery>> = vec![
        Box::new(|p| DropQuery::new([p]).with_by([Dimension::EgressInterface, Dimension::Reason])),
        Box::new(|p| DropQuery::new([p]).with_by([Dimension::EgressInterface])),
        Box::new(|p| DropQuery::new([p]).with_by([Dimension::Reason])),
        Box::new(|p| DropQuery::new([p]).with_by([Dimension::Outcome, Dimension::Reason])),
        Box::new(|p| DropQuery::new([p]).with_by(Vec::<Dimension>::new())),
        Box::new(|p| DropQuery::new([p]).with_by([Dimension::EgressInterface]).with_top(2)),
        Box::new(|p| {
            DropQuery::new([p])
                .with_by([Dimension::Reason])
                .with_every(Duration::from_secs(600))
        }),
        Box::new(|p| {
            DropQuery::new([p])
                .with_by([Dimension::EgressInterface])
                .with_filter_sql("forwardingReason <> 'policer'")
        }),
    ];
    for (i, query) in queries.iter().enumerate() {
        let (a, a_summary) = outcome_of(query(&status));
        let (b, b_summary) = outcome_of(query(&texts));
        assert!(a.height() > 0, "query {i}");
        assert!(a.equals_missing(&b), "query {i}\n{a}\n{b}");
        assert_eq!(a_summary, b_summary, "query {i}");
    }
    // Grouped on the status, the texts are not read.
    let plan = DropQuery::new([&status])
        .with_by([Dimension::EgressInterface, Dimension::Reason])
        .explain()
        .unwrap();
    assert!(plan.contains("forwardingStatus"), "{plan}");
    assert!(!plan.contains("forwardingReason"), "{plan}");
}

#[test]
fn texts_count_where_a_status_is_missing() {
    // As in files written by other tools: texts without a status in some
    // rows. The status column is then not trusted for any row.
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let columns = |status: Vec<Option<u32>>| {
        vec![
            u64s("packetDeltaCount", &[Some(10), Some(20), Some(40)]),
            u32s("egressInterface", &[Some(1), Some(1), Some(2)]),
            strs("forwardingOutcome", &[Some("dropped"), Some("dropped"), Some("forwarded")]),
            strs("forwardingReason", &[Some("acl-deny"), Some("policer"), None]),
            u32s("forwardingStatus", &status),
        ]
    };
    // IANA forwardingStatus registry: 0x81 dropped/ACL deny; 0x8A
    // dropped/policer.
    let partial = write(&d.join("partial.parquet"), columns(vec![Some(0x81), None, Some(0x40)]));
    let table = DropQuery::new([&partial])
        .with_by([Dimension::EgressInterface, Dimension::Reason])
        .run()
        .unwrap();
    let reasons = rows(&table, "forwardingReason");
    assert_eq!(
        reasons,
        vec![
            (Some("policer".into()), 20, 20),
            (Some("acl-deny".into()), 10, 10),
            (None, 0, 40),
        ]
    );
    // A second file with a complete status does not make the first one
    // trusted (its 0x40 row would have reason `unknown` if the status
    // were read: IANA forwardingStatus registry, forwarded/unknown).
    let whole = write(&d.join("whole.parquet"), columns(vec![Some(0x81), Some(0x8A), Some(0x40)]));
    let both = DropQuery::new([&partial, &whole])
        .with_by([Dimension::Reason])
        .run()
        .unwrap();
    assert_eq!(
        rows(&both, "forwardingReason"),
        vec![
            (Some("policer".into()), 40, 40),
            (Some("acl-deny".into()), 20, 20),
            (None, 0, 80),
        ]
    );
}

/// Names beside ids are looked up after the groups are cut: the first
/// non-null name of the id in input order among the records the query
/// keeps, the same in every row and bucket that shows the id. Reference:
/// the documented rule applied by hand to these rows (DuckDB's
/// `arg_min(name, file_row_number)` per id gives the same).
#[test]
fn names_follow_filters_order_and_top() {
    let dir = tempfile::tempdir().unwrap();
    let one = write(
        &dir.path().join("a/one.parquet"),
        vec![
            u32s("egressInterface", &[Some(7), Some(7), Some(8), Some(0)]),
            strs("egressInterfaceName", &[None, Some("xe-0/0/7"), Some("xe-0/0/8"), None]),
            u64s("packetDeltaCount", &[Some(10), Some(5), Some(1), Some(100)]),
            strs("forwardingOutcome", &[Some("dropped"), Some("forwarded"), Some("dropped"), Some("dropped")]),
            strs("forwardingReason", &[Some("policer"), None, Some("acl-deny"), Some("unroutable")]),
            times("flowEndTime", &[Some(0), Some(10), Some(20), Some(30)]),
        ],
    );
    let two = write(
        &dir.path().join("b/two.parquet"),
        vec![
            u32s("egressInterface", &[Some(7), Some(9)]),
            strs("egressInterfaceName", &[Some("ae1"), Some("xe-0/0/9")]),
            u64s("packetDeltaCount", &[Some(3), Some(1)]),
            strs("forwardingOutcome", &[Some("dropped"), Some("dropped")]),
            strs("forwardingReason", &[Some("policer"), Some("policer")]),
            times("flowEndTime", &[Some(4000), Some(4010)]),
        ],
    );
    let names = |table: &DropTable| -> Vec<(Option<u32>, Option<String>)> {
        let df = table.frame();
        let ids = df.column("egressInterface").unwrap().u32().unwrap().clone();
        let names = df.column("egressInterfaceName").unwrap().str().unwrap().clone();
        (0..df.height())
            .map(|i| (ids.get(i), names.get(i).map(str::to_string)))
            .collect()
    };
    let s = |t: &str| Some(t.to_string());
    // Interface 7's first name is in file one's second row, a row that
    // dropped nothing; interface 0 has none.
    let table = DropQuery::new([&one, &two])
        .with_by([Dimension::EgressInterface, Dimension::Reason])
        .run()
        .unwrap();
    assert_eq!(
        names(&table),
        vec![
            (Some(0), None),
            (Some(7), s("xe-0/0/7")),
            (Some(8), s("xe-0/0/8")),
            (Some(9), s("xe-0/0/9")),
            (Some(7), s("xe-0/0/7")),
        ]
    );
    // Only kept records name: without the forwarded row, file two's name.
    let table = DropQuery::new([&one, &two])
        .with_by([Dimension::EgressInterface])
        .with_filter_sql("forwardingOutcome = 'dropped'")
        .with_top(2)
        .run()
        .unwrap();
    assert_eq!(names(&table), vec![(Some(0), None), (Some(7), s("ae1"))]);
    // Every bucket shows the id's one name.
    let table = DropQuery::new([&one, &two])
        .with_by([Dimension::EgressInterface])
        .with_every(Duration::from_secs(3600))
        .run()
        .unwrap();
    let sevens: Vec<_> = names(&table).into_iter().filter(|(id, _)| *id == Some(7)).collect();
    assert_eq!(sevens, vec![(Some(7), s("xe-0/0/7")), (Some(7), s("xe-0/0/7"))]);
    // The headline names the top group's id too.
    let table = DropQuery::new([&one, &two])
        .with_by([Dimension::EgressInterface])
        .with_filter_sql("egressInterface <> 0")
        .with_top(1)
        .run()
        .unwrap();
    let headline = render::headline(&table);
    assert!(headline.contains("top: out interface 7 (xe-0/0/7)"), "{headline}");
}
