//! End-to-end tests of `CaptureReader`: containers written by the test
//! writers (checked against `pcap-parser`), frames built by `etherparse`.
#![allow(clippy::unwrap_used, clippy::indexing_slicing)]

use std::time::Duration;

use super::test_util::*;
use super::*;
use crate::Transport;

const T0: Duration = Duration::new(1_700_000_000, 0);

fn read(bytes: &[u8], options: CaptureOptions) -> (Vec<CaptureEvent>, Option<CaptureError>, CaptureStats) {
    let mut reader = CaptureReader::new(bytes, 7, options).expect("open");
    let mut events = Vec::new();
    let mut error = None;
    for e in reader.by_ref() {
        match e {
            Ok(ev) => events.push(ev),
            Err(err) => {
                assert!(error.is_none(), "at most one error");
                error = Some(err);
            }
        }
    }
    assert!(reader.next_event().is_none(), "ended");
    let stats = reader.stats().clone();
    (events, error, stats)
}

fn messages(events: &[CaptureEvent]) -> Vec<(TransportSession, Option<Duration>, Vec<u8>)> {
    events
        .iter()
        .filter_map(|e| match e {
            CaptureEvent::Message { session, received, data } => Some((*session, *received, data.clone())),
            CaptureEvent::SessionEnded { .. } => None,
        })
        .collect()
}

fn pcap_of(linktype: u32, frames: &[Vec<u8>]) -> Vec<u8> {
    let mut w = PcapWriter::new(linktype, false, false);
    for (i, f) in frames.iter().enumerate() {
        w.packet(T0 + Duration::from_millis(i as u64), f, f.len() as u32);
    }
    w.finish()
}

#[test]
fn pcap_byte_orders_and_resolutions_deliver_udp_messages() {
    let (s, d) = (sa("192.0.2.1:50000"), sa("198.51.100.2:4739"));
    let msg = ipfix_message(1, 16);
    let ts = Duration::new(1_700_000_123, 456_789_012);
    for big_endian in [false, true] {
        for nanos in [false, true] {
            let mut w = PcapWriter::new(1, big_endian, nanos);
            w.packet(ts, &udp_frame(s, d, &msg), 0);
            let bytes = w.finish();
            let mut reader = CaptureReader::new(&bytes[..], 0, CaptureOptions::default()).unwrap();
            assert_eq!(reader.format(), InputFormat::Pcap);
            let ev = reader.next_event().unwrap().unwrap();
            let want_ts = if nanos { ts } else { Duration::new(1_700_000_123, 456_789_000) };
            assert_eq!(
                ev,
                CaptureEvent::Message { session: TransportSession::udp(s, d), received: Some(want_ts), data: msg.clone() }
            );
            assert!(reader.next_event().is_none());
            assert_eq!(reader.bytes_read(), bytes.len() as u64);
        }
    }
}

#[test]
fn pcapng_interfaces_with_epb_and_spb() {
    let (s4, d4) = (sa("192.0.2.1:50000"), sa("198.51.100.2:4739"));
    let (s6, d6) = (sa("[2001:db8::1]:50001"), sa("[2001:db8::2]:4739"));
    let m1 = ipfix_message(1, 16);
    let m2 = ipfix_message(2, 40);
    let m3 = ipfix_message(3, 24);
    let mut w = PcapNgWriter::new(false);
    w.interface(1, 0, None); // Ethernet, microseconds
    w.interface(101, 0, Some(9)); // raw IP, nanoseconds
    w.enhanced(0, 1_700_000_000_000_001, &udp_frame(s4, d4, &m1), 0);
    w.enhanced(1, 1_700_000_000_000_000_002, &udp_packet(s6, d6, &m2), 0);
    let f3 = udp_frame(s4, d4, &m3);
    w.simple(&f3, f3.len() as u32);
    w.raw_block(0x0000_0bad + 0x1000, &[1, 2, 3, 4]); // unknown block type
    let (events, err, stats) = read(&w.finish(), CaptureOptions::default());
    assert!(err.is_none(), "{err:?}");
    let got = messages(&events);
    assert_eq!(got.len(), 3);
    assert_eq!(got[0], (TransportSession::udp(s4, d4), Some(Duration::new(1_700_000_000, 1_000)), m1));
    assert_eq!(got[1], (TransportSession::udp(s6, d6), Some(Duration::new(1_700_000_000, 2)), m2));
    // Simple Packet Block: no timestamp.
    assert_eq!(got[2], (TransportSession::udp(s4, d4), None, m3));
    assert_eq!(stats.packets, 3);
    assert_eq!(stats.other_blocks, 1);
}

