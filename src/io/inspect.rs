//! `formfactory inspect`. Placeholder; filled by the io work.

use std::path::Path;

/// Summarise a data directory or one table as text for the terminal.
pub fn inspect(_path: &Path) -> crate::Result<String> {
    Err(crate::Error::config("inspect is not built yet"))
}
