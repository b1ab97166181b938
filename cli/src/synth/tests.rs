//! Tests of `flowsift synth`: determinism, every message decodes, record
//! counts, and the ground truth agrees with what the capture holds.

#![allow(clippy::unwrap_used, clippy::indexing_slicing)]

use std::collections::{BTreeMap, BTreeSet};
use std::net::IpAddr;

use clap::Parser;
use ipfix_core::capture::{CaptureEvent, CaptureOptions, CaptureReader, InputFormat};
use ipfix_core::ie::id;
use ipfix_core::{Config, Decoder, Event};

use super::scenario::status;
use super::*;

#[derive(Debug, Parser)]
struct Harness {
    #[command(flatten)]
    args: SynthArgs,
}

fn config(argv: &[&str]) -> anyhow::Result<SynthConfig> {
    let h = Harness::try_parse_from(std::iter::once("synth").chain(argv.iter().copied()))?;
    SynthConfig::try_from(h.args)
}

fn run_to_vec(argv: &[&str]) -> (Vec<u8>, Report) {
    let config = config(argv).unwrap();
    generate(&config, Vec::new(), |_| {}).unwrap()
}

/// What a capture holds, decoded.
#[derive(Debug, Default)]
struct Seen {
    format: Option<InputFormat>,
    messages: u64,
    flow_records: u64,
    options_records: u64,
    malformed: u64,
    gap_records: u64,
    /// (domain, forwardingStatus) → (records, packets, octets).
    by_status: BTreeMap<(u32, u8), (u64, u64, u64)>,
    /// Records with an SRv6 segment list.
    srv6_records: u64,
    /// Records with an MPLS top label section.
    mpls_records: u64,
    /// Enterprise (PEN 32473) fields seen.
    tenant_fields: u64,
    exporters: BTreeSet<IpAddr>,
    domains: BTreeSet<u32>,
    last_received: Option<std::time::Duration>,
    backwards: u64,
}

fn decode(bytes: &[u8]) -> Seen {
    let mut reader = CaptureReader::new(bytes, 0, CaptureOptions::default()).unwrap();
    let mut decoder = Decoder::new(Config::default());
    let mut seen = Seen { format: Some(reader.format()), ..Seen::default() };
    while let Some(event) = reader.next_event() {
        let CaptureEvent::Message { session, received, data } = event.unwrap() else { continue };
        seen.messages += 1;
        if let Some(addr) = session.exporter {
            seen.exporters.insert(addr.ip());
        }
        if let (Some(last), Some(now)) = (seen.last_received, received) {
            seen.backwards += u64::from(now < last);
        }
        seen.last_received = received.or(seen.last_received);
        let Ok(events) = decoder.decode(&session, received, &data) else { continue };
        for event in events {
            let Event::Data(set) = event else { continue };
            seen.domains.insert(set.domain().0);
            if set.plan().is_options() {
                seen.options_records += set.len() as u64;
                continue;
            }
            for record in set.records() {
                seen.flow_records += 1;
                let code = record.get_u64(id::FORWARDING_STATUS).unwrap_or(0) as u8;
                let e = seen.by_status.entry((set.domain().0, code)).or_default();
                e.0 += 1;
                e.1 += record.get_u64(id::PACKET_DELTA_COUNT).unwrap_or(0);
                e.2 += record.get_u64(id::OCTET_DELTA_COUNT).unwrap_or(0);
                seen.srv6_records += u64::from(record.get(id::SRH_SEGMENT_IPV6_BASIC_LIST).is_some());
                seen.mpls_records += u64::from(record.get(id::MPLS_TOP_LABEL_STACK_SECTION).is_some());
                seen.tenant_fields += u64::from(record.fields().any(|f| f.spec.spec.element.enterprise == Some(network::PEN)));
            }
        }
    }
    seen.malformed = decoder.stats().messages_malformed;
    seen.gap_records = decoder.stats().sequence_gap_records;
    seen
}

#[test]
fn same_seed_same_bytes_other_seed_other_bytes() {
    for format in ["pcap", "pcapng", "ipfix"] {
        let argv = ["--scenario", "regional-carrier", "-o", "x", "--records", "3000", "--format", format];
        let (a, ra) = run_to_vec(&argv);
        let (b, rb) = run_to_vec(&argv);
        assert_eq!(a, b, "{format}");
        assert_eq!(serde_json::to_string(&ra.truth).unwrap(), serde_json::to_string(&rb.truth).unwrap());
        let (c, _) = run_to_vec(&[&argv[..], &["--seed", "2"]].concat());
        assert_ne!(a, c, "{format}");
    }
}

