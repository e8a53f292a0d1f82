//! Placeholder; filled by the q2 work.
