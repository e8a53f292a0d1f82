//! How the runner reports: the [`Observer`] hooks a caller implements (the terminal progress
//! display is the CLI's observer), and the recorder through which every stage adapter raises
//! warnings and the runner times the stages.

use crate::Result;
use std::time::{Duration, Instant};

/// Hooks through which the runner reports progress; every method has a silent default.
pub trait Observer: Sync {
    /// A stage starts.
    fn stage_started(&self, _stage: &str) {}
    /// A stage finished after `elapsed`.
    fn stage_finished(&self, _stage: &str, _elapsed: Duration) {}
    /// `done` of the stage's `total` items (momenta, channels, estimators, fits) are done;
    /// may be called from any thread, not necessarily in order.
    fn progress(&self, _stage: &str, _done: usize, _total: usize) {}
    /// A warning was raised (it is also kept in [`RunResults::warnings`](super::RunResults::warnings)).
    fn warning(&self, _message: &str) {}
}

/// An observer that reports nothing.
pub struct Silent;
impl Observer for Silent {}

/// Timing and warnings of one run, forwarded to the observer as they happen.
pub(super) struct Recorder<'a> {
    pub(super) observer: &'a dyn Observer,
    timings: Vec<(String, Duration)>,
    warnings: Vec<String>,
}

impl<'a> Recorder<'a> {
    pub(super) fn new(observer: &'a dyn Observer) -> Self {
        Recorder {
            observer,
            timings: Vec::new(),
            warnings: Vec::new(),
        }
    }

    /// Run stage `name`: announce it, time it, record its wall time.
    pub(super) fn stage<T>(
        &mut self,
        name: &str,
        f: impl FnOnce(&mut Self) -> Result<T>,
    ) -> Result<T> {
        self.observer.stage_started(name);
        let start = Instant::now();
        let out = f(self);
        let elapsed = start.elapsed();
        self.observer.stage_finished(name, elapsed);
        self.timings.push((name.to_string(), elapsed));
        out
    }

    /// Raise a warning: kept for the results and passed to the observer.
    pub(super) fn warn(&mut self, message: impl Into<String>) {
        let m = message.into();
        self.observer.warning(&m);
        self.warnings.push(m);
    }

    /// The wall time per stage, in run order, and every warning raised.
    pub(super) fn finish(self) -> (Vec<(String, Duration)>, Vec<String>) {
        (self.timings, self.warnings)
    }
}
