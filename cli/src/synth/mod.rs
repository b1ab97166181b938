//! `flowsift synth`: synthetic IPFIX captures of invented scenarios, with
//! the ground truth of every drop episode written beside them.
//!
//! A scenario is a fictional network and a timeline (see `--list`). The
//! generator plays it for the requested number of flow records and
//! duration: exporters announce templates and options (interface names,
//! VRF names, the sampler, the system init time) and re-send them every
//! five minutes as UDP exporters must (RFC 7011 §8.4), flow records are
//! pre-encoded and appended raw, and full messages (at most 1400 octets)
//! stream to a buffered file, so memory stays bounded whatever the size.
//! Everything random comes from one PRNG seeded by `--seed`; time is an
//! argument (`--start`), never the clock: the same arguments give the
//! same bytes.
//!
//! Beside `FILE` goes `FILE.truth.json`: for each episode where (in the
//! short names `flowsift drops --by` uses), why (the `forwardingReason`),
//! when, the expected class, and how much it dropped.

mod network;
mod records;
mod scenario;
mod truth;
mod writer;

#[cfg(test)]
mod tests;

use std::fs::File;
use std::io::{BufWriter, Write};
use std::net::SocketAddr;
use std::path::{Path, PathBuf};
use std::process::ExitCode;
use std::time::Instant;

use anyhow::{bail, Context};
use ipfix_core::{DateTime, MessageEncoder, ObservationDomainId, OwnedValue, TemplateId};

use records::{encode, flow_template, layout, options_templates, Flow, T_IF_NAMES, T_INIT_TIME, T_SELECTOR, T_VRF_NAMES};
use scenario::{Generator, Scenario, Slot, Timeline, SCENARIOS};
use writer::{CaptureWriter, Endpoints};

pub use writer::Format;

/// Default start: Monday 2026-11-30 00:30:00 UTC (ms since the UNIX epoch).
const DEFAULT_START_MS: u64 = 1_795_998_600_000;
/// Default length: one hour.
const DEFAULT_DURATION_MS: u64 = 3_600_000;
/// Default flow records per hour of capture.
const DEFAULT_RECORDS_PER_HOUR: u64 = 120_000;
/// Largest message: fits a 1500-octet Ethernet MTU with IPv6 and UDP
/// headers (RFC 7011 §10.3.3).
const MAX_MESSAGE: u16 = 1400;
/// An exporter sends what it has at least this often (ms).
const EXPORT_INTERVAL_MS: u64 = 10_000;
/// Templates and options records are re-sent this often (ms). RFC 6728's
/// default refresh is 600 s; we refresh twice as often.
const REFRESH_MS: u64 = 300_000;
/// Flow records in the planted lost message.
const LOST_RECORDS: usize = 10;

fn after_help() -> String {
    let mut text = String::from("Scenarios:\n");
    for s in SCENARIOS {
        text.push_str(&format!("  {:<24} {}\n", s.name, s.summary));
    }
    text.push_str(
        "
The capture format follows the extension of FILE (.pcap, .pcapng, .ipfix)
unless --format says otherwise. Times in the scenario scale with --duration.
--records counts flow records (options records come on top).

Examples:
  # The demo hour, then the questions (see sample-captures/README.md)
  flowsift synth --scenario regional-carrier -o demo.pcapng

  # Same story, another seed, as an RFC 5655 file
  flowsift synth --scenario regional-carrier -o demo.ipfix --seed 7

  # Benchmark input: ten million records over a day
  flowsift synth --scenario regional-carrier -o big.pcap --records 10000000 --duration 24h",
    );
    text
}

/// Arguments of `flowsift synth`, as given.
#[derive(Debug, clap::Args)]
#[command(after_help = after_help())]
pub struct SynthArgs {
    /// Describe the scenarios and exit.
    #[arg(long)]
    pub list: bool,

    /// The scenario to play (see --list).
    #[arg(long, value_name = "NAME", required_unless_present = "list")]
    pub scenario: Option<String>,

    /// The capture to write; the ground truth goes to FILE.truth.json.
    #[arg(short = 'o', long = "output", value_name = "FILE", required_unless_present = "list")]
    pub output: Option<PathBuf>,

