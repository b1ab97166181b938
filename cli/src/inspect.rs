//! `flowsift inspect`: what is in a capture. Exporters, observation
//! domains, templates with their fields, record counts, time ranges,
//! sequence loss, template redefinitions and withdrawals, malformed
//! messages; a human report or JSON.
//!
//! One pass through [`pipeline::Runner`]; this module only collects the
//! template history the accounting does not keep, and renders.

use std::collections::{BTreeMap, HashMap};
use std::io::Write;
use std::process::ExitCode;
use std::sync::Arc;

use anyhow::Context;
use ipfix_core::{Event, Plan, TransportSession, VARIABLE_LENGTH};
use serde::Serialize;

use crate::convert::{bytes, capture_options, reasons, thousands};
use crate::pipeline::{self, rfc3339, Accounting, EventContext, Inputs, Progress, Runner};

const AFTER_HELP: &str = "\
Reads the same inputs as convert (classic pcap, pcapng, RFC 5655 IPFIX files,
'-' for standard input; recognised by content) in one pass and reports, per
exporter (Transport Session: exporter and collector address and port, and
protocol) and observation domain:
  - messages, records decoded and skipped, malformed messages by reason;
  - the Export Time range, and the capture time range of each session;
  - sequence accounting: records lost (gaps), reordered and duplicated;
  - every template and options template with its fields (Information Element
    name, id, enterprise number, abstract data type, length), the records of
    each version, and when it was redefined or withdrawn.

Exit status: 0 when the inputs were read (problems are reported, not fatal);
2 on errors (unreadable or unknown input).

Examples:
  # What does this capture hold?
  flowsift inspect exporter-a.pcapng

  # Only the totals and exporters, without field lists
  flowsift inspect window-*.pcap --no-fields

  # For a script: templates of domain 7 with jq
  flowsift inspect capture.pcap --format json \\
      | jq '.exporters[].domains[] | select(.observationDomainId == 7) | .templates'";

/// Output format.
#[derive(Debug, Clone, Copy, PartialEq, Eq, clap::ValueEnum)]
pub enum Format {
    /// A report for people.
    Table,
    /// One JSON document.
    Json,
}

/// Arguments of `flowsift inspect`, as given.
#[derive(Debug, clap::Args)]
#[command(after_help = AFTER_HELP)]
pub struct InspectArgs {
    /// Captures to read: classic pcap, pcapng or RFC 5655 IPFIX files, or -
    /// for standard input.
    #[arg(value_name = "INPUT", required = true)]
    pub inputs: Vec<String>,

    /// Output format.
    #[arg(long, value_enum, value_name = "FORMAT", default_value_t = Format::Table)]
    pub format: Format,

    /// Leave out the field lists of templates (table format).
    #[arg(long)]
    pub no_fields: bool,

    /// Take only UDP/TCP traffic to or from these ports as IPFIX
    /// (comma-separated). Default: any port, recognised by content.
    #[arg(long, value_name = "PORT[,PORT...]", value_delimiter = ',')]
    pub ports: Vec<u16>,

    /// No progress bar.
    #[arg(short, long)]
    pub quiet: bool,
}

/// `flowsift inspect`, validated.
#[derive(Debug)]
pub struct InspectConfig {
    /// The inputs, checked and recognised.
    pub inputs: Inputs,
    /// Capture and decoder settings.
    pub runner: Runner,
    /// Output format.
    pub format: Format,
    /// Print field lists.
    pub fields: bool,
    /// No bar.
    pub quiet: bool,
}

impl TryFrom<InspectArgs> for InspectConfig {
    type Error = anyhow::Error;

    fn try_from(args: InspectArgs) -> anyhow::Result<Self> {
        let inputs = Inputs::open(&args.inputs)?;
        Ok(Self {
            inputs,
            runner: Runner { capture: capture_options(&args.ports), ..Runner::default() },
            format: args.format,
            fields: !args.no_fields,
            quiet: args.quiet,
        })
    }
}

/// Most versions of one Template ID kept with their fields; later ones are
/// counted only.
const MAX_VERSIONS: usize = 32;
/// Most template events (withdrawals, rejections) listed per domain.
const MAX_EVENTS: usize = 100;

/// Where in the inputs something happened.
#[derive(Debug, Clone, Serialize)]
#[serde(rename_all = "camelCase")]
pub struct Place {
    /// The input.
    pub input: String,
    /// 1-based IPFIX Message number within the input.
    pub message: u64,
    /// The message's Export Time.
    pub export_time: String,
}