#[test]
fn link_layers_raw_sll_and_qinq() {
    let (s, d) = (sa("203.0.113.5:2000"), sa("192.0.2.9:4739"));
    let m = ipfix_message(9, 20);
    let cases: Vec<(u32, Vec<u8>)> = vec![
        (101, udp_packet(sa("[2001:db8::5]:2000"), sa("[2001:db8::9]:4739"), &m)),
        (113, sll_v1_udp_frame(s, d, &m)),
        (276, sll_v2_udp_frame(s, d, &m)),
        (1, tagged_udp_frame(&[(0x88a8, 300), (0x8100, 20)], s, d, &m)),
    ];
    for (lt, frame) in cases {
        let (events, err, stats) = read(&pcap_of(lt, &[frame]), CaptureOptions::default());
        assert!(err.is_none());
        let got = messages(&events);
        assert_eq!(got.len(), 1, "linktype {lt}: {stats:?}");
        assert_eq!(got[0].2, m);
    }
}

#[test]
fn ipv4_fragments_out_of_order_and_ipv6_fragments() {
    let (s, d) = (sa("192.0.2.10:50000"), sa("198.51.100.20:4739"));
    let m = ipfix_message(5, 300);
    let mut frames = ipv4_udp_fragments(s, d, 77, &m, 96);
    frames.reverse(); // RFC 791 §3.2: any arrival order
    let (s6, d6) = (sa("[2001:db8::a]:50000"), sa("[2001:db8::b]:4739"));
    let m6 = ipfix_message(6, 200);
    let mut f6 = ipv6_udp_fragments(s6, d6, 0x0102_0304, &m6, 64);
    f6.swap(0, 1);
    frames.extend(f6);
    let (events, err, stats) = read(&pcap_of(1, &frames), CaptureOptions::default());
    assert!(err.is_none());
    let got = messages(&events);
    assert_eq!(got.len(), 2);
    assert_eq!(got[0].0, TransportSession::udp(s, d));
    assert_eq!(got[0].2, m);
    assert_eq!(got[1].0, TransportSession::udp(s6, d6));
    assert_eq!(got[1].2, m6);
    assert_eq!(stats.fragments_reassembled, 2);
    assert!(stats.skipped.is_empty(), "{:?}", stats.skipped);
}

#[test]
fn udp_port_filters() {
    let m = ipfix_message(1, 16);
    let other = (sa("192.0.2.1:40000"), sa("198.51.100.2:9995"));
    let std = (sa("192.0.2.1:40001"), sa("198.51.100.2:4739"));
    let frames = vec![
        udp_frame(other.0, other.1, &m),       // IPFIX on a non-4739 port
        udp_frame(std.0, std.1, b"not ipfix"), // malformed on 4739
        udp_frame(other.0, other.1, b"dns?"),  // neither
    ];
    let bytes = pcap_of(1, &frames);

    // Any port: judged by content (RFC 7011 §3.1 Length = payload length).
    let (events, _, stats) = read(&bytes, CaptureOptions::default());
    let got = messages(&events);
    assert_eq!(got.len(), 1);
    assert_eq!(got[0].0, TransportSession::udp(other.0, other.1));
    assert_eq!(stats.skipped(SkipReason::NotIpfix), 2);

    // Only 4739: passed on even when malformed; the rest is filtered.
    let (events, _, stats) = read(&bytes, CaptureOptions::default().with_ports(PortFilter::ipfix_port()));
    let got = messages(&events);
    assert_eq!(got.len(), 1);
    assert_eq!(got[0].2, b"not ipfix");
    assert_eq!(stats.skipped(SkipReason::PortFiltered), 2);
}