    /// Seed of the generator: the same seed and arguments give the same bytes.
    #[arg(long, value_name = "N", default_value_t = 1)]
    pub seed: u64,

    /// Flow records to write (default: 120000 per hour of --duration).
    #[arg(long, value_name = "N")]
    pub records: Option<u64>,

    /// Length of the capture, e.g. 10m, 1h, 24h (default 1h).
    #[arg(long, value_name = "DURATION")]
    pub duration: Option<String>,

    /// Capture format (default: from the extension of FILE, else pcapng).
    #[arg(long, value_enum, value_name = "FORMAT")]
    pub format: Option<Format>,

    /// Start of the capture, RFC 3339 (default 2026-11-30T00:30:00Z).
    #[arg(long, value_name = "TIME")]
    pub start: Option<String>,

    /// Do not write FILE.truth.json.
    #[arg(long)]
    pub no_truth: bool,
}

/// `flowsift synth`, validated.
#[derive(Debug, Clone)]
pub struct SynthConfig {
    scenario: Scenario,
    output: PathBuf,
    seed: u64,
    records: u64,
    start_ms: u64,
    duration_ms: u64,
    format: Format,
    truth: Option<PathBuf>,
}

impl TryFrom<SynthArgs> for SynthConfig {
    type Error = anyhow::Error;

    fn try_from(args: SynthArgs) -> anyhow::Result<Self> {
        let name = args.scenario.context("--scenario is required")?;
        let Some(scenario) = scenario::scenario(&name) else {
            let names: Vec<&str> = SCENARIOS.iter().map(|s| s.name).collect();
            bail!("--scenario: unknown scenario {name:?} (known: {})", names.join(", "));
        };
        let output = args.output.context("-o FILE is required")?;
        let duration_ms = match &args.duration {
            Some(text) => {
                let d = flow_analytics::parse_duration(text).context("--duration")?;
                u64::try_from(d.as_millis()).unwrap_or(u64::MAX)
            }
            None => DEFAULT_DURATION_MS,
        };
        if !(60_000..=30 * 86_400_000).contains(&duration_ms) {
            bail!("--duration: between 1m and 30 days, please");
        }
        let records = args.records.unwrap_or_else(|| {
            let scaled = u128::from(DEFAULT_RECORDS_PER_HOUR) * u128::from(duration_ms) / 3_600_000;
            u64::try_from(scaled).unwrap_or(u64::MAX).max(1)
        });
        if records == 0 {
            bail!("--records: at least 1");
        }
        let start_ms = match &args.start {
            Some(text) => {
                let t = flow_analytics::parse_time(text).context("--start")?;
                u64::try_from(t.timestamp_millis()).context("--start: before 1970")?
            }
            None => DEFAULT_START_MS,
        };
        // Export Time is a 32-bit count of seconds (RFC 7011 §3.1); keep
        // the whole capture before it wraps.
        if (start_ms + duration_ms) / 1000 >= u64::from(u32::MAX) {
            bail!("--start: the capture must end before 2106-02-07");
        }
        let format = args.format.or_else(|| Format::from_path(&output)).unwrap_or(Format::Pcapng);
        let truth = (!args.no_truth).then(|| truth_path(&output));
        Ok(Self { scenario, output, seed: args.seed, records, start_ms, duration_ms, format, truth })
    }
}

/// `FILE.truth.json` beside `FILE`.
pub fn truth_path(output: &Path) -> PathBuf {
    let mut name = output.as_os_str().to_owned();
    name.push(".truth.json");
    PathBuf::from(name)
}

