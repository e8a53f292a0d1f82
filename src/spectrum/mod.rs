//! Placeholder; filled by the spectrum work.