/// One field of a template.
#[derive(Debug, Clone, Serialize)]
#[serde(rename_all = "camelCase")]
pub struct FieldReport {
    /// The IANA name, or `pen{PEN}_ie{ID}` / `ie{ID}` when unnamed.
    pub name: String,
    /// Information Element id.
    pub element_id: u16,
    /// Enterprise number (null for IANA elements).
    pub enterprise_number: Option<u32>,
    /// Abstract data type used to decode it (RFC 7012 §3.1).
    pub data_type: &'static str,
    /// Field Length on the wire; null when variable-length (RFC 7011 §7).
    pub length: Option<u16>,
    /// True for an options template scope field.
    pub scope: bool,
    /// True when the length does not suit the type (decoded as octets).
    pub length_mismatch: bool,
}

/// One version of a template.
#[derive(Debug, Clone, Serialize)]
#[serde(rename_all = "camelCase")]
pub struct TemplateReport {
    /// The Template ID.
    pub template_id: u16,
    /// `data` or `options`.
    pub kind: &'static str,
    /// 1 for the first definition seen, 2 after a redefinition, ...
    pub version: u32,
    /// Records decoded with this version.
    pub records: u64,
    /// Where it was (first) defined.
    pub defined_at: Place,
    /// Scope fields (options templates).
    pub scope_field_count: u16,
    /// The fields, in record order.
    pub fields: Vec<FieldReport>,
    /// Record length when every field is fixed-length.
    pub record_length: Option<usize>,
    /// Where it was replaced by a new definition, if it was.
    pub redefined_at: Option<Place>,
    /// Where it was withdrawn, if it was.
    pub withdrawn_at: Option<Place>,
}

/// A template that was not accepted.
#[derive(Debug, Clone, Serialize)]
#[serde(rename_all = "camelCase")]
pub struct RejectedTemplate {
    /// Its Template ID.
    pub template_id: u16,
    /// Why.
    pub problem: String,
    /// Where.
    pub at: Place,
}

/// The versions of one Template ID kept with their plans, and how many
/// more were seen but not kept.
type Versions = (Vec<(Arc<Plan>, TemplateReport)>, u32);

#[derive(Debug, Default)]
struct DomainTemplates {
    /// By Template ID.
    versions: BTreeMap<u16, Versions>,
    rejected: Vec<RejectedTemplate>,
    events_dropped: u64,
}

/// What `inspect` adds to the accounting, per (session, domain).
#[derive(Debug, Default)]
struct Collector {
    domains: HashMap<(TransportSession, u32), DomainTemplates>,
}

fn place(ctx: &EventContext<'_>) -> Place {
    Place { input: ctx.source.name.clone(), message: ctx.message, export_time: rfc3339(u64::from(ctx.header.export_time)) }
}

fn fields_of(plan: &Plan) -> Vec<FieldReport> {
    plan.fields()
        .iter()
        .map(|f| {
            let e = f.spec.element;
            let name = match (e.enterprise, f.name()) {
                (Some(pen), _) => format!("pen{pen}_ie{}", e.id),
                (None, Some(n)) => n.to_owned(),
                (None, None) => format!("ie{}", e.id),
            };
            FieldReport {
                name,
                element_id: e.id,
                enterprise_number: e.enterprise,
                data_type: f.data_type.name(),
                length: (f.spec.length != VARIABLE_LENGTH).then_some(f.spec.length),
                scope: f.is_scope,
                length_mismatch: f.length_mismatch,
            }
        })
        .collect()
}