/// Runs `flowsift synth`.
pub fn run(args: SynthArgs) -> anyhow::Result<ExitCode> {
    if args.list {
        let stdout = std::io::stdout();
        let mut out = stdout.lock();
        for s in SCENARIOS {
            writeln!(out, "{}\n    {}\n", s.name, textwrap(s.details, 76, "    "))?;
        }
        return Ok(ExitCode::SUCCESS);
    }
    let config = SynthConfig::try_from(args)?;
    let began = Instant::now();
    let file = File::create(&config.output).with_context(|| format!("{}: cannot create", config.output.display()))?;
    let progress = indicatif::ProgressBar::new(config.records);
    let (_, report) = generate(&config, BufWriter::with_capacity(1 << 20, file), |done| progress.set_position(done))?;
    progress.finish_and_clear();
    if let Some(path) = &config.truth {
        let file = File::create(path).with_context(|| format!("{}: cannot create", path.display()))?;
        let mut out = BufWriter::new(file);
        serde_json::to_writer_pretty(&mut out, &report.truth)?;
        out.write_all(b"\n")?;
        out.flush()?;
    }
    let secs = began.elapsed().as_secs_f64();
    eprintln!(
        "flowsift synth: {} flow records + {} options records in {} messages, {} octets, to {} ({}) in {:.2}s ({:.0} records/s){}",
        report.flow_records,
        report.options_records,
        report.messages,
        report.bytes,
        config.output.display(),
        config.format.name(),
        secs,
        report.flow_records as f64 / secs.max(1e-9),
        config.truth.as_ref().map(|p| format!("; ground truth in {}", p.display())).unwrap_or_default(),
    );
    Ok(ExitCode::SUCCESS)
}

fn textwrap(text: &str, width: usize, indent: &str) -> String {
    let mut out = String::new();
    let mut line = 0;
    for word in text.split_whitespace() {
        if line > 0 && line + 1 + word.len() > width {
            out.push('\n');
            out.push_str(indent);
            line = 0;
        } else if line > 0 {
            out.push(' ');
            line += 1;
        }
        out.push_str(word);
        line += word.len();
    }
    out
}

/// What a run wrote, and the ground truth document.
#[derive(Debug)]
pub(crate) struct Report {
    pub flow_records: u64,
    pub options_records: u64,
    pub messages: u64,
    pub bytes: u64,
    pub truth: truth::Truth,
}

/// One Observation Domain's exporting process.
struct DomainOut {
    slot: Slot,
    encoder: MessageEncoder,
    endpoints: Endpoints,
    init_ms: u64,
    last_flush_ms: u64,
    last_refresh_ms: u64,
    buffered: bool,
    flow_records: u64,
    options_records: u64,
}

/// The planted export loss, as it happened.
#[derive(Debug, Clone, Copy)]
pub(crate) struct Loss {
    pub slot: usize,
    pub at_ms: u64,
    pub records: u64,
    pub messages: u64,
    /// Sequence Number the lost message carried (RFC 7011 §3.1).
    pub sequence_number: u32,
}

/// All exporters and the capture they write to.
struct Engine<W: Write> {
    domains: Vec<DomainOut>,
    sink: CaptureWriter<W>,
    last_ns: u64,
    scratch: Vec<u8>,
}

impl<W: Write> Engine<W> {
    fn new(slots: &[Slot], sink: CaptureWriter<W>, start_ms: u64) -> Self {
        let domains = slots
            .iter()
            .map(|slot| {
                let exporter = slot.exporter;
                let collector = SocketAddr::new(exporter.collector(), network::COLLECTOR_PORT);
                DomainOut {
                    slot: *slot,
                    encoder: MessageEncoder::new(ObservationDomainId(slot.spec.id)).with_max_message_size(MAX_MESSAGE),
                    endpoints: Endpoints {
                        exporter: SocketAddr::new(exporter.address, exporter.port),
                        collector,
                        exporter_mac: exporter.mac,
                        collector_mac: network::COLLECTOR_MAC,
                    },
                    init_ms: start_ms.saturating_sub(exporter.uptime_ms),
                    last_flush_ms: start_ms,
                    last_refresh_ms: start_ms,
                    buffered: false,
                    flow_records: 0,
                    options_records: 0,
                }
            })
            .collect();
        Self { domains, sink, last_ns: 0, scratch: Vec::with_capacity(512) }
    }

    /// Announces every domain's templates and options at `t`.
    fn start(&mut self, t: u64) -> anyhow::Result<()> {
        for d in 0..self.domains.len() {
            if let Some(domain) = self.domains.get_mut(d) {
                for id in domain.slot.templates() {
                    domain.encoder.add_template(flow_template(*id))?;
                }
                let sys_up = domain.slot.exporter.times == network::TimeStyle::SysUpTime;
                for template in options_templates(sys_up) {
                    domain.encoder.add_template(template)?;
                }
                options_data(domain)?;
            }
            self.flush(d, t)?;
        }
        Ok(())
    }

