//! The terminal observer of a run: one line per stage on standard error when it is a
//! terminal (indicatif) — a bar with counts (`37/342 channels`) for the stages that report
//! their items, a spinner with the elapsed time for the others, and the stage's time when it
//! is done. Nothing at all when standard error is not a terminal or when asked to be quiet.

use crate::pipeline::Observer;
use indicatif::{ProgressBar, ProgressStyle};
use std::io::IsTerminal;
use std::sync::Mutex;
use std::time::Duration;

/// Progress on standard error; silent when stderr is not a terminal or `quiet` is set.
pub struct Progress {
    bar: Option<Mutex<ProgressBar>>,
}

/// What one item of a stage is, for the counts.
fn items(stage: &str) -> &'static str {
    match stage {
        "spectrum" => "momenta",
        "ratio" => "channels",
        "decomposition" => "estimators",
        "q2_fits" => "form factors",
        _ => "items",
    }
}

impl Progress {
    /// A progress display for this process's standard error.
    pub fn new(quiet: bool) -> Self {
        Self::shown(!quiet && std::io::stderr().is_terminal())
    }

    /// A display that draws only when `show` is true.
    pub fn shown(show: bool) -> Self {
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
        if let Ok(style) = ProgressStyle::with_template("{spinner} {msg:<14} [{elapsed}]") {
            b.set_style(style);
        }
        b.set_message(stage.to_string());
        b.enable_steady_tick(Duration::from_millis(120));
        *bar = b;
    }

    fn progress(&self, stage: &str, done: usize, total: usize) {
        let Some(bar) = &self.bar else { return };
        let Ok(bar) = bar.lock() else { return };
        if bar.length() != Some(total as u64) {
            let template = format!(
                "{{spinner}} {{msg:<14}} [{{bar:30}}] {{pos}}/{{len}} {} [{{elapsed}}]",
                items(stage)
            );
            if let Ok(style) = ProgressStyle::with_template(&template) {
                bar.set_style(style.progress_chars("=> "));
            }
            bar.set_length(total as u64);
        }
        // items finish in any order on many threads: the count only grows
        if done as u64 > bar.position() {
            bar.set_position(done as u64);
        }
    }

    fn stage_finished(&self, stage: &str, elapsed: Duration) {
        let Some(bar) = &self.bar else { return };
        let Ok(bar) = bar.lock() else { return };
        bar.finish_with_message(format!("{stage} done in {:.2} s", elapsed.as_secs_f64()));
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn quiet_and_hidden_displays_draw_nothing() {
        let p = Progress::shown(false);
        assert!(p.bar.is_none());
        // every hook is a no-op without a terminal
        p.stage_started("ratio");
        p.progress("ratio", 3, 10);
        p.stage_finished("ratio", Duration::from_millis(5));
        assert!(Progress::new(true).bar.is_none());
    }

    #[test]
    fn counts_only_grow() {
        let p = Progress::shown(true);
        p.stage_started("ratio");
        p.progress("ratio", 5, 10);
        p.progress("ratio", 3, 10);
        let Some(bar) = &p.bar else { panic!("visible") };
        let bar = bar.lock().unwrap();
        assert_eq!((bar.position(), bar.length()), (5, Some(10)));
    }
}
