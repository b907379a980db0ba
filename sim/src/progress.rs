//! Progress of a run: a bar with elapsed time and ETA on a terminal, plain lines otherwise.

use std::io::IsTerminal;
use std::time::{Duration, Instant};

use indicatif::{ProgressBar, ProgressDrawTarget, ProgressStyle};

/// Progress reporting over simulated time.
pub struct Progress {
    bar: Option<ProgressBar>,
    lines: bool,
    end: f64,
    started: Instant,
    last_line: Instant,
}

impl Progress {
    /// Reports progress towards simulated time `end` (s) on stderr, unless `quiet`.
    pub fn new(end: f64, quiet: bool) -> Self {
        let tty = std::io::stderr().is_terminal();
        let bar = (!quiet && tty).then(|| {
            let b = ProgressBar::with_draw_target(Some(1000), ProgressDrawTarget::stderr_with_hz(4));
            b.set_style(
                ProgressStyle::with_template("{bar:40} {percent:>3}% [{elapsed_precise} elapsed, ETA {eta}] {msg}")
                    .expect("valid template"),
            );
            b
        });
        Progress { bar, lines: !quiet && !tty, end, started: Instant::now(), last_line: Instant::now() }
    }

    /// Reports the state after a step.
    pub fn update(&mut self, time: f64, step: u64, snapshots: u64) {
        let frac = if self.end > 0.0 { (time / self.end).clamp(0.0, 1.0) } else { 1.0 };
        if let Some(b) = &self.bar {
            b.set_position((frac * 1000.0) as u64);
            b.set_message(format!("t = {:.2} h, step {step}, {snapshots} snapshots", time / 3600.0));
        } else if self.lines && self.last_line.elapsed() >= Duration::from_secs(5) {
            self.last_line = Instant::now();
            let el = self.started.elapsed().as_secs_f64();
            let eta = if frac > 0.0 { el * (1.0 - frac) / frac } else { f64::NAN };
            eprintln!(
                "interstice: {:5.1}% t = {:.3} h, step {step}, {snapshots} snapshots, {el:.1} s elapsed, ETA {eta:.0} s",
                100.0 * frac,
                time / 3600.0
            );
        }
    }

    /// Ends the report.
    pub fn finish(&mut self, ok: bool) {
        if let Some(b) = self.bar.take() {
            if ok {
                b.finish();
            } else {
                b.abandon();
            }
        }
    }
}
