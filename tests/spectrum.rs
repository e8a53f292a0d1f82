//! Integration tests: spectrum.