#[test]
fn every_message_decodes_and_records_add_up() {
    for (format, want) in [("pcap", InputFormat::Pcap), ("pcapng", InputFormat::PcapNg), ("ipfix", InputFormat::IpfixFile)] {
        let (bytes, report) = run_to_vec(&["--scenario", "regional-carrier", "-o", "x", "--records", "20000", "--format", format, "--seed", "5"]);
        let seen = decode(&bytes);
        assert_eq!(seen.format, Some(want));
        assert_eq!(seen.malformed, 0, "{format}");
        assert_eq!(seen.flow_records, 20_000, "{format}");
        assert_eq!(report.flow_records, 20_000);
        assert_eq!(seen.options_records, report.options_records, "{format}");
        assert_eq!(seen.messages, report.messages, "{format}");
        assert_eq!(bytes.len() as u64, report.bytes, "{format}");
        // The planted loss is the only gap.
        let lost: u64 = report.truth.export_loss.iter().map(|l| l.lost_records).sum();
        assert_eq!(lost, LOST_RECORDS as u64);
        assert_eq!(seen.gap_records, lost, "{format}");
        assert_eq!(seen.domains, [1101, 1102, 1201, 1401, 1501, 1502].into_iter().collect(), "{format}");
        assert!(seen.srv6_records > 0 && seen.mpls_records > 0 && seen.tenant_fields > 0);
        assert_eq!(seen.backwards, 0, "capture time never goes backwards");
        if format == "ipfix" {
            assert!(seen.exporters.is_empty());
        } else {
            // Three exporters over IPv4, one over IPv6.
            assert_eq!(seen.exporters.len(), 4);
            assert_eq!(seen.exporters.iter().filter(|a| a.is_ipv6()).count(), 1);
        }
    }
}

#[test]
fn ground_truth_matches_the_capture() {
    let (bytes, report) = run_to_vec(&["--scenario", "regional-carrier", "-o", "demo.pcapng", "--records", "30000", "--seed", "9"]);
    let seen = decode(&bytes);
    let truth = &report.truth;
    assert_eq!(truth.records.flow, seen.flow_records);
    assert_eq!(truth.episodes.len(), 4);
    for e in &truth.episodes {
        // Each episode has its own (domain, reason): the capture's count of
        // that pair is exactly the episode's.
        let got = seen.by_status.get(&(e.observation_domain_id, e.forwarding_status)).copied().unwrap_or_default();
        assert_eq!(got, (e.dropped_records, e.dropped_packets_sampled, e.dropped_octets_sampled), "{}", e.name);
        assert!(e.dropped_records > 0, "{}", e.name);
        assert_eq!(e.dropped_packets_estimated, e.dropped_packets_sampled * u64::from(e.sampling_rate));
        let (first, last) = (e.first_drop_ms.unwrap(), e.last_drop_ms.unwrap());
        assert!(first >= e.span.start_ms && last < e.span.end_ms, "{}", e.name);
        assert!(e.drops_query.starts_with("flowsift drops demo.parquet --by "), "{}", e.drops_query);
    }
    let sum = |code: u8| -> (u64, u64, u64) {
        seen.by_status.iter().filter(|((_, c), _)| *c == code).fold((0, 0, 0), |a, (_, v)| (a.0 + v.0, a.1 + v.1, a.2 + v.2))
    };
    for drops in &truth.background.drops {
        let c = &drops.counts;
        assert_eq!(sum(drops.forwarding_status), (c.records, c.packets_sampled, c.octets_sampled), "{}", drops.why);
    }
    let f = &truth.background.forwarded;
    assert_eq!(sum(status::FORWARDED), (f.records, f.packets_sampled, f.octets_sampled));
    // Nothing else.
    let accounted: u64 = truth.episodes.iter().map(|e| e.dropped_records).sum::<u64>()
        + truth.background.drops.iter().map(|d| d.counts.records).sum::<u64>()
        + f.records;
    assert_eq!(accounted, seen.flow_records);
    let by_domain: u64 = truth.records.flow_by_domain.iter().map(|d| d.flow).sum();
    assert_eq!(by_domain, seen.flow_records);
    // Classes and reasons as the story tells.
    let names: Vec<(&str, &str, &str)> = truth.episodes.iter().map(|e| (e.name, e.why, e.expected_class)).collect();
    assert_eq!(
        names,
        [
            ("core-drain-adjacency", "adjacency", "transient"),
            ("policer-misbound", "policer", "persistent"),
            ("srv6-missing-behavior", "unroutable", "persistent"),
            ("peering-acl-deny", "acl-deny", "new"),
        ]
    );
    let window = (truth.maintenance_window.span.start_ms, truth.maintenance_window.span.end_ms);
    for e in &truth.episodes {
        let (s, end) = (e.span.start_ms, e.span.end_ms);
        match e.expected_class {
            "transient" => assert!(s >= window.0 && end <= window.1),
            "persistent" => assert!(s >= window.0 && s < window.1 && end > window.1),
            _ => assert!(s >= window.1),
        }
    }
}

