//! Integration tests: q2.
