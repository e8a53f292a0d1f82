//! # formfactory
//!
//! Hadron form factors from lattice QCD correlators, with errors propagated by resampling
//! through every stage.
//!
//! A lattice analysis starts from per-configuration two-point and three-point correlators
//! (CSV tables, see `io`) and ends with form factors versus Q², fitted Q² dependence, and
//! derived radii, moments and charges. The stages, in data-flow order:
//!
//! | stage | module | what it does |
//! |---|---|---|
//! | read | [`io`] | stream and validate the CSV tables into the [`data`] model |
//! | resample | [`resample`] | binning, jackknife / bootstrap, covariance, autocorrelation |
//! | spectrum | [`spectrum`] | two-point fits: energies at every momentum, effective masses, GEVP |
//! | ratio | [`ratio`] | the three-/two-point ratio; plateau, summation and two-state fits |
//! | kinematics | [`kinematics`] | lattice momenta, Q², Dirac traces, form-factor decomposition |
//! | Q² fits | [`q2`] | dipole and z-expansion fits; radii, moments, charges |
//! | report | [`report`] | tables, SVG plots, the HTML report, the run manifest |
//!
//! [`pipeline`] reads a YAML analysis, validates it and chains the stages; [`mock`] makes
//! synthetic ensembles from a known truth for closure tests and the demo. Every value that
//! leaves a stage is a [`resample::Resampled`]: a central value plus one value per resample,
//! so errors travel through every non-linear step without linearisation.
//!
//! Conventions (Euclidean gamma matrices, projectors, signs of the kinematic factors, units)
//! are stated once in DEVELOPERS.md and in [`kinematics`].

pub mod budget;
pub mod campaign;
pub mod cli;
pub mod data;
pub mod error;
pub mod error_budget;
pub mod fit;
pub mod io;
pub mod kinematics;
pub mod mock;
pub mod pack;
pub mod pipeline;
pub mod q2;
pub mod ratio;
pub mod report;
pub mod resample;
pub mod spectrum;
pub mod variational;

pub use error::{Error, Invalid, Result};