#[test]
fn tcp_split_retransmitted_reordered_then_fin() {
    let (exp, col) = (sa("192.0.2.50:33000"), sa("198.51.100.60:4739"));
    let msgs = vec![ipfix_message(1, 120), ipfix_message(2, 16), ipfix_message(3, 50)];
    let s = msgs.concat();
    let isn = 1000u32;
    let at = |off: usize| isn.wrapping_add(1).wrapping_add(off as u32);
    let frames = vec![
        tcp_frame(exp, col, isn, SYN, &[]),
        tcp_frame(col, exp, 9000, Flags { syn: true, ack: true, ..Flags::default() }, &[]),
        tcp_frame(exp, col, at(0), ACK, &s[..80]), // message 1 split
        tcp_frame(exp, col, at(150), ACK, &s[150..]), // out of order
        tcp_frame(exp, col, at(0), ACK, &s[..80]), // retransmission
        tcp_frame(exp, col, at(80), ACK, &s[80..150]),
        tcp_frame(col, exp, 9001, ACK, &[]),
        tcp_frame(exp, col, at(s.len()), FIN, &[]),
    ];
    let (events, err, stats) = read(&pcap_of(1, &frames), CaptureOptions::default());
    assert!(err.is_none());
    let session = TransportSession::tcp(exp, col);
    let got = messages(&events);
    assert_eq!(got.iter().map(|m| m.2.clone()).collect::<Vec<_>>(), msgs);
    assert!(got.iter().all(|m| m.0 == session && m.0.transport == Transport::Tcp));
    // The message completed by the packet at index 5 carries its time.
    assert_eq!(got[0].1, Some(T0 + Duration::from_millis(5)));
    assert_eq!(events.last(), Some(&CaptureEvent::SessionEnded { session }));
    assert_eq!(stats.tcp_retransmitted_bytes, 80);
    assert_eq!(stats.skipped(SkipReason::TcpRetransmission), 1);
    assert_eq!(stats.tcp_sessions, 1);
    assert_eq!(stats.sessions_ended, 1);
}

#[test]
fn truncated_pcap_yields_data_then_error_with_offset() {
    let (s, d) = (sa("192.0.2.1:50000"), sa("198.51.100.2:4739"));
    let f1 = udp_frame(s, d, &ipfix_message(1, 16));
    let f2 = udp_frame(s, d, &ipfix_message(2, 16));
    let mut bytes = pcap_of(1, &[f1.clone(), f2]);
    bytes.truncate(bytes.len() - 10);
    let (events, err, stats) = read(&bytes, CaptureOptions::default());
    assert_eq!(messages(&events).len(), 1);
    let cut_at = (24 + 16 + f1.len()) as u64; // file header + first record
    match err {
        Some(CaptureError::Truncated { offset, .. }) => assert_eq!(offset, cut_at),
        other => panic!("unexpected {other:?}"),
    }
    assert_eq!(stats.truncated_at, Some(cut_at));

    // A file header cut short fails at open.
    assert!(matches!(
        CaptureReader::new(&bytes[..10], 0, CaptureOptions::default()),
        Err(CaptureError::Truncated { offset: 0, .. })
    ));
}

#[test]
fn unknown_and_compressed_inputs() {
    let e = CaptureReader::new(&b"timestamp,src,dst\n"[..], 0, CaptureOptions::default()).unwrap_err();
    assert!(e.to_string().contains("looks like text"), "{e}");
    let e = CaptureReader::new(&[0x1f, 0x8b, 0x08, 0x00][..], 0, CaptureOptions::default()).unwrap_err();
    assert!(matches!(e, CaptureError::CompressedIpfixFile { kind: Compression::Gzip }));
    let e = CaptureReader::new(&b"BZh91AY&SY"[..], 0, CaptureOptions::default()).unwrap_err();
    assert!(matches!(e, CaptureError::CompressedIpfixFile { kind: Compression::Bzip2 }));
}

#[test]
fn ipfix_file_with_garbage_resyncs() {
    let msgs = vec![ipfix_message(1, 32), ipfix_message(2, 16), ipfix_message(3, 48)];
    let mut bytes = msgs[0].clone();
    bytes.extend_from_slice(b"\xff\xfe garbage \x00\x0a\x00");
    bytes.extend(&msgs[1]);
    bytes.extend(&msgs[2]);
    let (events, err, stats) = read(&bytes, CaptureOptions::default());
    assert!(err.is_none());
    let got = messages(&events);
    assert_eq!(got.iter().map(|m| m.2.clone()).collect::<Vec<_>>(), msgs);
    assert!(got.iter().all(|m| m.0 == TransportSession::file(7) && m.1.is_none()));
    assert_eq!(stats.skipped_bytes(SkipReason::FileResync), 14);
    assert_eq!(stats.ipfix_payloads, 3);
}