#[test]
fn quiet_scenario_has_no_episodes() {
    let (bytes, report) = run_to_vec(&["--scenario", "regional-carrier-quiet", "-o", "q.ipfix", "--records", "5000"]);
    let seen = decode(&bytes);
    assert!(report.truth.episodes.is_empty());
    let codes: BTreeSet<u8> = seen.by_status.keys().map(|(_, c)| *c).collect();
    assert!(codes.is_subset(&[status::FORWARDED, status::WRED, status::BAD_TTL].into_iter().collect()), "{codes:?}");
}

#[test]
fn duration_and_start_shape_the_timeline() {
    let (bytes, report) = run_to_vec(&[
        "--scenario", "regional-carrier", "-o", "x.pcap", "--records", "4000", "--duration", "10m", "--start", "2027-03-01T12:00:00Z",
    ]);
    let truth = &report.truth;
    assert_eq!(truth.time_range.start, "2027-03-01T12:00:00.000Z");
    assert_eq!(truth.time_range.end, "2027-03-01T12:10:00.000Z");
    assert_eq!(truth.maintenance_window.span.start, "2027-03-01T12:03:20.000Z");
    assert_eq!(decode(&bytes).flow_records, 4000);
    // Default record count scales with the duration.
    let c = config(&["--scenario", "regional-carrier", "-o", "x", "--duration", "30m"]).unwrap();
    assert_eq!(c.records, 60_000);
}

#[test]
fn bad_arguments_are_refused() {
    assert!(config(&["--scenario", "nowhere", "-o", "x"]).is_err());
    assert!(config(&["--scenario", "regional-carrier"]).is_err());
    assert!(config(&["--scenario", "regional-carrier", "-o", "x", "--records", "0"]).is_err());
    assert!(config(&["--scenario", "regional-carrier", "-o", "x", "--duration", "5s"]).is_err());
    assert!(config(&["--scenario", "regional-carrier", "-o", "x", "--start", "yesterday"]).is_err());
    assert!(config(&["--list"]).is_err(), "--list is not a generation config");
    let c = config(&["--scenario", "regional-carrier", "-o", "dir/cap.ipfix"]).unwrap();
    assert_eq!(c.format, Format::Ipfix);
    assert_eq!(c.truth, Some(PathBuf::from("dir/cap.ipfix.truth.json")));
    let c = config(&["--scenario", "regional-carrier", "-o", "cap.bin", "--no-truth"]).unwrap();
    assert_eq!((c.format, c.truth), (Format::Pcapng, None));
}

#[test]
fn sysuptime_exporter_times_resolve() {
    // kestrel-p2 writes flowStart/EndSysUpTime; its options record gives
    // systemInitTimeMilliseconds, and init + uptime lands inside the capture.
    let (bytes, report) = run_to_vec(&["--scenario", "regional-carrier", "-o", "x.ipfix", "--records", "2000"]);
    let mut reader = CaptureReader::new(&bytes[..], 0, CaptureOptions::default()).unwrap();
    let mut decoder = Decoder::new(Config::default());
    let (mut init, mut ends) = (None, Vec::new());
    while let Some(Ok(CaptureEvent::Message { session, received, data })) = reader.next_event() {
        for event in decoder.decode(&session, received, &data).unwrap() {
            let Event::Data(set) = event else { continue };
            for record in set.records() {
                if let Some(ipfix_core::Value::DateTime(t)) = record.get(id::SYSTEM_INIT_TIME_MILLISECONDS) {
                    init = Some(t.unix_millis());
                }
                if let Some(up) = record.get_u64(id::FLOW_END_SYS_UP_TIME) {
                    ends.push(up);
                }
            }
        }
    }
    let init = init.unwrap();
    let range = report.truth.time_range.start_ms..report.truth.time_range.end_ms;
    assert!(!ends.is_empty());
    assert!(ends.iter().all(|up| range.contains(&(init as u64 + up))));
}

#[test]
fn committed_samples_are_current() {
    // The samples in sample-captures/ are what scripts/regen-samples makes
    // today; a generator change must come with regenerated samples.
    let dir = Path::new(env!("CARGO_MANIFEST_DIR")).join("../sample-captures");
    let script = std::fs::read_to_string(Path::new(env!("CARGO_MANIFEST_DIR")).join("../scripts/regen-samples")).unwrap();
    let mut checked = 0;
    for line in script.lines().filter(|l| l.starts_with("regional-carrier")) {
        let [name, scenario, seed, records] = line.split_whitespace().collect::<Vec<_>>()[..] else { panic!("{line}") };
        let (bytes, report) = run_to_vec(&["--scenario", scenario, "-o", name, "--seed", seed, "--records", records]);
        let committed = std::fs::read(dir.join(name)).unwrap();
        assert!(bytes == committed, "{name} differs from a fresh run: run scripts/regen-samples");
        let truth = std::fs::read_to_string(dir.join(format!("{name}.truth.json"))).unwrap();
        assert_eq!(truth, serde_json::to_string_pretty(&report.truth).unwrap() + "\n", "{name}.truth.json");
        assert!(committed.len() <= 2_000_000, "{name} is over 2 MB");
        checked += 1;
    }
    assert_eq!(checked, 4);
}