    /// Timers at `t`: template and options refresh, export interval.
    fn tick(&mut self, t: u64) -> anyhow::Result<()> {
        for d in 0..self.domains.len() {
            let Some(domain) = self.domains.get_mut(d) else { continue };
            if t.saturating_sub(domain.last_refresh_ms) >= REFRESH_MS {
                domain.encoder.refresh_templates()?;
                options_data(domain)?;
                domain.last_refresh_ms = t;
            }
            if domain.buffered && t.saturating_sub(domain.last_flush_ms) >= EXPORT_INTERVAL_MS {
                self.flush(d, t)?;
            }
        }
        Ok(())
    }

    /// Appends a flow record to domain `d` at time `t`; sends full messages.
    fn push(&mut self, d: usize, flow: &Flow, t: u64) -> anyhow::Result<()> {
        let Self { domains, sink, last_ns, scratch } = self;
        let Some(domain) = domains.get_mut(d) else { return Ok(()) };
        let template = domain.slot.template_for(flow);
        scratch.clear();
        encode(flow, layout(template), domain.init_ms, scratch);
        domain.encoder.push_raw(TemplateId(template), scratch)?;
        domain.buffered = true;
        domain.flow_records += 1;
        if domain.encoder.message_count() > 1 {
            let mut result = Ok(());
            let endpoints = domain.endpoints;
            domain.encoder.finish_full_with(export_time(t), |m| {
                if result.is_ok() {
                    result = send(sink, last_ns, &endpoints, t, m);
                }
            });
            result?;
        }
        Ok(())
    }

    /// Sends everything domain `d` holds, at `t`.
    fn flush(&mut self, d: usize, t: u64) -> anyhow::Result<()> {
        let Self { domains, sink, last_ns, .. } = self;
        let Some(domain) = domains.get_mut(d) else { return Ok(()) };
        let mut result = Ok(());
        let endpoints = domain.endpoints;
        domain.encoder.finish_with(export_time(t), |m| {
            if result.is_ok() {
                result = send(sink, last_ns, &endpoints, t, m);
            }
        });
        domain.buffered = false;
        domain.last_flush_ms = t;
        result
    }

    /// Loses `flows` at `t`: encoded (so the Sequence Number counts them)
    /// but never written.
    fn lose(&mut self, d: usize, t: u64, flows: &[Flow]) -> anyhow::Result<Loss> {
        self.flush(d, t)?;
        let Some(domain) = self.domains.get_mut(d) else { bail!("no domain {d}") };
        let sequence_number = domain.encoder.sequence_number();
        for flow in flows {
            let template = domain.slot.template_for(flow);
            self.scratch.clear();
            encode(flow, layout(template), domain.init_ms, &mut self.scratch);
            domain.encoder.push_raw(TemplateId(template), &self.scratch)?;
        }
        let messages = domain.encoder.finish(export_time(t)).len() as u64;
        Ok(Loss { slot: d, at_ms: t, records: flows.len() as u64, messages, sequence_number })
    }
}

/// Options records of a domain (RFC 7011 §3.4.2): interface names, VRF
/// names, the sampler (RFC 5476 §6.5.2.1: 1-in-N is interval 1, space
/// N-1) and, for sysUpTime exporters, the system init time.
fn options_data(domain: &mut DomainOut) -> anyhow::Result<()> {
    let exporter = domain.slot.exporter;
    let before = domain.encoder.sequence_number();
    for i in exporter.interfaces {
        domain.encoder.push_record(TemplateId(T_IF_NAMES), &[OwnedValue::Unsigned(u64::from(i.index)), OwnedValue::String(i.name.into())])?;
    }
    for v in network::VRFS {
        domain.encoder.push_record(TemplateId(T_VRF_NAMES), &[OwnedValue::Unsigned(u64::from(v.id)), OwnedValue::String(v.name.into())])?;
    }
    let n = exporter.sampling;
    domain.encoder.push_record(
        TemplateId(T_SELECTOR),
        &[
            OwnedValue::Unsigned(u64::from(exporter.selector)),
            OwnedValue::Unsigned(1),
            OwnedValue::Unsigned(1),
            OwnedValue::Unsigned(u64::from(n.saturating_sub(1))),
            OwnedValue::String(format!("1-in-{n} systematic count-based")),
        ],
    )?;
    if exporter.times == network::TimeStyle::SysUpTime {
        domain.encoder.push_record(
            TemplateId(T_INIT_TIME),
            &[OwnedValue::Unsigned(u64::from(domain.slot.spec.id)), OwnedValue::DateTime(DateTime::from_unix_millis(domain.init_ms))],
        )?;
    }
    domain.options_records += u64::from(domain.encoder.sequence_number().wrapping_sub(before));
    domain.buffered = true;
    Ok(())
}

