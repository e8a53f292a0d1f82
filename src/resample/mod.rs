//! Resampling: the [`Resampled`] value that carries errors through every stage, and the tools
//! that make and judge it (docs/methods.md §7).
//!
//! A [`Resampled`] holds the estimate on the full ensemble (`central`) and one value per
//! resample. Any function of resampled values is evaluated on the central value and on every
//! sample alike, so errors propagate through non-linear steps without linearisation.
//!
//! The data flow is: per-configuration values → [`binning`] (blocks of `b` consecutive
//! configurations, trailing ones dropped and reported) → a [`ResamplePlan`] (delete-one
//! jackknife or seeded bootstrap, Efron & Tibshirani, *An Introduction to the Bootstrap*, 1993)
//! → [`Resampled`] values → [`covariance`] estimates for correlated fits. [`autocorr`] measures
//! the integrated autocorrelation time (Wolff's Gamma method) that tells how large `b` must be.
//!
//! Submodules:
//! - [`value`]: the [`Resampled`] type, its error / covariance / bias formulas and arithmetic;
//!   [`fmt_value_error`] for the `0.9234(56)` notation.
//! - [`plan`]: [`ResamplePlan`], the jackknife / bootstrap recipe shared by every quantity.
//! - [`binning`]: block averages of per-configuration data.
//! - [`covariance`]: full, diagonal and Ledoit–Wolf shrinkage covariance with an eigenvalue cut.
//! - [`autocorr`]: the Gamma method and binning studies.
//! - [`inflation`]: autocorrelation left in the bins, and the errors widened for it.
//! - `means`: the stable means of several time series at once (the same bits as one by one).

pub mod autocorr;
pub mod autocorr_check;
pub mod binning;
pub mod covariance;
pub mod inflation;
mod means;
pub mod notation;
pub mod plan;
pub mod robust;
pub mod value;

pub use notation::fmt_value_error;
pub use plan::{Part, ResamplePlan};
pub(crate) use value::stable_mean;
pub use value::{covariance_of, Resampled, Scheme, Summary};
