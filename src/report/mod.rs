//! Placeholder; filled by the report work.
