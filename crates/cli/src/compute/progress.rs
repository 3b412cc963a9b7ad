//! Progress of a batch run: a bar redrawn in place on a terminal (steps, rate, time left),
//! plain log lines otherwise (cron, CI, a job scheduler's log file), nothing with `--quiet`.

use std::io::{IsTerminal, Write};
use std::time::{Duration, Instant};

#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Mode {
    Bar,
    Lines,
    Quiet,
}

/// Reports the steps of a run on standard error.
#[derive(Debug)]
pub struct Progress {
    total: usize,
    done: usize,
    start: Instant,
    mode: Mode,
    last_line: Instant,
    last_tenth: usize,
}

/// `h:mm:ss` or `m:ss`.
pub fn clock(d: Duration) -> String {
    let s = d.as_secs();
    if s >= 3600 {
        format!("{}:{:02}:{:02}", s / 3600, s / 60 % 60, s % 60)
    } else {
        format!("{}:{:02}", s / 60, s % 60)
    }
}

impl Progress {
    /// A report of `total` steps; quiet prints nothing.
    pub fn new(total: usize, quiet: bool) -> Self {
        let mode = if quiet {
            Mode::Quiet
        } else if std::io::stderr().is_terminal() {
            Mode::Bar
        } else {
            Mode::Lines
        };
        let now = Instant::now();
        Self { total, done: 0, start: now, mode, last_line: now, last_tenth: 0 }
    }

    /// Whether anything is printed.
    pub fn is_quiet(&self) -> bool {
        self.mode == Mode::Quiet
    }

    /// Prints a line of its own (above the bar on a terminal).
    pub fn say(&self, text: &str) {
        match self.mode {
            Mode::Quiet => {}
            Mode::Lines => eprintln!("shearbox: {text}"),
            Mode::Bar => eprint!("\r\x1b[2K shearbox: {text}\n"),
        }
    }

    /// Records one finished step at time `iso`.
    pub fn step(&mut self, iso: &str) {
        self.done += 1;
        let elapsed = self.start.elapsed();
        let rate = self.done as f64 / elapsed.as_secs_f64().max(1e-9);
        let left = self.total.saturating_sub(self.done);
        let eta = Duration::from_secs_f64(left as f64 / rate.max(1e-9));
        match self.mode {
            Mode::Quiet => {}
            Mode::Bar => {
                let width = 30;
                let filled = (self.done * width).checked_div(self.total).unwrap_or(width);
                let mut err = std::io::stderr().lock();
                let _ = write!(
                    err,
                    "\r\x1b[2K [{}{}] {}/{} steps  {rate:.2} steps/s  ETA {}  {iso}",
                    "#".repeat(filled),
                    ".".repeat(width - filled),
                    self.done,
                    self.total,
                    clock(eta)
                );
                let _ = err.flush();
            }
            Mode::Lines => {
                // Every step of a short run; about every tenth, and at least once a minute,
                // of a long one.
                let tenth = (self.done * 10).checked_div(self.total).unwrap_or(10);
                let due = self.total <= 50
                    || tenth > self.last_tenth
                    || self.last_line.elapsed() >= Duration::from_secs(60)
                    || self.done == self.total;
                if due {
                    eprintln!(
                        "shearbox: step {}/{} {iso} done; {rate:.2} steps/s; {} elapsed, about {} left",
                        self.done,
                        self.total,
                        clock(elapsed),
                        clock(eta)
                    );
                    self.last_line = Instant::now();
                    self.last_tenth = tenth;
                }
            }
        }
    }

    /// Ends the bar's line.
    pub fn finish(&self) {
        if self.mode == Mode::Bar {
            eprint!("\r\x1b[2K");
        }
    }
}
