//! The terminal observer of a run: a spinner per stage on standard error when it is a
//! terminal (indicatif), nothing otherwise or when asked to be quiet.

use crate::pipeline::Observer;
use indicatif::{ProgressBar, ProgressStyle};
use std::io::IsTerminal;
use std::sync::Mutex;
use std::time::Duration;

/// Progress on standard error; silent when stderr is not a terminal or `quiet` is set.
pub struct Progress {
    bar: Option<Mutex<ProgressBar>>,
}

impl Progress {
    /// A progress display for this process's standard error.
    pub fn new(quiet: bool) -> Self {
        let show = !quiet && std::io::stderr().is_terminal();
        Progress {
            bar: show.then(|| Mutex::new(ProgressBar::hidden())),
        }
    }
}

impl Observer for Progress {
    fn stage_started(&self, stage: &str) {
        let Some(bar) = &self.bar else { return };
        let Ok(mut bar) = bar.lock() else { return };
        let b = ProgressBar::new_spinner();
        if let Ok(style) = ProgressStyle::with_template("{spinner} {msg} [{elapsed}]") {
            b.set_style(style);
        }
        b.set_message(stage.to_string());
        b.enable_steady_tick(Duration::from_millis(120));
        *bar = b;
    }

    fn stage_finished(&self, stage: &str, elapsed: Duration) {
        let Some(bar) = &self.bar else { return };
        let Ok(bar) = bar.lock() else { return };
        bar.finish_with_message(format!("{stage} done in {:.2} s", elapsed.as_secs_f64()));
    }
}
