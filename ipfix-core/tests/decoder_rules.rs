//! The collector rules of RFC 7011 (templates, withdrawals, buffering,
//! malformed messages, sequence numbers, data types), each checked on
//! hand-built messages.
#![allow(clippy::unwrap_used, clippy::indexing_slicing)]

mod common;

use std::collections::BTreeMap;
use std::net::Ipv4Addr;
use std::time::Duration;

use common::{at, decode, hex, message, set, tcp, tcp2, udp, values_of};
use ipfix_core::{
    Config, DateTime, Decoder, DomainStats, EncodeError, FieldSpecifier, ListProblem, Malformed, MessageEncoder,
    ObservationDomainId, OwnedValue, SkipReason, Stats, Template, TemplateId, TemplateProblem, Transport,
    TransportSession, NTP_UNIX_OFFSET,
};

const T0: u32 = 1_700_000_000;

// RFC 7011 App. A.2.1 Template Set (template 256, five 4-octet fields).
const A21: &str = "00 02 00 1c 01 00 00 05 00 08 00 04 00 0c 00 04 00 0f 00 04 00 02 00 04 00 01 00 04";
// RFC 7011 App. A.3 record 1.
const REC1: &str = "c0 00 02 0c c0 00 02 fe c0 00 02 01 00 00 13 91 00 51 8c 81";
// RFC 7011 App. A.4.1 Options Template Set (template 258).
const A41: &str = "00 03 00 18 01 02 00 03 00 01 00 8d 00 04 00 29 00 02 00 2a 00 02 00 00";

fn t_a21() -> Vec<u8> {
    hex(A21)
}

/// A Data Set of template 256 with `n` copies of A.3 record 1.
fn data(n: usize) -> Vec<u8> {
    set(256, &hex(&vec![REC1; n].join(" ")))
}

fn rec1() -> Vec<OwnedValue> {
    let ip = |d| OwnedValue::Ipv4(Ipv4Addr::new(192, 0, 2, d));
    vec![ip(12), ip(254), ip(1), OwnedValue::Unsigned(5009), OwnedValue::Unsigned(5_344_385)]
}

/// A Template Record of IANA fields (RFC 7011 §3.4.1).
fn tpl(id: u16, fields: &[(u16, u16)]) -> Vec<u8> {
    let mut out = id.to_be_bytes().to_vec();
    out.extend_from_slice(&u16::try_from(fields.len()).unwrap().to_be_bytes());
    for (ie, len) in fields {
        out.extend_from_slice(&ie.to_be_bytes());
        out.extend_from_slice(&len.to_be_bytes());
    }
    out
}

/// Template IDs known for a session and domain, with their definitions.
fn known(decoder: &Decoder, session: &TransportSession, domain: u32) -> BTreeMap<u16, Template> {
    decoder
        .templates(session, ObservationDomainId(domain))
        .map(|t| t.iter().map(|(id, p)| (*id, p.template().clone())).collect())
        .unwrap_or_default()
}

fn domain_stats(decoder: &Decoder) -> Vec<(TransportSession, u32, DomainStats)> {
    let mut v: Vec<_> = decoder.domain_stats().map(|(s, d, st)| (*s, d.0, st.clone())).collect();
    v.sort_by_key(|a| (a.0, a.1));
    v
}

// ---------------------------------------------------------------------------
// Withdrawals (RFC 7011 §8.1, §8.4; RFC 5655 §7.1)

#[test]
fn withdrawal_honoured_over_tcp_and_file() {
    // RFC 7011 §8.1 (TCP/SCTP); RFC 5655 §7.1: files accept withdrawals too.
    for session in [tcp(), TransportSession::file(0)] {
        let mut d = Decoder::new(Config::default());
        let out = decode(&mut d, &session, None, &message(1, 0, T0, &[t_a21(), data(3)])).unwrap();
        assert_eq!(out.records.len(), 3);
        // RFC 7011 §8.1 Figure T: Template ID 256, Field Count 0.
        let out = decode(&mut d, &session, None, &message(1, 3, T0, &[set(2, &hex("01 00 00 00"))])).unwrap();
        assert_eq!(out.withdrawn, [(1, 256)]);
        assert!(known(&d, &session, 1).is_empty());
        assert_eq!(d.stats().templates_withdrawn, 1);
        // Data for it now has no template: held for later (§9.3), not decoded.
        let out = decode(&mut d, &session, None, &message(1, 3, T0, &[data(1)])).unwrap();
        assert!(out.records.is_empty());
        assert_eq!(d.stats().sets_buffered, 1);
    }
}

#[test]
fn withdrawal_ignored_and_counted_over_udp() {
    // RFC 7011 §8.4: the collector MUST ignore withdrawals over UDP.
    let mut d = Decoder::new(Config::default());
    decode(&mut d, &udp(), None, &message(1, 0, T0, &[t_a21(), data(3)])).unwrap();
    let out = decode(&mut d, &udp(), None, &message(1, 3, T0, &[set(2, &hex("01 00 00 00 00 02 00 00"))])).unwrap();
    assert!(out.withdrawn.is_empty() && out.withdrawn_all.is_empty());
    assert_eq!(d.stats().withdrawals_ignored_udp, 2);
    assert_eq!(d.stats().templates_withdrawn, 0);
    let out = decode(&mut d, &udp(), None, &message(1, 3, T0, &[data(2)])).unwrap();
    assert_eq!(values_of(&out, 256), [rec1(), rec1()]);
}

