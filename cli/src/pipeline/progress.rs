//! A progress bar on standard error, drawn only when it is a terminal.

use std::cell::RefCell;
use std::io::IsTerminal;

use indicatif::{ProgressBar, ProgressDrawTarget, ProgressStyle};

/// Bytes done, records/s and ETA of a pass; silent when standard error is
/// not a terminal (scripts, CI, redirections) or when disabled.
pub struct Progress {
    style: Option<ProgressStyle>,
    bar: RefCell<Option<ProgressBar>>,
}

impl std::fmt::Debug for Progress {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("Progress").field("drawn", &self.style.is_some()).finish()
    }
}

impl Progress {
    /// A bar when `wanted` and standard error is a terminal; else silent.
    pub fn new(wanted: bool) -> Self {
        if !wanted || !std::io::stderr().is_terminal() {
            return Self::hidden();
        }
        let style = ProgressStyle::with_template(
            "{prefix:>14} [{bar:28}] {bytes:>10}/{total_bytes:<10} {binary_bytes_per_sec:>12}  {msg}  ETA {eta}",
        )
        .unwrap_or_else(|_| ProgressStyle::default_bar())
        .progress_chars("=> ");
        Self { style: Some(style), bar: RefCell::new(None) }
    }

    /// Never draws.
    pub fn hidden() -> Self {
        Self { style: None, bar: RefCell::new(None) }
    }

    /// Starts a pass over `total` octets (a new bar per pass).
    pub fn start(&self, label: &str, total: u64) {
        if let Some(style) = &self.style {
            let bar = ProgressBar::with_draw_target(Some(total), ProgressDrawTarget::stderr_with_hz(8));
            bar.set_style(style.clone());
            bar.set_prefix(label.to_owned());
            if let Some(old) = self.bar.replace(Some(bar)) {
                old.finish_and_clear();
            }
        }
    }

    /// Octets done so far and records decoded.
    pub fn set(&self, done: u64, records: u64) {
        if let Some(bar) = &*self.bar.borrow() {
            bar.set_position(done);
            let secs = bar.elapsed().as_secs_f64();
            let rate = if secs > 0.0 { records as f64 / secs } else { 0.0 };
            bar.set_message(format!("{} records, {}/s", human(records as f64), human(rate)));
        }
    }

    /// Prints a line above the bar (or to standard error when hidden).
    pub fn println(&self, line: &str) {
        match &*self.bar.borrow() {
            Some(bar) => bar.println(line),
            None => eprintln!("{line}"),
        }
    }

    /// Ends the pass and clears the bar.
    pub fn finish(&self) {
        if let Some(bar) = self.bar.borrow_mut().take() {
            bar.finish_and_clear();
        }
    }
}

/// 1234567 → "1.23M".
fn human(n: f64) -> String {
    if n >= 1e9 {
        format!("{:.2}G", n / 1e9)
    } else if n >= 1e6 {
        format!("{:.2}M", n / 1e6)
    } else if n >= 1e4 {
        format!("{:.1}k", n / 1e3)
    } else {
        format!("{n:.0}")
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn human_units() {
        assert_eq!(human(12.0), "12");
        assert_eq!(human(45_600.0), "45.6k");
        assert_eq!(human(5_000_000.0), "5.00M");
    }

    #[test]
    fn hidden_never_panics() {
        let p = Progress::hidden();
        p.start("x", 10);
        p.set(5, 3);
        p.finish();
    }
}
