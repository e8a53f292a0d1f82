//! Integration tests: ratio.
