//! The progress display: one bar on stderr per stage, shown only once a stage has run for
//! a second and only on a terminal; warnings printed as they come.

use std::sync::Mutex;
use std::time::{Duration, Instant};

use indicatif::{ProgressBar, ProgressDrawTarget, ProgressStyle};
use thiomap::pipeline::Progress;

pub struct Bar {
    bar: ProgressBar,
    started: Mutex<Instant>,
    shown: Mutex<bool>,
}

impl Bar {
    pub fn new() -> Bar {
        let bar = ProgressBar::with_draw_target(None, ProgressDrawTarget::hidden());
        bar.set_style(
            ProgressStyle::with_template(
                "{prefix:>8} [{bar:30}] {pos}/{len} rows, {elapsed} (ETA {eta})",
            )
            .expect("a valid template")
            .progress_chars("=> "),
        );
        Bar {
            bar,
            started: Mutex::new(Instant::now()),
            shown: Mutex::new(false),
        }
    }

    pub fn finish(&self) {
        self.bar.finish_and_clear();
    }
}

impl Progress for Bar {
    fn stage(&self, name: &str, total_rows: Option<usize>) {
        self.bar.set_prefix(name.to_string());
        self.bar.set_position(0);
        self.bar.set_length(total_rows.unwrap_or(0) as u64);
        *self.started.lock().expect("not poisoned") = Instant::now();
    }

    fn rows(&self, done: usize) {
        self.bar.set_position(done as u64);
        let mut shown = self.shown.lock().expect("not poisoned");
        if !*shown && self.started.lock().expect("not poisoned").elapsed() > Duration::from_secs(1)
        {
            *shown = true;
            self.bar.set_draw_target(ProgressDrawTarget::stderr());
        }
    }

    fn warn(&self, message: &str) {
        self.bar
            .suspend(|| eprintln!("thiomap: warning: {message}"));
    }
}
