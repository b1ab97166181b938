//! The shared pipeline: inputs → capture reader → decoder → events, with an
//! exact account of what was decoded, skipped and lost, and the two-pass
//! conversion to Parquet.
//!
//! - [`Inputs::open`] checks every input before any work: it must exist,
//!   be readable and be a classic pcap, a pcapng or an RFC 5655 IPFIX file
//!   (detected by content, never by name). Standard input (`-`) is first
//!   copied to a temporary file, so memory stays bounded and it can be read
//!   twice like any file.
//! - [`Runner::run_pass`] reads every input in order through one
//!   [`Decoder`] and hands each decoder event to a callback; it keeps the
//!   [`Accounting`] while it goes. A malformed message is counted and the
//!   next one decodes; a truncated or damaged input keeps everything before
//!   the damage and says where it was.
//! - [`convert`] runs two passes (templates and options records first, so
//!   the schema and the enrichment are complete; then the records) and
//!   writes the flows and options tables with a writer thread.
//!
//! Decoding captures on the fly for another subcommand (e.g. `drops`
//! given pcap files) is [`convert`] into a temporary directory:
//!
//! ```text
//! let inputs = Inputs::open(&args)?;                 // checks every input
//! let dir = tempfile::tempdir()?;
//! let flows = dir.path().join("flows.parquet");
//! let settings = ConvertSettings {
//!     options: options_path_for(&flows),
//!     flows,
//!     sink: SinkOptions::default(),
//!     runner: Runner::default(),
//! };
//! let outcome = convert(&inputs, &settings, &Progress::new(true))?;
//! // query outcome.flows.path; outcome.accounting says what was skipped
//! ```
//!
//! Template state follows RFC 7011: a Transport Session is exporter
//! address and port, collector address and port and protocol, and is the
//! same across inputs (a capture split into several files keeps its UDP
//! templates); each RFC 5655 file is its own session (RFC 5655 §7.1), ended
//! with the file; a TCP session ends when the capture says so.

use std::fs::File;
use std::io::{IsTerminal, Read, Write};
use std::path::{Path, PathBuf};
use std::time::Duration;

use anyhow::{bail, Context};
use ipfix_core::capture::{detect, CaptureError, CaptureEvent, CaptureOptions, CaptureReader, InputFormat, SNIFF_LEN};
use ipfix_core::{Config, Decoder, Event, MessageHeader, TransportSession};

mod accounting;
mod progress;
mod twopass;

pub use accounting::{rfc3339, Accounting, BytesReport, MalformedExample, CaptureReport, DomainReport, InputReport, SessionReport, SessionSummary, TemplateReport};
pub use progress::Progress;
pub use twopass::{convert, options_path_for, ConvertOutcome, ConvertSettings, PassSeconds, TableSummary};

/// The name standard input goes by in messages and reports.
pub const STDIN_NAME: &str = "<stdin>";

/// One input, checked and sniffed.
#[derive(Debug, Clone)]
pub struct Input {
    /// The name shown in messages: the path as given, or `<stdin>`.
    pub name: String,
    /// Where it is read from (the spool file for standard input).
    pub path: PathBuf,
    /// The detected format.
    pub format: InputFormat,
    /// Size in octets.
    pub size: u64,
}

/// The inputs of a run, in command-line order. Holds the spool file of
/// standard input, deleted when this is dropped.
#[derive(Debug)]
pub struct Inputs {
    list: Vec<Input>,
    _spool: Option<tempfile::TempPath>,
}

impl Inputs {
    /// Checks and sniffs every input; `-` is standard input (at most once),
    /// spooled to a temporary file first. Errors name the input and what is
    /// wrong with it.
    pub fn open(raw: &[String]) -> anyhow::Result<Self> {
        if raw.is_empty() {
            bail!("no input given");
        }
        let mut list = Vec::with_capacity(raw.len());
        let mut spool = None;
        for arg in raw {
            if arg == "-" {
                if spool.is_some() {
                    bail!("standard input (-) can be given only once");
                }
                let path = spool_stdin()?;
                list.push(sniff(STDIN_NAME.to_owned(), path.to_path_buf())?);
                spool = Some(path);
            } else {
                list.push(sniff(arg.clone(), PathBuf::from(arg))?);
            }
        }
        Ok(Self { list, _spool: spool })
    }

