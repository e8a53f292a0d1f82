//! Readers and writers. Placeholder; filled by the io work.

pub mod inspect;