#[test]
fn other_traffic_is_counted_by_reason() {
    let (s, d) = (sa("192.0.2.1:50000"), sa("198.51.100.2:4739"));
    let mut arp = vec![0xff; 6];
    arp.extend([2, 0, 0, 0, 0, 1, 0x08, 0x06]);
    arp.extend([0; 28]);
    let mut icmp = Vec::new();
    etherparse::PacketBuilder::ethernet2([2, 0, 0, 0, 0, 1], [2, 0, 0, 0, 0, 2])
        .ipv4([192, 0, 2, 1], [192, 0, 2, 2], 64)
        .icmpv4_echo_request(1, 1)
        .write(&mut icmp, b"ping")
        .unwrap();
    let mut cut = udp_frame(s, d, &ipfix_message(1, 100));
    cut.truncate(60);
    let mut w = PcapWriter::new(1, false, false);
    w.packet(T0, &arp, arp.len() as u32);
    w.packet(T0, &icmp, icmp.len() as u32);
    w.packet(T0, &cut, 142);
    let (events, err, stats) = read(&w.finish(), CaptureOptions::default());
    assert!(events.is_empty() && err.is_none());
    assert_eq!(stats.packets, 3);
    assert_eq!(stats.skipped(SkipReason::NotIp), 1);
    assert_eq!(stats.skipped(SkipReason::NotUdpOrTcp), 1);
    assert_eq!(stats.skipped(SkipReason::CutBySnaplen), 1);
}

#[test]
fn damaged_pcapng_block_is_stepped_over() {
    let (s, d) = (sa("192.0.2.1:50000"), sa("198.51.100.2:4739"));
    let m = ipfix_message(1, 16);
    let mut w = PcapNgWriter::new(false);
    w.interface(1, 0, None);
    // An EPB whose captured length exceeds its block: pcap-parser refuses
    // it, its Block Total Length still leads to the next block.
    w.raw_block(6, &[0, 0, 0, 0, 0, 0, 0, 0, 0, 0, 0, 0, 0xff, 0, 0, 0, 0xff, 0, 0, 0]);
    w.enhanced(0, 5, &udp_frame(s, d, &m), 0);
    let (events, err, stats) = read(&w.finish(), CaptureOptions::default());
    assert!(err.is_none(), "{err:?}");
    assert_eq!(messages(&events).len(), 1);
    assert_eq!(stats.skipped(SkipReason::BadCaptureBlock), 1);
}

mod no_panic {
    use super::*;
    use proptest::prelude::*;

    /// Reads everything and checks invariants: with `PortFilter::Any`,
    /// every message is exactly one plausibly framed message (RFC 7011
    /// §3.1 Length = octets delivered), and only sessions that delivered a
    /// message are ended; at most one error, and it comes last.
    fn drain(bytes: &[u8]) {
        let Ok(reader) = CaptureReader::new(bytes, 0, CaptureOptions::default()) else { return };
        let mut seen = std::collections::HashSet::new();
        let mut errored = false;
        // Bounded: every step consumes input or ends.
        for ev in reader.take(100_000) {
            assert!(!errored, "nothing after an error");
            match ev {
                Ok(CaptureEvent::Message { session, data, .. }) => {
                    assert!(super::frame::plausible(&data));
                    assert_eq!(super::frame::header(&data).map(|h| h.1), Some(data.len()));
                    seen.insert(session);
                }
                Ok(CaptureEvent::SessionEnded { session }) => assert!(seen.contains(&session)),
                Err(_) => errored = true,
            }
        }
    }

