//! Integration tests: io.
