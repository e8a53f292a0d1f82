//! Integration tests: fit.
