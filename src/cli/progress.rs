//! Progress on stderr, unless the user asked for --quiet. Safe to advance
//! from several threads.
//!
//! On a terminal: a bar redrawn in place. Otherwise (a log file, a batch
//! job): one plain line at most every 10 s, with the elapsed time and an
//! estimate of the time left, so a log shows where a long run stands.

use std::io::{IsTerminal, Write};
use std::sync::Mutex;
use std::sync::atomic::{AtomicUsize, Ordering};
use std::time::{Duration, Instant};

/// Shortest interval between two log lines when stderr is not a terminal.
const LOG_EVERY: Duration = Duration::from_secs(10);

enum Mode {
    Silent,
    Bar,
    Log,
}

pub struct Progress {
    label: String,
    total: usize,
    done: AtomicUsize,
    mode: Mode,
    started: Instant,
    /// Guards drawing; holds when the last log line was written.
    last: Mutex<Instant>,
}

impl Progress {
    pub fn new(label: &str, total: usize, quiet: bool) -> Progress {
        let mode = if quiet {
            Mode::Silent
        } else if std::io::stderr().is_terminal() {
            Mode::Bar
        } else {
            Mode::Log
        };
        let now = Instant::now();
        let p = Progress {
            label: label.to_string(),
            total: total.max(1),
            done: AtomicUsize::new(0),
            mode,
            started: now,
            last: Mutex::new(now),
        };
        p.draw(0);
        p
    }

    /// Records one more finished step.
    pub fn step(&self) {
        let d = self.done.fetch_add(1, Ordering::Relaxed) + 1;
        self.draw(d);
    }

    fn draw(&self, done: usize) {
        let Ok(mut last) = self.last.lock() else {
            return;
        };
        let mut err = std::io::stderr();
        match self.mode {
            Mode::Silent => {}
            Mode::Bar => {
                let filled = (done * 24 / self.total).min(24);
                let _ = write!(
                    err,
                    "\r{:<28} [{}{}] {done}/{}",
                    self.label,
                    "#".repeat(filled),
                    " ".repeat(24 - filled),
                    self.total
                );
                let _ = err.flush();
            }
            Mode::Log => {
                let now = Instant::now();
                if done == 0 || done >= self.total || now - *last < LOG_EVERY {
                    return;
                }
                *last = now;
                let elapsed = (now - self.started).as_secs_f64();
                let left = elapsed / done as f64 * (self.total - done) as f64;
                let _ = writeln!(
                    err,
                    "{}: {done}/{} after {elapsed:.0} s, about {left:.0} s left",
                    self.label, self.total
                );
            }
        }
    }

    /// Ends the line (terminal) or says the stage is done (log).
    pub fn finish(&self) {
        match self.mode {
            Mode::Bar => eprintln!(),
            Mode::Log => eprintln!(
                "{}: done in {:.1} s",
                self.label,
                self.started.elapsed().as_secs_f64()
            ),
            Mode::Silent => {}
        }
    }
}