impl Collector {
    fn event(&mut self, ctx: &EventContext<'_>, event: &Event<'_>) {
        let domain = ctx.header.observation_domain_id.0;
        let d = self.domains.entry((*ctx.session, domain)).or_default();
        match event {
            Event::TemplateLearned { plan, .. } => {
                let id = plan.id().0;
                let (versions, dropped) = d.versions.entry(id).or_default();
                let at = place(ctx);
                if let Some((_, last)) = versions.last_mut() {
                    if last.withdrawn_at.is_none() && last.redefined_at.is_none() {
                        last.redefined_at = Some(at.clone());
                    }
                }
                if versions.len() >= MAX_VERSIONS {
                    *dropped += 1;
                    return;
                }
                let version = versions.len() as u32 + *dropped + 1;
                let report = TemplateReport {
                    template_id: id,
                    kind: if plan.is_options() { "options" } else { "data" },
                    version,
                    records: 0,
                    defined_at: at,
                    scope_field_count: plan.template().scope_field_count,
                    fields: fields_of(plan),
                    record_length: plan.fixed_len(),
                    redefined_at: None,
                    withdrawn_at: None,
                };
                versions.push((Arc::clone(plan), report));
            }
            Event::TemplateWithdrawn { template_id, .. } => {
                if let Some((versions, _)) = d.versions.get_mut(&template_id.0) {
                    if let Some((_, last)) = versions.last_mut() {
                        last.withdrawn_at.get_or_insert_with(|| place(ctx));
                    }
                }
            }
            Event::AllTemplatesWithdrawn { options, .. } => {
                for (versions, _) in d.versions.values_mut() {
                    if let Some((plan, last)) = versions.last_mut() {
                        if plan.is_options() == *options {
                            last.withdrawn_at.get_or_insert_with(|| place(ctx));
                        }
                    }
                }
            }
            Event::TemplateRejected { template_id, problem, .. } => {
                if d.rejected.len() < MAX_EVENTS {
                    d.rejected.push(RejectedTemplate { template_id: template_id.0, problem: problem.to_string(), at: place(ctx) });
                } else {
                    d.events_dropped += 1;
                }
            }
            Event::Data(set) => {
                if let Some((versions, _)) = d.versions.get_mut(&set.plan().id().0) {
                    if let Some((_, r)) = versions.iter_mut().rev().find(|(p, _)| Arc::ptr_eq(p, set.plan())) {
                        r.records += set.len() as u64;
                    }
                }
            }
            _ => {}
        }
    }
}

/// One observation domain in the `inspect` report.
#[derive(Debug, Serialize)]
#[serde(rename_all = "camelCase")]
pub struct DomainView {
    /// The accounting of the domain.
    #[serde(flatten)]
    pub counts: pipeline::DomainReport,
    /// Template versions, by Template ID then version.
    pub templates: Vec<TemplateReport>,
    /// Template versions seen but not listed (past the per-ID limit).
    pub template_versions_not_listed: u64,
    /// Templates rejected.
    pub rejected_templates: Vec<RejectedTemplate>,
}

/// One exporter (Transport Session) in the `inspect` report.
#[derive(Debug, Serialize)]
#[serde(rename_all = "camelCase")]
pub struct ExporterView {
    /// Who and when, as the conversion accounting has it.
    #[serde(flatten)]
    pub session: pipeline::SessionSummary,
    /// Its observation domains.
    pub domains: Vec<DomainView>,
}

/// The `inspect --format json` document.
#[derive(Debug, Serialize)]
#[serde(rename_all = "camelCase")]
pub struct InspectReport {
    /// Always `inspect`.
    pub command: &'static str,
    /// Earliest Export Time over all domains.
    pub first_export_time: Option<String>,
    /// Latest Export Time.
    pub last_export_time: Option<String>,
    /// Inputs with their capture counters.
    pub inputs: Vec<pipeline::InputReport>,
    /// Totals (same fields as `convert --stats-json`, without the tables).
    pub totals: Totals,
    /// Per exporter and domain.
    pub exporters: Vec<ExporterView>,
    /// The first malformed messages, with where they are.
    pub malformed_examples: Vec<pipeline::MalformedExample>,
    /// Problems worth knowing.
    pub warnings: Vec<String>,
}

/// Run-wide totals.
#[derive(Debug, Serialize)]
#[serde(rename_all = "camelCase")]
pub struct Totals {
    /// Octets read and of IPFIX.
    pub bytes: pipeline::BytesReport,
    /// Messages.
    pub messages: u64,
    /// Malformed messages.
    pub messages_malformed: u64,
    /// By reason.
    pub malformed_by_reason: BTreeMap<String, u64>,
    /// Records decoded.
    pub records_decoded: u64,
    /// Options records decoded.
    pub options_records_decoded: u64,
    /// Records skipped.
    pub records_skipped: u64,
    /// By reason.
    pub records_skipped_by_reason: BTreeMap<String, u64>,
    /// Sets skipped by reason.
    pub sets_skipped_by_reason: BTreeMap<String, u64>,
    /// Records lost by sequence numbers.
    pub sequence_gap_records: u64,
    /// Templates.
    pub templates: pipeline::TemplateReport,
    /// Capture-level counters.
    pub capture: pipeline::CaptureReport,
}