#[test]
fn withdraw_all_templates_then_all_options_templates() {
    // RFC 7011 §8.1 Figures U and V, written by the encoder.
    let mut enc = MessageEncoder::new(ObservationDomainId(1));
    enc.add_template(Template { id: TemplateId(256), scope_field_count: 0, fields: [8, 12, 15, 2, 1].map(|i| FieldSpecifier::iana(i, 4)).to_vec() })
        .unwrap();
    enc.add_template(Template {
        id: TemplateId(258),
        scope_field_count: 1,
        fields: vec![FieldSpecifier::iana(141, 4), FieldSpecifier::iana(41, 2), FieldSpecifier::iana(42, 2)],
    })
    .unwrap();
    let defs = enc.finish(T0).remove(0);
    enc.withdraw_all_templates().unwrap();
    let all_t = enc.finish(T0).remove(0);
    // Figure U: Set ID 2, Length 8, Template ID 2, Field Count 0.
    assert_eq!(&all_t[16..], hex("00 02 00 08 00 02 00 00").as_slice());
    assert!(enc.template(TemplateId(256)).is_none() && enc.template(TemplateId(258)).is_some());
    enc.withdraw_all_options_templates().unwrap();
    let all_o = enc.finish(T0).remove(0);
    // Figure V: Set ID 3, Length 8, Template ID 3, Field Count 0.
    assert_eq!(&all_o[16..], hex("00 03 00 08 00 03 00 00").as_slice());

    let mut d = Decoder::new(Config::default());
    decode(&mut d, &tcp(), None, &defs).unwrap();
    assert_eq!(known(&d, &tcp(), 1).keys().copied().collect::<Vec<_>>(), [256, 258]);
    let out = decode(&mut d, &tcp(), None, &all_t).unwrap();
    assert_eq!(out.withdrawn_all, [(1, false)]);
    assert_eq!(known(&d, &tcp(), 1).keys().copied().collect::<Vec<_>>(), [258]);
    let out = decode(&mut d, &tcp(), None, &all_o).unwrap();
    assert_eq!(out.withdrawn_all, [(1, true)]);
    assert!(known(&d, &tcp(), 1).is_empty());
}

#[test]
fn options_template_withdrawal_has_no_scope_count() {
    // RFC 7011 §8.1: options template withdrawals are 4 octets too.
    let mut enc = MessageEncoder::new(ObservationDomainId(1));
    enc.add_template(Template {
        id: TemplateId(258),
        scope_field_count: 1,
        fields: vec![FieldSpecifier::iana(141, 4), FieldSpecifier::iana(41, 2), FieldSpecifier::iana(42, 2)],
    })
    .unwrap();
    let defs = enc.finish(T0).remove(0);
    assert_eq!(&defs[16..], hex(A41)[..22].iter().copied().enumerate().map(|(i, b)| if i == 3 { 0x16 } else { b }).collect::<Vec<_>>().as_slice());
    enc.withdraw_template(TemplateId(258)).unwrap();
    let w = enc.finish(T0).remove(0);
    assert_eq!(&w[16..], hex("00 03 00 08 01 02 00 00").as_slice());
    let mut d = Decoder::new(Config::default());
    decode(&mut d, &tcp(), None, &defs).unwrap();
    let out = decode(&mut d, &tcp(), None, &w).unwrap();
    assert_eq!(out.withdrawn, [(1, 258)]);
}

#[test]
fn unknown_withdrawal_is_ignored_and_counted() {
    // RFC 7011 §8.1: an unknown ID withdrawn: MUST ignore, SHOULD log.
    let mut d = Decoder::new(Config::default());
    decode(&mut d, &tcp(), None, &message(1, 0, T0, &[t_a21()])).unwrap();
    let out = decode(&mut d, &tcp(), None, &message(1, 0, T0, &[set(2, &hex("01 2c 00 00"))])).unwrap();
    assert!(out.withdrawn.is_empty());
    assert_eq!(d.stats().withdrawals_unknown, 1);
    assert_eq!(known(&d, &tcp(), 1).len(), 1);
}

#[test]
fn encoder_transport_rules() {
    // RFC 7011 §8.4: no withdrawals over UDP.
    let mut enc = MessageEncoder::new(ObservationDomainId(1)).with_transport(Transport::Udp);
    let t = Template { id: TemplateId(256), scope_field_count: 0, fields: vec![FieldSpecifier::iana(8, 4)] };
    enc.add_template(t.clone()).unwrap();
    assert_eq!(enc.withdraw_template(TemplateId(256)), Err(EncodeError::WithdrawalOverUdp));
    assert_eq!(enc.withdraw_all_templates(), Err(EncodeError::WithdrawalOverUdp));
    // Over UDP a changed definition replaces the old one (§8.4).
    let t2 = Template { id: TemplateId(256), scope_field_count: 0, fields: vec![FieldSpecifier::iana(12, 4)] };
    enc.add_template(t2.clone()).unwrap();
    assert_eq!(enc.template(TemplateId(256)), Some(&t2));
    // RFC 7011 §8.1: over TCP an ID is reused only after its withdrawal;
    // re-sending the same definition is fine.
    let mut enc = MessageEncoder::new(ObservationDomainId(1)).with_transport(Transport::Tcp);
    enc.add_template(t.clone()).unwrap();
    enc.add_template(t.clone()).unwrap();
    assert_eq!(enc.add_template(t2.clone()), Err(EncodeError::TemplateIdInUse { template_id: TemplateId(256) }));
    enc.withdraw_template(TemplateId(256)).unwrap();
    enc.add_template(t2).unwrap();
    // Unknown IDs are not withdrawn.
    assert_eq!(enc.withdraw_template(TemplateId(999)), Err(EncodeError::UnknownTemplate { template_id: TemplateId(999) }));
}

// ---------------------------------------------------------------------------
// Template definitions (RFC 7011 §3.4, §8)

#[test]
fn redefinition_replaces() {
    let t2 = set(2, &tpl(256, &[(8, 4), (2, 8)]));
    let d2 = set(256, &hex("c0 00 02 63 00 00 00 00 00 00 00 2a"));
    for (session, faults) in [(udp(), 0), (tcp(), 1)] {
        let mut d = Decoder::new(Config::default());
        decode(&mut d, &session, None, &message(1, 0, T0, &[t_a21()])).unwrap();
        // Identical re-send: a refresh, not a new template (§8.1).
        let out = decode(&mut d, &session, None, &message(1, 0, T0, &[t_a21()])).unwrap();
        assert!(out.learned.is_empty());
        assert_eq!(d.stats().templates_refreshed, 1);
        // A different definition replaces it: MUST replace over UDP
        // (§8.4); over TCP it is an exporter fault (§8.1), counted.
        let out = decode(&mut d, &session, None, &message(1, 0, T0, &[t2.clone(), d2.clone()])).unwrap();
        assert_eq!(out.learned, [(1, 256, true)]);
        assert_eq!(values_of(&out, 256), [vec![OwnedValue::Ipv4(Ipv4Addr::new(192, 0, 2, 99)), OwnedValue::Unsigned(42)]]);
        assert_eq!(d.stats().templates_replaced, 1);
        assert_eq!(d.stats().redefinitions_without_withdrawal, faults);
    }
}

