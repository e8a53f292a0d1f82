//! Integration tests: resample.