fn build_report(acc: Accounting, mut collector: Collector) -> InspectReport {
    let keys = acc.session_keys().to_vec();
    let mut exporters = Vec::with_capacity(acc.exporters.len());
    let (mut first, mut last): (Option<String>, Option<String>) = (None, None);
    for (key, s) in keys.iter().zip(acc.exporters.iter()) {
        let mut domains = Vec::with_capacity(s.domains.len());
        for d in &s.domains {
            let t = collector.domains.remove(&(*key, d.observation_domain_id)).unwrap_or_default();
            let mut not_listed = 0u64;
            let mut templates = Vec::new();
            for (_, (versions, dropped)) in t.versions {
                not_listed += u64::from(dropped);
                templates.extend(versions.into_iter().map(|(_, r)| r));
            }
            // RFC 3339 strings of one format sort as times.
            if let Some(f) = &d.first_export_time {
                if first.as_ref().is_none_or(|x| f < x) {
                    first = Some(f.clone());
                }
            }
            if let Some(l) = &d.last_export_time {
                if last.as_ref().is_none_or(|x| l > x) {
                    last = Some(l.clone());
                }
            }
            domains.push(DomainView {
                counts: d.clone(),
                templates,
                template_versions_not_listed: not_listed,
                rejected_templates: t.rejected,
            });
        }
        exporters.push(ExporterView { session: s.session.clone(), domains });
    }
    InspectReport {
        command: "inspect",
        first_export_time: first,
        last_export_time: last,
        inputs: acc.inputs.clone(),
        totals: Totals {
            bytes: acc.bytes,
            messages: acc.messages,
            messages_malformed: acc.messages_malformed,
            malformed_by_reason: acc.malformed_by_reason.clone(),
            records_decoded: acc.records_decoded,
            options_records_decoded: acc.options_records_decoded,
            records_skipped: acc.records_skipped,
            records_skipped_by_reason: acc.records_skipped_by_reason.clone(),
            sets_skipped_by_reason: acc.sets_skipped_by_reason.clone(),
            sequence_gap_records: acc.sequence_gap_records,
            templates: acc.templates.clone(),
            capture: acc.capture.clone(),
        },
        exporters,
        malformed_examples: acc.malformed_examples.clone(),
        warnings: acc.warnings.clone(),
    }
}

/// Reads the inputs and builds the report.
pub fn inspect(config: &InspectConfig, progress: &Progress) -> anyhow::Result<InspectReport> {
    let mut collector = Collector::default();
    let acc = config.runner.run_pass(&config.inputs, progress, "inspecting", |ctx, event| {
        collector.event(ctx, &event);
        Ok(())
    })?;
    Ok(build_report(acc, collector))
}

/// Runs `flowsift inspect`.
pub fn run(args: InspectArgs) -> anyhow::Result<ExitCode> {
    let config = InspectConfig::try_from(args)?;
    let progress = Progress::new(!config.quiet);
    let report = inspect(&config, &progress)?;
    let mut out = std::io::stdout().lock();
    match config.format {
        Format::Json => {
            serde_json::to_writer_pretty(&mut out, &report).context("cannot write JSON")?;
            out.write_all(b"\n")?;
        }
        Format::Table => write_table(&mut out, &report, config.fields)?,
    }
    out.flush()?;
    Ok(ExitCode::SUCCESS)
}