    /// The inputs in order.
    pub fn iter(&self) -> std::slice::Iter<'_, Input> {
        self.list.iter()
    }

    /// Number of inputs.
    pub fn len(&self) -> usize {
        self.list.len()
    }

    /// True when there is none (never, once opened).
    pub fn is_empty(&self) -> bool {
        self.list.is_empty()
    }

    /// Octets over all inputs.
    pub fn total_bytes(&self) -> u64 {
        self.list.iter().map(|i| i.size).sum()
    }
}

/// Copies standard input to a temporary file (in `$TMPDIR`, removed at the
/// end of the run), in fixed-size chunks.
fn spool_stdin() -> anyhow::Result<tempfile::TempPath> {
    let stdin = std::io::stdin();
    if stdin.is_terminal() {
        bail!("standard input (-) is a terminal: pipe a capture into it, e.g. `... < capture.pcap`");
    }
    let mut file = tempfile::Builder::new()
        .prefix("flowsift-stdin-")
        .tempfile()
        .context("cannot create a temporary file to hold standard input")?;
    let mut lock = stdin.lock();
    let mut buf = vec![0u8; 1 << 20];
    loop {
        let n = match lock.read(&mut buf) {
            Ok(0) => break,
            Ok(n) => n,
            Err(e) if e.kind() == std::io::ErrorKind::Interrupted => continue,
            Err(e) => return Err(e).context("cannot read standard input"),
        };
        let chunk = buf.get(..n).unwrap_or_default();
        file.write_all(chunk).context("cannot write the temporary copy of standard input")?;
    }
    file.flush().context("cannot write the temporary copy of standard input")?;
    Ok(file.into_temp_path())
}

/// Opens `path`, checks it is a readable file and recognises its format.
fn sniff(name: String, path: PathBuf) -> anyhow::Result<Input> {
    let meta = std::fs::metadata(&path).with_context(|| format!("cannot read input {name}"))?;
    if meta.is_dir() {
        bail!("input {name} is a directory: give capture files (pcap, pcapng or RFC 5655 IPFIX files)");
    }
    let mut file = File::open(&path).with_context(|| format!("cannot open input {name}"))?;
    let mut head = [0u8; SNIFF_LEN];
    let mut got = 0;
    while got < head.len() {
        let rest = head.get_mut(got..).unwrap_or_default();
        match file.read(rest) {
            Ok(0) => break,
            Ok(n) => got += n,
            Err(e) if e.kind() == std::io::ErrorKind::Interrupted => {}
            Err(e) => return Err(e).with_context(|| format!("cannot read input {name}")),
        }
    }
    let format = detect(head.get(..got).unwrap_or_default()).map_err(|e| match e {
        CaptureError::CompressedIpfixFile { kind } => anyhow::anyhow!(
            "input {name} is {kind}-compressed: decompress it first, or pipe the decompressed bytes to '-' (RFC 5655 §10.2 allows compressed IPFIX files; flowsift reads them uncompressed)"
        ),
        other => anyhow::anyhow!(
            "input {name} is not a capture flowsift reads: {other}; expected classic pcap, pcapng or an RFC 5655 IPFIX file"
        ),
    })?;
    // Standard input's spool has a size only once written; a pipe or FIFO
    // given by path reports 0, which only affects the progress bar.
    Ok(Input { name, path, format, size: meta.len() })
}

/// The first malformed message or damaged input of a `--strict` run.
#[derive(Debug, Clone)]
pub struct StrictViolation(pub String);

impl std::fmt::Display for StrictViolation {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(f, "--strict: {}", self.0)
    }
}

impl std::error::Error for StrictViolation {}

/// Where a decoder event came from.
#[derive(Debug, Clone, Copy)]
pub struct EventContext<'a> {
    /// Index of the input in command-line order.
    pub input: usize,
    /// The input.
    pub source: &'a Input,
    /// 1-based number of the IPFIX Message within the input.
    pub message: u64,
    /// The Transport Session it came on.
    pub session: &'a TransportSession,
    /// Its Message Header.
    pub header: &'a MessageHeader,
    /// Capture time, when the capture has one.
    pub received: Option<Duration>,
}

