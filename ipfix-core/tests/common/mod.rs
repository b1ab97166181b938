//! Helpers shared by the integration tests: hex input, hand-built messages
//! and Sets, documentation sessions, and decoding into owned values.
#![allow(dead_code, clippy::unwrap_used, clippy::indexing_slicing)]

use std::time::Duration;

use ipfix_core::{Decoder, Event, MessageError, OwnedValue, TransportSession};

/// The documentation Private Enterprise Number (RFC 5612).
pub const PEN: u32 = 32473;
/// [`PEN`] as it appears on the wire.
pub const PEN_HEX: &str = "00 00 7e d9";

/// Parses whitespace-separated hex octets.
pub fn hex(s: &str) -> Vec<u8> {
    s.split_whitespace().map(|b| u8::from_str_radix(b, 16).unwrap()).collect()
}

/// A Set (RFC 7011 §3.3.2): Set ID, Length, body.
pub fn set(id: u16, body: &[u8]) -> Vec<u8> {
    let mut out = id.to_be_bytes().to_vec();
    out.extend_from_slice(&u16::try_from(body.len() + 4).unwrap().to_be_bytes());
    out.extend_from_slice(body);
    out
}

/// A Message (RFC 7011 §3.1) with a correct Length around `sets`.
pub fn message(domain: u32, sequence: u32, export_time: u32, sets: &[Vec<u8>]) -> Vec<u8> {
    let body: Vec<u8> = sets.concat();
    let mut out = vec![0x00, 0x0a];
    out.extend_from_slice(&u16::try_from(body.len() + 16).unwrap().to_be_bytes());
    out.extend_from_slice(&export_time.to_be_bytes());
    out.extend_from_slice(&sequence.to_be_bytes());
    out.extend_from_slice(&domain.to_be_bytes());
    out.extend_from_slice(&body);
    out
}

/// A UDP session between documentation addresses (RFC 5737).
pub fn udp() -> TransportSession {
    TransportSession::udp("192.0.2.1:50000".parse().unwrap(), "198.51.100.9:4739".parse().unwrap())
}

/// A TCP session between documentation addresses (RFC 5737).
pub fn tcp() -> TransportSession {
    TransportSession::tcp("192.0.2.1:50000".parse().unwrap(), "198.51.100.9:4739".parse().unwrap())
}

/// A second TCP session from another exporter (RFC 5737).
pub fn tcp2() -> TransportSession {
    TransportSession::tcp("192.0.2.2:50000".parse().unwrap(), "198.51.100.9:4739".parse().unwrap())
}

/// Seconds as a receive time.
pub fn at(secs: u64) -> Option<Duration> {
    Some(Duration::from_secs(secs))
}

/// One decoded Data Record: its template and its values.
#[derive(Debug, Clone, PartialEq)]
pub struct Rec {
    pub template_id: u16,
    pub replayed: bool,
    pub values: Vec<OwnedValue>,
}

/// What a message produced, in a form tests can compare.
#[derive(Debug, Default)]
pub struct Outcome {
    pub records: Vec<Rec>,
    pub learned: Vec<(u32, u16, bool)>,
    pub withdrawn: Vec<(u32, u16)>,
    pub withdrawn_all: Vec<(u32, bool)>,
    pub rejected: Vec<(u16, ipfix_core::TemplateProblem)>,
    pub skipped: Vec<(u16, ipfix_core::SkipReason)>,
    pub gaps: Vec<(u32, u32, u32)>,
    pub late: Vec<(u32, u32)>,
}

/// Decodes one message and collects everything it said.
pub fn decode(decoder: &mut Decoder, session: &TransportSession, received: Option<Duration>, msg: &[u8]) -> Result<Outcome, MessageError> {
    let mut out = Outcome::default();
    for event in decoder.decode(session, received, msg)? {
        match event {
            Event::Data(set) => {
                for record in set.records() {
                    out.records.push(Rec {
                        template_id: set.plan().id().0,
                        replayed: set.replayed(),
                        values: record.fields().map(|f| f.value.to_owned_value()).collect(),
                    });
                }
            }
            Event::TemplateLearned { domain, plan, replaced } => out.learned.push((domain.0, plan.id().0, replaced)),
            Event::TemplateWithdrawn { domain, template_id } => out.withdrawn.push((domain.0, template_id.0)),
            Event::AllTemplatesWithdrawn { domain, options } => out.withdrawn_all.push((domain.0, options)),
            Event::TemplateRejected { template_id, problem, .. } => out.rejected.push((template_id.0, problem)),
            Event::SetSkipped { set_id, reason, .. } => out.skipped.push((set_id, reason)),
            Event::SequenceGap { expected, received, missing, .. } => out.gaps.push((expected, received, missing)),
            Event::SequenceLate { expected, received, .. } => out.late.push((expected, received)),
            _ => {}
        }
    }
    Ok(out)
}

/// Values of the records of template `id`.
pub fn values_of(outcome: &Outcome, id: u16) -> Vec<Vec<OwnedValue>> {
    outcome.records.iter().filter(|r| r.template_id == id).map(|r| r.values.clone()).collect()
}