#[test]
fn templates_are_keyed_by_session_domain_and_id() {
    // RFC 7011 §3.4.1, §8: the same ID in two domains of one session, and in
    // two sessions, names different templates.
    let mut d = Decoder::new(Config::default());
    let other = set(2, &tpl(256, &[(8, 4), (2, 8)]));
    let other_rec = set(256, &hex("c0 00 02 63 00 00 00 00 00 00 00 2a"));
    decode(&mut d, &tcp(), None, &message(1, 0, T0, &[t_a21()])).unwrap();
    decode(&mut d, &tcp(), None, &message(2, 0, T0, std::slice::from_ref(&other))).unwrap();
    decode(&mut d, &tcp2(), None, &message(1, 0, T0, &[set(2, &tpl(256, &[(12, 4)]))])).unwrap();

    let out = decode(&mut d, &tcp(), None, &message(1, 0, T0, &[data(1)])).unwrap();
    assert_eq!(values_of(&out, 256), [rec1()]);
    let out = decode(&mut d, &tcp(), None, &message(2, 0, T0, std::slice::from_ref(&other_rec))).unwrap();
    assert_eq!(values_of(&out, 256), [vec![OwnedValue::Ipv4(Ipv4Addr::new(192, 0, 2, 99)), OwnedValue::Unsigned(42)]]);
    let out = decode(&mut d, &tcp2(), None, &message(1, 0, T0, &[set(256, &hex("c6 33 64 07"))])).unwrap();
    assert_eq!(values_of(&out, 256), [vec![OwnedValue::Ipv4(Ipv4Addr::new(198, 51, 100, 7))]]);
    // Domain 2 of the second session never defined 256.
    let out = decode(&mut d, &tcp2(), None, &message(2, 0, T0, &[other_rec])).unwrap();
    assert!(out.records.is_empty());
    // Withdrawing in one domain leaves the others alone.
    decode(&mut d, &tcp(), None, &message(1, 1, T0, &[set(2, &hex("01 00 00 00"))])).unwrap();
    assert!(known(&d, &tcp(), 1).is_empty());
    assert_eq!(known(&d, &tcp(), 2).len(), 1);
    assert_eq!(known(&d, &tcp2(), 1).len(), 1);
    // Ending a session drops its templates only (§8: never carried over).
    d.end_session(&tcp());
    assert!(known(&d, &tcp(), 2).is_empty());
    assert_eq!(known(&d, &tcp2(), 1).len(), 1);
}

#[test]
fn template_problems_are_rejected_and_counted() {
    let mut d = Decoder::new(Config::default());
    // RFC 7011 §3.4.2.2: Scope Field Count MUST NOT be zero.
    let no_scope = set(3, &hex("01 02 00 01 00 00 00 8d 00 04"));
    // RFC 7011 §3.4.1: Template IDs 0-255 are not for templates.
    let reserved = set(2, &tpl(255, &[(8, 4)]));
    let out = decode(&mut d, &tcp(), None, &message(1, 0, T0, &[no_scope, reserved])).unwrap();
    assert_eq!(out.rejected, [(258, TemplateProblem::NoScope), (255, TemplateProblem::ReservedId)]);
    assert_eq!(d.stats().templates_rejected.get("no-scope"), Some(&1));
    assert_eq!(d.stats().templates_rejected.get("reserved-id"), Some(&1));
    assert!(known(&d, &tcp(), 1).is_empty());
}

#[test]
fn max_templates_per_session_is_counted() {
    let mut d = Decoder::new(Config::default().with_max_templates_per_session(2));
    let tset = set(2, &[tpl(256, &[(8, 4)]), tpl(257, &[(12, 4)]), tpl(258, &[(15, 4)])].concat());
    let out = decode(&mut d, &tcp(), None, &message(1, 0, T0, &[tset])).unwrap();
    assert_eq!(out.learned.len(), 2);
    assert_eq!(out.rejected, [(258, TemplateProblem::LimitReached)]);
    assert_eq!(d.stats().templates_rejected.get("limit-reached"), Some(&1));
    // The bound is per session, across domains.
    let out = decode(&mut d, &tcp(), None, &message(2, 0, T0, &[set(2, &tpl(300, &[(8, 4)]))])).unwrap();
    assert_eq!(out.rejected, [(300, TemplateProblem::LimitReached)]);
    // Another session has its own bound; a withdrawal frees a slot.
    let out = decode(&mut d, &tcp2(), None, &message(1, 0, T0, &[set(2, &tpl(300, &[(8, 4)]))])).unwrap();
    assert_eq!(out.learned.len(), 1);
    decode(&mut d, &tcp(), None, &message(1, 0, T0, &[set(2, &hex("01 00 00 00"))])).unwrap();
    let out = decode(&mut d, &tcp(), None, &message(1, 0, T0, &[set(2, &tpl(258, &[(15, 4)]))])).unwrap();
    assert_eq!(out.learned, [(1, 258, false)]);
}

// ---------------------------------------------------------------------------
// Data before its template (RFC 7011 §8, §9.3)

#[test]
fn data_before_template_is_buffered_then_replayed() {
    let mut d = Decoder::new(Config::default());
    let out = decode(&mut d, &udp(), at(100), &message(1, 0, T0, &[data(3)])).unwrap();
    assert!(out.records.is_empty());
    assert_eq!(d.stats().sets_buffered, 1);
    let out = decode(&mut d, &udp(), at(101), &message(1, 3, T0 + 1, &[t_a21()])).unwrap();
    assert_eq!(out.records.len(), 3);
    assert!(out.records.iter().all(|r| r.replayed && r.values == rec1()));
    assert_eq!(d.stats().sets_replayed, 1);
    assert_eq!(d.stats().records_decoded, 3);
    // Decoded late, not lost: no sequence gap, nothing counted as skipped.
    assert_eq!(d.stats().sequence_gap_records, 0);
    assert_eq!(d.stats().records_skipped_by_sequence, 0);
    // Nothing left to flush.
    assert_eq!(d.flush_pending(), 0);
}