/// Export Time: seconds since the UNIX epoch, mod 2^32 (RFC 7011 §3.1).
const fn export_time(t_ms: u64) -> u32 {
    ((t_ms / 1000) & 0xffff_ffff) as u32
}

/// Writes one message, sent at `t_ms`, arriving 250 µs later; capture
/// timestamps never go backwards.
fn send<W: Write>(sink: &mut CaptureWriter<W>, last_ns: &mut u64, endpoints: &Endpoints, t_ms: u64, message: &[u8]) -> anyhow::Result<()> {
    let ns = t_ms.saturating_mul(1_000_000).saturating_add(250_000).max(*last_ns);
    *last_ns = ns;
    sink.write_message(endpoints, ns, message)
}

/// Generates the capture of `config` into `out`; `progress` hears the
/// number of flow records done now and then. Returns the writer and what
/// was written.
pub(crate) fn generate<W: Write>(config: &SynthConfig, out: W, mut progress: impl FnMut(u64)) -> anyhow::Result<(W, Report)> {
    let timeline = Timeline::new(config.start_ms, config.duration_ms);
    let mut generator = Generator::new(config.scenario, config.seed, timeline, config.records);
    let sink = CaptureWriter::new(config.format, out)?;
    let mut engine = Engine::new(&generator.slots, sink, config.start_ms);
    engine.start(config.start_ms)?;
    let mut next_tick = config.start_ms + 1000;
    let mut loss = None;
    // Runs the timers up to `t`, planting the export loss on the way.
    let mut advance = |engine: &mut Engine<W>, generator: &mut Generator, next_tick: &mut u64, t: u64| -> anyhow::Result<()> {
        while *next_tick <= t {
            let tick = *next_tick;
            if loss.is_none() && tick >= timeline.loss_ms {
                let flows: Vec<Flow> = (0..LOST_RECORDS).map(|_| generator.uncounted(0, tick)).collect();
                loss = Some(engine.lose(0, tick, &flows)?);
            }
            engine.tick(tick)?;
            *next_tick += 1000;
        }
        Ok(())
    };
    for i in 0..config.records {
        let (slot, flow) = generator.record(i);
        advance(&mut engine, &mut generator, &mut next_tick, flow.end_ms)?;
        engine.push(slot, &flow, flow.end_ms)?;
        if i & 0xffff == 0 {
            progress(i);
        }
    }
    advance(&mut engine, &mut generator, &mut next_tick, timeline.end_ms.saturating_sub(1))?;
    let loss = loss;
    for d in 0..engine.domains.len() {
        engine.flush(d, timeline.end_ms)?;
    }
    progress(config.records);
    let flow_records = engine.domains.iter().map(|d| d.flow_records).sum();
    let options_records = engine.domains.iter().map(|d| d.options_records).sum();
    let messages = engine.sink.messages;
    let bytes = engine.sink.bytes();
    let domains: Vec<truth::DomainCounts> = engine
        .domains
        .iter()
        .map(|d| truth::DomainCounts { id: d.slot.spec.id, flow_records: d.flow_records, options_records: d.options_records, init_ms: d.init_ms })
        .collect();
    let out = engine.sink.finish()?;
    let doc = truth::build(config, &generator, &domains, loss.as_ref(), truth::Totals { flow_records, options_records, messages, bytes });
    Ok((out, Report { flow_records, options_records, messages, bytes, truth: doc }))
}
