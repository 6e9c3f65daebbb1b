//! Progress display: a spinner on stderr for steps that take longer than a second, with the step
//! number of a longer job or the rows done so far; shown only when stderr is a terminal and
//! `--quiet` was not given, silent otherwise.

use indicatif::{ProgressBar, ProgressDrawTarget, ProgressStyle};
use std::io::IsTerminal;
use std::sync::{Arc, Mutex};
use std::time::Duration;

/// Decides once whether progress is shown.
#[derive(Debug, Clone, Copy)]
pub struct Progress {
    enabled: bool,
}

impl Progress {
    /// Shown only when not quiet and stderr is a terminal.
    pub fn new(quiet: bool) -> Self {
        Progress {
            enabled: !quiet && std::io::stderr().is_terminal(),
        }
    }

    /// Starts a step; the spinner appears only if the step is still running after one second,
    /// and disappears when the returned guard is dropped.
    pub fn step(&self, message: &str) -> Step {
        self.start(message, "{spinner} {msg} ({elapsed})")
    }

    /// As [`Progress::step`] for step `k` of `n` of a longer job: shown as
    /// `[k/n] message (elapsed)`, so the reader sees how far the job has come.
    pub fn stage(&self, k: usize, n: usize, message: &str) -> Step {
        self.step(&format!("[{k}/{n}] {message}"))
    }

    /// As [`Progress::step`], with a running count (advance it with [`Step::inc`]).
    pub fn counter(&self, message: &str) -> Step {
        self.start(
            message,
            "{spinner} {msg}: {human_pos} rows ({per_sec}, {elapsed})",
        )
    }

    fn start(&self, message: &str, template: &str) -> Step {
        if !self.enabled {
            return Step {
                bar: None,
                done: Arc::new(Mutex::new(true)),
            };
        }
        let bar = ProgressBar::with_draw_target(None, ProgressDrawTarget::hidden());
        bar.set_style(
            ProgressStyle::with_template(template)
                .unwrap_or_else(|_| ProgressStyle::default_spinner()),
        );
        bar.set_message(message.to_string());
        let done = Arc::new(Mutex::new(false));
        let (b, d) = (bar.clone(), done.clone());
        std::thread::spawn(move || {
            std::thread::sleep(Duration::from_secs(1));
            if let Ok(finished) = d.lock() {
                if !*finished {
                    b.set_draw_target(ProgressDrawTarget::stderr());
                    b.enable_steady_tick(Duration::from_millis(120));
                }
            }
        });
        Step {
            bar: Some(bar),
            done,
        }
    }
}

/// A running step; dropping it clears the spinner.
pub struct Step {
    bar: Option<ProgressBar>,
    done: Arc<Mutex<bool>>,
}

impl Step {
    /// Advances the counter shown beside the message (e.g. rows written).
    pub fn inc(&self, n: u64) {
        if let Some(b) = &self.bar {
            b.inc(n);
        }
    }
}

impl Drop for Step {
    fn drop(&mut self) {
        if let Ok(mut finished) = self.done.lock() {
            *finished = true;
            if let Some(b) = &self.bar {
                b.finish_and_clear();
            }
        }
    }
}