#[test]
fn data_before_template_in_the_same_message() {
    // RFC 7011 §8.2 wants the template first; a collector can still use it.
    let mut d = Decoder::new(Config::default());
    let out = decode(&mut d, &udp(), at(100), &message(1, 0, T0, &[data(2), t_a21()])).unwrap();
    assert_eq!(values_of(&out, 256), [rec1(), rec1()]);
    assert_eq!((d.stats().sets_buffered, d.stats().sets_replayed), (1, 1));
    let out = decode(&mut d, &udp(), at(101), &message(1, 2, T0, &[data(1)])).unwrap();
    assert!(out.gaps.is_empty());
    assert_eq!(d.stats().records_skipped_by_sequence, 0);
}

#[test]
fn unknown_template_skipped_when_buffer_bound_is_zero() {
    let mut d = Decoder::new(Config::default().with_max_pending_bytes(0));
    let out = decode(&mut d, &udp(), at(100), &message(1, 0, T0, &[data(3)])).unwrap();
    assert_eq!(out.skipped, [(256, SkipReason::UnknownTemplate)]);
    assert_eq!(d.stats().sets_skipped.get("unknown-template"), Some(&1));
    assert_eq!(d.stats().sets_buffered, 0);
    // The template arriving later replays nothing.
    let out = decode(&mut d, &udp(), at(101), &message(1, 3, T0, &[t_a21()])).unwrap();
    assert!(out.records.is_empty());
    // The sequence numbers account for the 3 records that were not decoded.
    let out = decode(&mut d, &udp(), at(102), &message(1, 3, T0, &[data(1)])).unwrap();
    assert!(out.gaps.is_empty());
    assert_eq!(d.stats().records_skipped_by_sequence, 3);
}

#[test]
fn template_that_never_arrives_is_counted() {
    let mut d = Decoder::new(Config::default());
    decode(&mut d, &udp(), at(100), &message(1, 0, T0, &[data(3)])).unwrap();
    decode(&mut d, &udp(), at(100), &message(2, 0, T0, &[data(1)])).unwrap();
    assert_eq!(d.flush_pending(), 2);
    assert_eq!(d.stats().sets_skipped.get("template-never-arrived"), Some(&2));
    // Ending a session counts what it still held.
    decode(&mut d, &tcp(), None, &message(1, 0, T0, &[data(1)])).unwrap();
    assert_eq!(d.end_session(&tcp()), 1);
    assert_eq!(d.stats().sets_skipped.get("template-never-arrived"), Some(&3));
}

#[test]
fn buffered_sets_expire_by_export_time() {
    // Config::max_pending_age (default 60 s) against Export Times (§9.3:
    // "comparing Export Times").
    let mut d = Decoder::new(Config::default());
    decode(&mut d, &udp(), None, &message(1, 0, T0, &[data(1)])).unwrap();
    decode(&mut d, &udp(), None, &message(1, 1, T0 + 61, &[set(300, &hex("00 00 00 01"))])).unwrap();
    assert_eq!(d.stats().sets_skipped.get("template-never-arrived"), Some(&1));
    let out = decode(&mut d, &udp(), None, &message(1, 2, T0 + 62, &[t_a21()])).unwrap();
    assert!(out.records.is_empty());
}

// ---------------------------------------------------------------------------
// UDP template lifetime (RFC 7011 §8.4, RFC 6728 templateLifeTime 1800 s)

#[test]
fn udp_templates_expire_by_the_callers_clock() {
    let mut d = Decoder::new(Config::default().with_template_lifetime(Some(Duration::from_secs(1800))));
    decode(&mut d, &udp(), at(1000), &message(1, 0, T0, &[t_a21()])).unwrap();
    let out = decode(&mut d, &udp(), at(2800), &message(1, 0, T0, &[data(1)])).unwrap();
    assert_eq!(out.records.len(), 1);
    // A refresh restarts the lifetime.
    decode(&mut d, &udp(), at(2000), &message(1, 1, T0, &[t_a21()])).unwrap();
    let out = decode(&mut d, &udp(), at(3700), &message(1, 1, T0, &[data(1)])).unwrap();
    assert_eq!(out.records.len(), 1);
    // 1801 s after the last refresh it is gone.
    let out = decode(&mut d, &udp(), at(3801), &message(1, 2, T0, &[data(1)])).unwrap();
    assert!(out.records.is_empty());
    assert_eq!(d.stats().templates_expired, 1);
    // TCP templates live until withdrawn or the session ends (§8).
    decode(&mut d, &tcp(), at(0), &message(1, 0, T0, &[t_a21()])).unwrap();
    let out = decode(&mut d, &tcp(), at(1_000_000), &message(1, 0, T0, &[data(1)])).unwrap();
    assert_eq!(out.records.len(), 1);
}

// ---------------------------------------------------------------------------
// Set IDs and message shape (RFC 7011 §3, §3.3.2)

#[test]
fn reserved_set_ids_are_skipped_and_counted() {
    // Set IDs 0, 1 (not used) and 4-255 (reserved): skipped by their Length.
    let reserved: Vec<Vec<u8>> = [0u16, 1, 4, 255].iter().map(|id| set(*id, &hex("de ad be ef"))).collect();
    let mut sets = vec![t_a21()];
    sets.extend(reserved);
    sets.push(data(1));
    let mut d = Decoder::new(Config::default());
    let out = decode(&mut d, &tcp(), None, &message(1, 0, T0, &sets)).unwrap();
    assert_eq!(out.skipped.iter().map(|s| s.0).collect::<Vec<_>>(), [0, 1, 4, 255]);
    assert!(out.skipped.iter().all(|s| s.1 == SkipReason::ReservedSetId));
    assert_eq!(d.stats().sets_skipped.get("reserved-set-id"), Some(&4));
    assert_eq!(values_of(&out, 256), [rec1()]);
}

