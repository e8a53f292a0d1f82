//! The runner's adapters between stages, one file per stage: what each stage takes from the
//! results before it and how its outcome (values, warnings) is recorded. The loop itself is
//! in `run.rs`; the stages' computation is in the stage modules (`spectrum`, `ratio`, ...).

pub(super) mod data;
pub(super) mod decomposition;
pub(super) mod q2_fits;
pub(super) mod ratio_inputs;
pub(super) mod spectrum_inputs;
