//! Integration tests: cli.