#[test]
fn a_message_may_hold_no_sets() {
    // RFC 7011 §3: zero or more Sets after the 16-octet header.
    let mut d = Decoder::new(Config::default());
    let out = decode(&mut d, &tcp(), None, &message(1, 0, T0, &[])).unwrap();
    assert!(out.records.is_empty() && out.skipped.is_empty());
    assert_eq!(d.stats().messages_malformed, 0);
}

// ---------------------------------------------------------------------------
// Malformed messages (RFC 7011 §9.1: the collector MUST discard the whole message)

/// Decodes `good` first, then `bad`; checks the error, that nothing but the
/// malformed counters changed, and that the next message still decodes.
fn assert_discarded(config: Config, session: TransportSession, good: &[u8], bad: &[u8], expected: Malformed) {
    let mut d = Decoder::new(config);
    decode(&mut d, &session, None, good).unwrap();
    let stats_before = d.stats().clone();
    let templates_before: Vec<_> = [1, 2].iter().map(|dom| known(&d, &session, *dom)).collect();
    let domains_before = domain_stats(&d);
    let err = d.decode(&session, None, bad).unwrap_err();
    assert_eq!(err.problem, expected);
    assert_eq!(err.session, session);
    let mut stats_expected: Stats = stats_before;
    stats_expected.messages += 1;
    stats_expected.octets += bad.len() as u64;
    stats_expected.messages_malformed += 1;
    *stats_expected.malformed_by_reason.entry(expected.reason()).or_default() += 1;
    assert_eq!(d.stats(), &stats_expected);
    let templates_after: Vec<_> = [1, 2].iter().map(|dom| known(&d, &session, *dom)).collect();
    assert_eq!(templates_after, templates_before);
    assert_eq!(domain_stats(&d), domains_before);
    // The stream goes on.
    let out = decode(&mut d, &session, None, &message(1, 1, T0, &[data(1)])).unwrap();
    assert_eq!(values_of(&out, 256), [rec1()]);
    assert!(out.gaps.is_empty() && out.late.is_empty());
}

fn good() -> Vec<u8> {
    // Template 256, a variable-length template 300 (interfaceName) and a
    // list template 301 (basicList), one record of 256.
    let tset = set(2, &[hex(&A21[12..]), tpl(300, &[(82, 65535)]), tpl(301, &[(291, 65535)])].concat());
    message(1, 0, T0, &[tset, data(1)])
}

#[test]
fn malformed_set_length_past_the_end() {
    // RFC 7011 §9.1: a Set longer than the message.
    let mut bad = message(1, 1, T0, &[data(1)]);
    bad[18..20].copy_from_slice(&80u16.to_be_bytes());
    let expected = Malformed::BadSetLength { offset: 16, set_id: 256, length: 80, remaining: 24 };
    assert_discarded(Config::default(), tcp(), &good(), &bad, expected);
}

#[test]
fn malformed_set_length_below_header() {
    // RFC 7011 §3.3.2: the Length covers at least the 4-octet Set Header.
    let mut bad = message(1, 1, T0, &[data(1)]);
    bad[18..20].copy_from_slice(&2u16.to_be_bytes());
    let expected = Malformed::BadSetLength { offset: 16, set_id: 256, length: 2, remaining: 24 };
    assert_discarded(Config::default(), tcp(), &good(), &bad, expected);
}

#[test]
fn malformed_variable_length_field_past_set_end() {
    // RFC 7011 §9.1: a variable-length field longer than its Set. The
    // record says 10 octets, 2 follow.
    let bad = message(1, 1, T0, &[set(300, &hex("0a 41 42"))]);
    let expected = Malformed::RecordOverrun { offset: 20, template_id: TemplateId(300), field_index: 0, needed: 11, available: 3 };
    assert_discarded(Config::default(), tcp(), &good(), &bad, expected);
    // The same with the 3-octet form (RFC 7011 §7).
    let bad = message(1, 1, T0, &[set(300, &hex("ff 00 0a 41 42"))]);
    let expected = Malformed::RecordOverrun { offset: 20, template_id: TemplateId(300), field_index: 0, needed: 13, available: 5 };
    assert_discarded(Config::default(), tcp(), &good(), &bad, expected);
}

#[test]
fn malformed_bad_version() {
    // RFC 7011 §3.1: version 10; §9.1: others are malformed (9 is NetFlow v9).
    let mut bad = message(1, 1, T0, &[data(1)]);
    bad[1] = 9;
    assert_discarded(Config::default(), tcp(), &good(), &bad, Malformed::BadVersion { version: 9 });
}

#[test]
fn malformed_header_length_mismatch() {
    // RFC 7011 §3.1: Length is the whole message.
    let mut bad = message(1, 1, T0, &[data(1)]);
    bad[2..4].copy_from_slice(&44u16.to_be_bytes());
    assert_discarded(Config::default(), tcp(), &good(), &bad, Malformed::LengthMismatch { declared: 44, available: 40 });
    // Shorter than a header (§9.1: "message shorter than 16").
    let bad = &message(1, 1, T0, &[])[..10];
    assert_discarded(Config::default(), tcp(), &good(), bad, Malformed::Truncated { offset: 0, needed: 16, available: 10 });
}

#[test]
fn malformed_template_record_past_set_end() {
    // A Template Record announcing 5 fields with room for 1.
    let bad = message(1, 1, T0, &[set(2, &hex("01 05 00 05 00 08 00 04"))]);
    assert_discarded(Config::default(), tcp(), &good(), &bad, Malformed::TemplateOverrun { offset: 20, template_id: 261 });
}

/// A valid Template Set, then a Data Set whose Set Length (99) runs past
/// the message end (RFC 7011 §3.3.2), for `domain`.
fn template_then_overlong_set(domain: u32, seq: u32) -> (Vec<u8>, Malformed) {
    let mut bad = message(domain, seq, T0, &[set(2, &tpl(400, &[(8, 4)])), data(1)]);
    let at = bad.len() - 22;
    bad[at..at + 2].copy_from_slice(&99u16.to_be_bytes());
    (bad, Malformed::BadSetLength { offset: 28, set_id: 256, length: 99, remaining: 24 })
}

#[test]
fn malformed_message_teaches_no_template() {
    // A valid Template Set before the bad Set is not learned either.
    let (bad, expected) = template_then_overlong_set(1, 1);
    assert_discarded(Config::default(), tcp(), &good(), &bad, expected);
}