/// Reads inputs through a decoder, keeping the accounting.
#[derive(Debug, Clone, Default)]
pub struct Runner {
    /// Limits and filters of the capture readers.
    pub capture: CaptureOptions,
    /// Limits of the decoder.
    pub decoder: Config,
    /// Stop at the first malformed message or damaged input.
    pub strict: bool,
}

/// Messages between progress updates.
const PROGRESS_EVERY: u64 = 512;

impl Runner {
    /// One pass over every input with a fresh [`Decoder`]: each event goes
    /// to `on_event`; the result says what was decoded, skipped and lost.
    ///
    /// Fails on I/O errors, on an error from `on_event`, and (with
    /// [`Runner::strict`]) on the first malformed message or damaged input.
    pub fn run_pass<F>(&self, inputs: &Inputs, progress: &Progress, label: &str, mut on_event: F) -> anyhow::Result<Accounting>
    where
        F: FnMut(&EventContext<'_>, Event<'_>) -> anyhow::Result<()>,
    {
        let mut decoder = Decoder::new(self.decoder.clone());
        let mut acc = Accounting::new(inputs);
        progress.start(label, inputs.total_bytes());
        let mut done_before = 0u64;
        for (index, input) in inputs.iter().enumerate() {
            let file = File::open(&input.path).with_context(|| format!("cannot open input {}", input.name))?;
            let instance = u32::try_from(index).unwrap_or(u32::MAX);
            let mut reader = CaptureReader::new(file, instance, self.capture.clone())
                .map_err(|e| anyhow::anyhow!("input {}: {e}", input.name))?;
            let mut message = 0u64;
            while let Some(item) = reader.next_event() {
                match item {
                    Ok(CaptureEvent::Message { session, received, data }) => {
                        message += 1;
                        let before = acc.before_decode(&decoder);
                        match decoder.decode(&session, received, &data) {
                            Ok(decoded) => {
                                let header = *decoded.header();
                                let ctx = EventContext { input: index, source: input, message, session: &session, header: &header, received };
                                for event in decoded {
                                    acc.observe(index, &session, &header, &event);
                                    on_event(&ctx, event)?;
                                }
                                acc.after_decode(&decoder, before, index, &session, &header, received);
                            }
                            Err(err) => {
                                acc.malformed(index, message, received, &data, &err);
                                if self.strict {
                                    return Err(StrictViolation(format!(
                                        "input {}, IPFIX message #{message}{}: {err}",
                                        input.name,
                                        received.map(|t| format!(" (captured {})", accounting::rfc3339(t.as_secs()))).unwrap_or_default()
                                    ))
                                    .into());
                                }
                            }
                        }
                        if message.is_multiple_of(PROGRESS_EVERY) {
                            progress.set(done_before + reader.bytes_read(), decoder.stats().records_decoded);
                        }
                    }
                    Ok(CaptureEvent::SessionEnded { session }) => acc.end_session(&mut decoder, &session),
                    Err(CaptureError::Io { source }) => {
                        return Err(anyhow::anyhow!("cannot read input {}: {source}", input.name));
                    }
                    Err(e) => {
                        if self.strict {
                            return Err(StrictViolation(format!("input {}: {e}", input.name)).into());
                        }
                        acc.input_stopped(index, &e);
                    }
                }
            }
            acc.input_done(index, reader.format(), reader.stats(), reader.bytes_read());
            if reader.format() == InputFormat::IpfixFile {
                // RFC 5655 §7.1: one file is one Transport Session; its
                // templates end with it.
                acc.end_session(&mut decoder, &TransportSession::file(instance));
            }
            done_before += reader.bytes_read();
            progress.set(done_before, decoder.stats().records_decoded);
        }
        acc.finish(&mut decoder);
        progress.finish();
        Ok(acc)
    }
}

/// True when `path` names standard output (`-`).
pub fn is_stdout(path: &Path) -> bool {
    path.as_os_str() == "-"
}