/// The human report.
pub fn write_table(out: &mut impl Write, r: &InspectReport, fields: bool) -> std::io::Result<()> {
    let t = &r.totals;
    writeln!(out, "INPUTS")?;
    for i in &r.inputs {
        let mut extra = String::new();
        if i.capture.packets > 0 {
            extra += &format!("{} packets, ", thousands(i.capture.packets));
        }
        extra += &format!("{} IPFIX messages", thousands(i.capture.ipfix_messages));
        let skipped = i.capture.packets_skipped();
        if skipped > 0 {
            extra += &format!(", {} packets not IPFIX ({})", thousands(skipped), reasons(&i.capture.packets_skipped_by_reason));
        }
        writeln!(out, "  {}  {}  {}  {}", i.path, i.format, bytes(i.bytes), extra)?;
        if let Some(s) = &i.stopped_early {
            writeln!(out, "    stopped early: {}", s.error)?;
        }
    }
    writeln!(out)?;
    writeln!(out, "TOTALS")?;
    writeln!(
        out,
        "  messages {}  malformed {}{}",
        thousands(t.messages),
        thousands(t.messages_malformed),
        paren(&reasons(&t.malformed_by_reason))
    )?;
    writeln!(
        out,
        "  records decoded {} (options {})  skipped {}{}  lost by sequence {}",
        thousands(t.records_decoded),
        thousands(t.options_records_decoded),
        thousands(t.records_skipped),
        paren(&reasons(&t.records_skipped_by_reason)),
        thousands(t.sequence_gap_records)
    )?;
    writeln!(
        out,
        "  templates learned {}  redefined {}  withdrawn {}  rejected {}",
        thousands(t.templates.learned),
        thousands(t.templates.redefined),
        thousands(t.templates.withdrawn),
        thousands(t.templates.rejected)
    )?;
    if let (Some(f), Some(l)) = (&r.first_export_time, &r.last_export_time) {
        writeln!(out, "  export time {f} .. {l}")?;
    }
    for e in &r.exporters {
        writeln!(out)?;
        let (domains, e) = (&e.domains, &e.session);
        let who = match (&e.exporter, &e.collector) {
            (Some(x), Some(c)) => format!("{} {x} -> {c}", e.transport.to_uppercase()),
            _ => format!("FILE {}", e.input),
        };
        let captured = match (&e.first_captured, &e.last_captured) {
            (Some(f), Some(l)) => format!("  captured {f} .. {l}"),
            _ => String::new(),
        };
        writeln!(out, "EXPORTER {who}{captured}")?;
        if e.messages_malformed_without_domain > 0 {
            writeln!(out, "  {} malformed messages without a readable header", thousands(e.messages_malformed_without_domain))?;
        }
        for d in domains {
            let c = &d.counts;
            writeln!(
                out,
                "  DOMAIN {}  messages {}  records {}  skipped {}  lost {}  reordered {}  duplicated {}  malformed {}{}",
                c.observation_domain_id,
                thousands(c.messages),
                thousands(c.records_decoded),
                thousands(c.records_skipped),
                thousands(c.sequence_gap_records),
                thousands(c.reordered_records),
                thousands(c.duplicate_records),
                thousands(c.messages_malformed),
                paren(&reasons(&c.malformed_by_reason))
            )?;
            if let (Some(f), Some(l)) = (&c.first_export_time, &c.last_export_time) {
                writeln!(out, "    export time {f} .. {l}")?;
            }
            for tr in &d.templates {
                let mut notes = Vec::new();
                if let Some(p) = &tr.redefined_at {
                    notes.push(format!("redefined at message #{} of {}", p.message, p.input));
                }
                if let Some(p) = &tr.withdrawn_at {
                    notes.push(format!("withdrawn at message #{} of {}", p.message, p.input));
                }
                let scope = if tr.kind == "options" { format!(", {} scope", tr.scope_field_count) } else { String::new() };
                writeln!(
                    out,
                    "    TEMPLATE {} v{} ({}{scope}, {} fields, {} records, defined at message #{}){}",
                    tr.template_id,
                    tr.version,
                    tr.kind,
                    tr.fields.len(),
                    thousands(tr.records),
                    tr.defined_at.message,
                    if notes.is_empty() { String::new() } else { format!(" {}", notes.join(", ")) }
                )?;
                if fields {
                    writeln!(out, "      {:>3}  {:<36} {:>6} {:>8}  {:<22} {:>6}", "#", "FIELD", "ID", "PEN", "TYPE", "LENGTH")?;
                    for (i, f) in tr.fields.iter().enumerate() {
                        let pen = f.enterprise_number.map_or_else(|| "-".to_owned(), |p| p.to_string());
                        let len = f.length.map_or_else(|| "var".to_owned(), |l| l.to_string());
                        let mark = match (f.scope, f.length_mismatch) {
                            (true, _) => " scope",
                            (_, true) => " (length does not fit type: octets)",
                            _ => "",
                        };
                        writeln!(out, "      {:>3}  {:<36} {:>6} {:>8}  {:<22} {:>6}{mark}", i + 1, f.name, f.element_id, pen, f.data_type, len)?;
                    }
                }
            }
            if d.template_versions_not_listed > 0 {
                writeln!(out, "    ({} more template versions not listed)", thousands(d.template_versions_not_listed))?;
            }
            for rj in &d.rejected_templates {
                writeln!(out, "    REJECTED template {} at message #{} of {}: {}", rj.template_id, rj.at.message, rj.at.input, rj.problem)?;
            }
        }
    }
    if !r.malformed_examples.is_empty() {
        writeln!(out)?;
        writeln!(out, "MALFORMED MESSAGES (first {})", r.malformed_examples.len())?;
        for m in &r.malformed_examples {
            let domain = m.observation_domain_id.map(|d| format!(", domain {d}")).unwrap_or_default();
            let when = m.captured.as_ref().map(|c| format!(", captured {c}")).unwrap_or_default();
            writeln!(out, "  {} message #{} ({}{domain}{when}): {}", m.input, m.message, m.session, m.detail)?;
        }
    }
    for w in &r.warnings {
        writeln!(out)?;
        writeln!(out, "warning: {w}")?;
    }
    Ok(())
}

fn paren(s: &str) -> String {
    if s.is_empty() {
        String::new()
    } else {
        format!(" ({s})")
    }
}