#[test]
fn malformed_message_from_a_new_domain_leaves_no_state() {
    // The first message of domain 2 is malformed: no domain appears.
    let (bad, expected) = template_then_overlong_set(2, 0);
    assert_discarded(Config::default(), tcp(), &good(), &bad, expected);
}

#[test]
fn malformed_message_from_a_new_session_leaves_no_state() {
    // Hostile or broken exporters must not fill the session table with
    // malformed messages (Config::max_sessions).
    let mut d = Decoder::new(Config::default().with_max_sessions(1));
    let bad = message(1, 0, T0, &[set(256, &hex("00"))[..2].to_vec()]);
    assert!(d.decode(&tcp2(), None, &bad).is_err());
    assert!(domain_stats(&d).is_empty());
    let out = decode(&mut d, &tcp(), None, &good()).unwrap();
    assert_eq!(values_of(&out, 256), [rec1()]);
    assert_eq!(d.stats().messages_session_limit, 0);
}

#[test]
fn malformed_list_overrun() {
    // RFC 6313 §4.5.1 + RFC 7011 §9.1: a basicList of 4-octet elements
    // ending with a 1-octet fragment. The field starts at offset 20 + 3.
    let bad = message(1, 1, T0, &[set(301, &hex("ff 00 0a 03 00 0e 00 04 00 00 00 01 00"))]);
    let expected = Malformed::BadList { offset: 32, template_id: TemplateId(301), problem: ListProblem::ElementOverrun };
    assert_discarded(Config::default(), tcp(), &good(), &bad, expected);
    // A subTemplateMultiList entry whose Data Records Length is below 4.
    let good2 = message(1, 0, T0, &[set(2, &[hex(&A21[12..]), tpl(302, &[(293, 65535)])].concat()), data(1)]);
    let bad = message(1, 1, T0, &[set(302, &hex("ff 00 05 03 01 00 00 02"))]);
    let expected = Malformed::BadList { offset: 24, template_id: TemplateId(302), problem: ListProblem::BadEntryLength { length: 2 } };
    assert_discarded(Config::default(), tcp(), &good2, &bad, expected);
}

#[test]
fn malformed_lists_nested_past_the_depth_bound() {
    // Three nested basicLists with a bound of 2; two levels still decode.
    let bl = |inner: OwnedValue| OwnedValue::BasicList { semantic: 3, element: FieldSpecifier::iana(291, 65535), values: vec![inner] };
    let leaf = OwnedValue::BasicList { semantic: 3, element: FieldSpecifier::iana(14, 4), values: vec![OwnedValue::Unsigned(1)] };
    let mut enc = MessageEncoder::new(ObservationDomainId(1)).with_sequence_number(1);
    enc.add_template(Template { id: TemplateId(301), scope_field_count: 0, fields: vec![FieldSpecifier::iana(291, 65535)] }).unwrap();
    enc.finish(T0);
    enc.push_record(TemplateId(301), &[bl(leaf.clone())]).unwrap();
    let two = enc.finish(T0).remove(0);
    enc.push_record(TemplateId(301), &[bl(bl(leaf.clone()))]).unwrap();
    let mut three = enc.finish(T0).remove(0);
    three[8..12].copy_from_slice(&1u32.to_be_bytes());
    let config = Config::default().with_max_list_depth(2);

    let mut d = Decoder::new(config.clone());
    decode(&mut d, &tcp(), None, &good()).unwrap();
    let out = decode(&mut d, &tcp(), None, &two).unwrap();
    assert_eq!(values_of(&out, 301), [vec![bl(leaf)]]);

    // Offsets: Set body at 20; 3-octet prefix; outer header 5; element
    // prefix 3; middle header 5; element prefix 3: the third list is at 39.
    let expected = Malformed::BadList { offset: 39, template_id: TemplateId(301), problem: ListProblem::TooDeep { limit: 2 } };
    assert_discarded(config, tcp(), &good(), &three, expected);
}

// ---------------------------------------------------------------------------
// Sequence numbers (RFC 7011 §3.1 + Errata EID 4396, §10.3.2)

#[test]
fn sequence_gaps_late_and_duplicates() {
    let mut d = Decoder::new(Config::default());
    let s = udp();
    // Templates do not count: the first data message also carries 0.
    decode(&mut d, &s, None, &message(1, 0, T0, &[t_a21()])).unwrap();
    let out = decode(&mut d, &s, None, &message(1, 0, T0, &[data(2)])).unwrap();
    assert!(out.gaps.is_empty());
    // 3 records (2, 3, 4) lost.
    let out = decode(&mut d, &s, None, &message(1, 5, T0, &[data(1)])).unwrap();
    assert_eq!(out.gaps, [(2, 5, 3)]);
    assert_eq!(d.stats().sequence_gap_records, 3);
    // Record 2 arrives late: reordered, not lost.
    let out = decode(&mut d, &s, None, &message(1, 2, T0, &[data(1)])).unwrap();
    assert_eq!(out.late, [(6, 2)]);
    assert_eq!(d.stats().sequence_gap_records, 2);
    // The same message again: a duplicate.
    let out = decode(&mut d, &s, None, &message(1, 2, T0, &[data(1)])).unwrap();
    assert_eq!(out.late, [(6, 2)]);
    let (_, _, ds) = d.domain_stats().next().unwrap();
    assert_eq!((ds.sequence.reordered_records, ds.sequence.duplicate_records, ds.sequence.gap_records), (1, 1, 2));
    // In order again.
    let out = decode(&mut d, &s, None, &message(1, 6, T0, &[data(1)])).unwrap();
    assert!(out.gaps.is_empty() && out.late.is_empty());
}

#[test]
fn sequence_is_per_domain_and_wraps() {
    // RFC 7011 §3.1: per Observation Domain, "modulo 2^32".
    let mut d = Decoder::new(Config::default());
    decode(&mut d, &tcp(), None, &message(1, u32::MAX - 1, T0, &[t_a21(), data(3)])).unwrap();
    decode(&mut d, &tcp(), None, &message(2, 100, T0, &[t_a21(), data(1)])).unwrap();
    let out = decode(&mut d, &tcp(), None, &message(1, 1, T0, &[data(1)])).unwrap();
    assert!(out.gaps.is_empty());
    let out = decode(&mut d, &tcp(), None, &message(2, 101, T0, &[data(1)])).unwrap();
    assert!(out.gaps.is_empty());
}

