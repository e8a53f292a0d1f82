//! Placeholder; filled by the pipeline work.
