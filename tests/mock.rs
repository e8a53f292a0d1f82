//! Integration tests: mock.