#[test]
fn encoder_sequence_numbers_survive_splitting() {
    // Records split over many messages; each header counts the records
    // before it (RFC 7011 §3.1 + EID 4396), options records included.
    let mut enc = MessageEncoder::new(ObservationDomainId(1)).with_max_message_size(200).with_sequence_number(u32::MAX - 10);
    enc.add_template(Template { id: TemplateId(256), scope_field_count: 0, fields: [8, 12, 15, 2, 1].map(|i| FieldSpecifier::iana(i, 4)).to_vec() })
        .unwrap();
    enc.add_template(Template {
        id: TemplateId(258),
        scope_field_count: 1,
        fields: vec![FieldSpecifier::iana(141, 4), FieldSpecifier::iana(41, 2), FieldSpecifier::iana(42, 2)],
    })
    .unwrap();
    let opts = [OwnedValue::Unsigned(1), OwnedValue::Unsigned(2), OwnedValue::Unsigned(3)];
    for i in 0..50 {
        if i % 7 == 0 {
            enc.push_record(TemplateId(258), &opts).unwrap();
        }
        enc.push_record(TemplateId(256), &rec1()).unwrap();
    }
    let msgs = enc.finish(T0);
    assert!(msgs.len() > 5 && msgs.iter().all(|m| m.len() <= 200));
    let mut d = Decoder::new(Config::default());
    let mut n = 0;
    for m in &msgs {
        let out = decode(&mut d, &udp(), None, m).unwrap();
        assert!(out.gaps.is_empty() && out.late.is_empty());
        n += out.records.len();
    }
    assert_eq!(n, 58);
    assert_eq!(d.stats().options_records_decoded, 8);
    assert_eq!(enc.sequence_number(), (u32::MAX - 10).wrapping_add(58));
}

// ---------------------------------------------------------------------------
// Abstract data types (RFC 7011 §6)

fn one_field(ie: u16, len: u16, values: &str) -> Vec<OwnedValue> {
    let t = set(2, &tpl(256, &[(ie, len)]));
    let mut d = Decoder::new(Config::default());
    let out = decode(&mut d, &tcp(), None, &message(1, 0, T0, &[t, set(256, &hex(values))])).unwrap();
    out.records.into_iter().map(|r| r.values.into_iter().next().unwrap()).collect()
}

#[test]
fn boolean_two_is_false() {
    // RFC 7011 §6.1.5: true is 1, false is 2; other values
    // are undefined. dataRecordsReliability (276) is a boolean (IANA).
    assert_eq!(one_field(276, 1, "01 02 00"), [OwnedValue::Bool(true), OwnedValue::Bool(false), OwnedValue::Invalid(vec![0])]);
    let mut enc = MessageEncoder::new(ObservationDomainId(1));
    enc.add_template(Template { id: TemplateId(256), scope_field_count: 0, fields: vec![FieldSpecifier::iana(276, 1)] }).unwrap();
    enc.push_record(TemplateId(256), &[OwnedValue::Bool(false)]).unwrap();
    assert_eq!(enc.finish(T0)[0].last(), Some(&2));
}

#[test]
fn reduced_size_signed_values_are_sign_extended() {
    // RFC 7011 §6.2: signedness preserved. mibObjectValueInteger (434) is
    // signed32 (IANA).
    assert_eq!(one_field(434, 1, "ff 80 7f"), [-1, -128, 127].map(OwnedValue::Signed));
    assert_eq!(one_field(434, 2, "ff 7f 80 00"), [-129, -32768].map(OwnedValue::Signed));
    assert_eq!(one_field(434, 3, "80 00 00"), [OwnedValue::Signed(-8_388_608)]);
    // Unsigned ones are widened: octetDeltaCount (unsigned64) in 3 octets.
    assert_eq!(one_field(1, 3, "01 00 00 ff ff ff"), [OwnedValue::Unsigned(65536), OwnedValue::Unsigned(16_777_215)]);
    // The encoder writes the same octets and refuses what does not fit.
    let mut enc = MessageEncoder::new(ObservationDomainId(1));
    enc.add_template(Template { id: TemplateId(256), scope_field_count: 0, fields: vec![FieldSpecifier::iana(434, 2)] }).unwrap();
    enc.push_record(TemplateId(256), &[OwnedValue::Signed(-129)]).unwrap();
    assert!(matches!(enc.push_record(TemplateId(256), &[OwnedValue::Signed(-32769)]), Err(EncodeError::DoesNotFit { length: 2, .. })));
    let m = enc.finish(T0).remove(0);
    assert_eq!(&m[m.len() - 2..], &[0xff, 0x7f]);
}

#[test]
fn date_time_encodings() {
    // RFC 7011 §6.1.9: dateTimeMicroseconds is an NTP timestamp whose low 11
    // fraction bits MUST be ignored; §6.1.10: all bits count for
    // nanoseconds. NTP seconds 0xE0000000 = 3,758,096,384; minus 2,208,988,800
    // = 1,549,107,584 s since 1970.
    let secs = 0xE000_0000i64 - NTP_UNIX_OFFSET;
    assert_eq!(secs, 1_549_107_584);
    let micro = one_field(154, 8, "e0 00 00 00 80 00 07 ff  e0 00 00 00 80 00 00 00");
    assert_eq!(micro, vec![OwnedValue::DateTime(DateTime { secs, nanos: 500_000_000 }); 2]);
    // 0x800007ff / 2^32 s = 0.500000476... s.
    let nano = one_field(156, 8, "e0 00 00 00 80 00 07 ff");
    assert_eq!(nano, [OwnedValue::DateTime(DateTime { secs, nanos: 500_000_476 })]);
    // §6.1.8: dateTimeMilliseconds is a UNIX-epoch unsigned64 (flowStartMilliseconds 152).
    let ms = one_field(152, 8, "00 00 01 8b cf e5 68 01");
    assert_eq!(ms, [OwnedValue::DateTime(DateTime { secs: 1_700_000_000, nanos: 1_000_000 })]);
    // §6.1.7: dateTimeSeconds (flowStartSeconds 150).
    assert_eq!(one_field(150, 4, "65 53 f1 00"), [OwnedValue::DateTime(DateTime { secs: 1_700_000_000, nanos: 0 })]);

    // The encoder keeps the low 11 bits zero (§6.1.9: they SHOULD be zero).
    let mut enc = MessageEncoder::new(ObservationDomainId(1));
    enc.add_template(Template { id: TemplateId(256), scope_field_count: 0, fields: vec![FieldSpecifier::iana(154, 8)] }).unwrap();
    enc.push_record(TemplateId(256), &[OwnedValue::DateTime(DateTime { secs, nanos: 123_456_789 })]).unwrap();
    let m = enc.finish(T0).remove(0);
    let fraction = u32::from_be_bytes(m[m.len() - 4..].try_into().unwrap());
    assert_eq!(fraction & 0x7ff, 0);
    assert_eq!(&m[m.len() - 8..m.len() - 4], &[0xe0, 0, 0, 0]);
}

