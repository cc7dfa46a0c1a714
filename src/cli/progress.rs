//! A progress bar on stderr, drawn only when stderr is a terminal and the
//! user did not ask for --quiet. Safe to advance from several threads.

use std::io::{IsTerminal, Write};
use std::sync::Mutex;
use std::sync::atomic::{AtomicUsize, Ordering};

pub struct Progress {
    label: String,
    total: usize,
    done: AtomicUsize,
    shown: bool,
    lock: Mutex<()>,
}

impl Progress {
    pub fn new(label: &str, total: usize, quiet: bool) -> Progress {
        let p = Progress {
            label: label.to_string(),
            total: total.max(1),
            done: AtomicUsize::new(0),
            shown: !quiet && std::io::stderr().is_terminal(),
            lock: Mutex::new(()),
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
        if !self.shown {
            return;
        }
        let _guard = self.lock.lock();
        let filled = (done * 24 / self.total).min(24);
        let mut err = std::io::stderr();
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

    /// Ends the line.
    pub fn finish(&self) {
        if self.shown {
            eprintln!();
        }
    }
}
