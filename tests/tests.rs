//! The one integration-test binary; each module covers one area and owns `tests/<area>.rs`.

mod common;

mod bad_input;
mod campaign;
mod cli;
mod closure;
mod csv_blocks;
mod csv_stream;
mod data_checks;
mod defaults;
mod docs;
mod fit;
mod hdf5;
mod io;
mod kinematics;
mod layout;
mod mock;
mod outputs;
mod pipeline;
mod q2;
mod q2_priors;
mod ratio;
mod report;
mod resample;
mod run_autocorrelation;
mod spectrum;
mod spectrum_closure;
mod twist;
mod variational;