#[test]
fn float64_may_be_sent_as_float32() {
    // RFC 7011 §6.2: float64 in 4 octets is a float32. samplingProbability
    // (311) is float64 (IANA); 0.15 as binary32 is 0x3e19999a.
    let v = one_field(311, 4, "3e 19 99 9a");
    assert_eq!(v, [OwnedValue::Float(f64::from(0.15f32))]);
    let mut enc = MessageEncoder::new(ObservationDomainId(1));
    enc.add_template(Template { id: TemplateId(256), scope_field_count: 0, fields: vec![FieldSpecifier::iana(311, 4)] }).unwrap();
    enc.push_record(TemplateId(256), &[OwnedValue::Float(0.15)]).unwrap();
    assert!(matches!(enc.push_record(TemplateId(256), &[OwnedValue::Float(1e300)]), Err(EncodeError::DoesNotFit { .. })));
    assert!(enc.finish(T0)[0].ends_with(&[0x3e, 0x19, 0x99, 0x9a]));
}

#[test]
fn encoder_refuses_lengths_the_type_forbids() {
    // RFC 7011 §6.2: no reduced size for addresses, dateTime*, boolean, mac.
    let mut enc = MessageEncoder::new(ObservationDomainId(1));
    for (ie, len) in [(8u16, 3u16), (150, 2), (276, 2), (56, 4), (311, 2), (1, 9), (8, 65535)] {
        let t = Template { id: TemplateId(256), scope_field_count: 0, fields: vec![FieldSpecifier::iana(ie, len)] };
        assert!(matches!(enc.add_template(t), Err(EncodeError::FieldLength { .. })), "ie {ie} length {len}");
    }
    // RFC 7011 §3.4.2.2 and §3.4.1 as the decoder checks them.
    let t = Template { id: TemplateId(255), scope_field_count: 0, fields: vec![FieldSpecifier::iana(8, 4)] };
    assert_eq!(enc.add_template(t), Err(EncodeError::BadTemplate { template_id: TemplateId(255), problem: TemplateProblem::ReservedId }));
    let t = Template { id: TemplateId(256), scope_field_count: 2, fields: vec![FieldSpecifier::iana(8, 4)] };
    assert!(matches!(enc.add_template(t), Err(EncodeError::BadTemplate { problem: TemplateProblem::ScopeExceedsFields, .. })));
    // A 15-bit element id (RFC 7011 §3.2).
    let t = Template { id: TemplateId(256), scope_field_count: 0, fields: vec![FieldSpecifier::enterprise(32473, 0x8001, 4)] };
    assert!(matches!(enc.add_template(t), Err(EncodeError::ElementIdOutOfRange { id: 0x8001, .. })));
    assert!(enc.is_empty());
}

/// RFC 7011 §9.3 lets a collector keep records whose template is unknown and
/// decode them once it arrives. A buffered set whose lengths then turn out
/// not to fit (its message was accepted before the template was known) is
/// skipped and counted under its own reason, never silently dropped.
#[test]
fn buffered_set_that_does_not_fit_its_template_is_counted() {
    let mut decoder = Decoder::new(Config::default());
    let session = tcp();
    // interfaceName (IE 82) variable-length: the record says 5 octets follow,
    // only 1 does (RFC 7011 §7).
    let early = message(9, 0, 1_764_633_600, &[set(256, &[0x05, b'x'])]);
    assert!(decoder.decode(&session, None, &early).is_ok());
    assert_eq!(decoder.stats().sets_buffered, 1);
    let template = message(9, 1, 1_764_633_601, &[set(2, &tpl(256, &[(82, 65535)]))]);
    assert!(decoder.decode(&session, None, &template).is_ok());
    assert_eq!(decoder.stats().sets_skipped.get("malformed-when-replayed"), Some(&1));
    assert_eq!(decoder.stats().records_decoded, 0);
}

/// RFC 7011 §9.1: a malformed message is discarded whole. That includes the
/// UDP template expiry (RFC 7011 §8.4, lifetime from `Config`) its time
/// would trigger: only an accepted message moves template state.
#[test]
fn malformed_message_expires_no_template() {
    let mut decoder = Decoder::new(Config::default());
    let session = udp();
    let define = message(1, 0, T0, &[set(2, &tpl(256, &[(8, 4)]))]);
    assert!(decoder.decode(&session, Some(Duration::from_secs(u64::from(T0))), &define).is_ok());
    let later = Some(Duration::from_secs(u64::from(T0) + 7200));
    // Set length 99 runs past the end of the message.
    let bad = message(1, 0, T0 + 7200, &[vec![0x01, 0x00, 0x00, 99]]);
    assert!(decoder.decode(&session, later, &bad).is_err());
    assert_eq!(decoder.stats().templates_expired, 0);
    assert!(decoder.templates(&session, ObservationDomainId(1)).is_some_and(|t| t.contains_key(&256)));
    let empty = message(1, 0, T0 + 7200, &[]);
    assert!(decoder.decode(&session, later, &empty).is_ok());
    assert_eq!(decoder.stats().templates_expired, 1);
}
