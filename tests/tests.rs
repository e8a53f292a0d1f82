//! The one integration-test binary; each module covers one area and owns `tests/<area>.rs`.

mod common;

mod bad_input;
mod campaign;
mod cli;
mod closure;
mod fit;
mod io;
mod kinematics;
mod mock;
mod pipeline;
mod q2;
mod ratio;
mod report;
mod resample;
mod spectrum;
