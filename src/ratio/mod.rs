//! Placeholder; filled by the ratio work.