    proptest! {
        // CAPTURE_FUZZ_CASES=100000 for a longer run.
        #![proptest_config(ProptestConfig::with_cases(
            std::env::var("CAPTURE_FUZZ_CASES").ok().and_then(|v| v.parse().ok()).unwrap_or(256)
        ))]

        #[test]
        fn arbitrary_pcap_bodies(body in proptest::collection::vec(any::<u8>(), 0..600)) {
            let mut bytes = PcapWriter::new(1, false, false).finish();
            bytes.extend(&body);
            drain(&bytes);
        }

        #[test]
        fn arbitrary_pcapng_bodies(body in proptest::collection::vec(any::<u8>(), 0..600)) {
            let mut w = PcapNgWriter::new(false);
            w.interface(1, 0, None);
            let mut bytes = w.finish();
            bytes.extend(&body);
            drain(&bytes);
        }

        #[test]
        fn framed_pcapng_blocks_with_arbitrary_bodies(
            blocks in proptest::collection::vec(
                (prop_oneof![Just(1u32), Just(2), Just(3), Just(4), Just(5), Just(6), Just(9), Just(10),
                             Just(0xbad), Just(0x4000_0bad), Just(0x8000_0001), any::<u32>()],
                 proptest::collection::vec(any::<u8>(), 0..80)),
                0..12),
            big_endian in any::<bool>(),
        ) {
            // Valid block framing, arbitrary contents: reaches every block
            // parser of pcap-parser.
            let mut w = PcapNgWriter::new(big_endian);
            w.interface(1, 0, None);
            for (kind, body) in &blocks {
                w.raw_block(*kind, body);
            }
            drain(&w.finish());
        }

        #[test]
        fn arbitrary_ipfix_files(body in proptest::collection::vec(any::<u8>(), 0..600)) {
            let mut bytes = ipfix_message(1, 16);
            bytes.extend(&body);
            drain(&bytes);
        }

        #[test]
        fn arbitrary_frames(frames in proptest::collection::vec(proptest::collection::vec(any::<u8>(), 0..120), 0..20),
                            lt in prop_oneof![Just(1u32), Just(101), Just(113), Just(276), Just(0)]) {
            drain(&pcap_of(lt, &frames));
        }

        #[test]
        fn mutated_tcp_streams(cuts in proptest::collection::vec((0usize..200, 1usize..60, any::<u8>(), 0u8..16), 1..12)) {
            // Random segments of a real stream, some corrupted, any order.
            let (e, c) = (sa("192.0.2.1:1"), sa("192.0.2.2:4739"));
            let s: Vec<u8> = (0..5).flat_map(|i| ipfix_message(i, 40)).collect();
            let frames: Vec<Vec<u8>> = cuts.iter().map(|&(off, len, x, f)| {
                let end = (off + len).min(s.len());
                let mut p = s[off.min(end)..end].to_vec();
                if let Some(b) = p.first_mut() { *b ^= x; }
                let flags = Flags { syn: f & 1 != 0, fin: f & 2 != 0, rst: f & 4 != 0, ack: f & 8 != 0 };
                let (src, dst) = if f == 15 { (c, e) } else { (e, c) };
                tcp_frame(src, dst, 1000u32.wrapping_add(off as u32).wrapping_sub(u32::from(flags.syn)), flags, &p)
            }).collect();
            drain(&pcap_of(1, &frames));
        }
    }
}

#[test]
fn tcp_over_ipv6_any_port_rst_and_reconnect() {
    // Any port: a stream that starts with a plausible header is IPFIX.
    let (exp, col) = (sa("[2001:db8::10]:41000"), sa("[2001:db8::20]:9996"));
    let m1 = ipfix_message(1, 64);
    let m2 = ipfix_message(2, 16);
    let frames = vec![
        tcp_frame(exp, col, 7, SYN, &[]),
        tcp_frame(exp, col, 8, ACK, &m1),
        tcp_frame(col, exp, 99, RST, &[]), // reset by the collector side
        tcp_frame(exp, col, 500, SYN, &[]), // same 4-tuple, new connection
        tcp_frame(exp, col, 501, ACK, &m2),
    ];
    let (events, err, stats) = read(&pcap_of(1, &frames), CaptureOptions::default());
    assert!(err.is_none());
    let first = TransportSession::tcp(exp, col);
    let mut second = first;
    second.instance = 1;
    assert_eq!(
        events,
        vec![
            CaptureEvent::Message { session: first, received: Some(T0 + Duration::from_millis(1)), data: m1 },
            CaptureEvent::SessionEnded { session: first },
            CaptureEvent::Message { session: second, received: Some(T0 + Duration::from_millis(4)), data: m2 },
        ]
    );
    // The capture ended, the second connection did not: no SessionEnded.
    assert_eq!(stats.sessions_ended, 1);
    assert_eq!(stats.tcp_sessions, 2);
}

#[test]
fn tcp_port_filter_and_mid_stream_start() {
    // Capture starts mid-message: the tail is skipped, framing is found
    // again by the RFC 5655 §10.3 check.
    let (exp, col) = (sa("192.0.2.7:40000"), sa("203.0.113.1:4739"));
    let msgs: Vec<Vec<u8>> = (1..=3).map(|i| ipfix_message(i, 48)).collect();
    let s = msgs.concat();
    let frames = vec![
        tcp_frame(exp, col, 5000, ACK, &s[30..]),
        tcp_frame(sa("192.0.2.7:40001"), sa("203.0.113.1:80"), 1, ACK, b"GET /"),
    ];
    let opts = CaptureOptions::default().with_ports(PortFilter::ipfix_port());
    let (events, err, stats) = read(&pcap_of(1, &frames), opts);
    assert!(err.is_none());
    assert_eq!(messages(&events).into_iter().map(|m| m.2).collect::<Vec<_>>(), msgs[1..].to_vec());
    assert_eq!(stats.skipped_bytes(SkipReason::TcpResync), 18);
    assert_eq!(stats.skipped(SkipReason::PortFiltered), 1);
}
