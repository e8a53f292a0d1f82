//! Opening input files safely: only regular files are read.
//!
//! Why it exists: a FIFO given as a table makes a reader wait forever, a device such as
//! `/dev/zero` never ends, and a directory or a symbolic-link loop used to be reported as a
//! missing file. Every input of formfactory (tables, pipeline and mock specs) is opened
//! here, and each kind of non-file gets its own message. A regular file must also end with
//! a newline: a table whose last line was cut short (an interrupted copy) could otherwise
//! lose digits of its last number silently.

use crate::error::{Error, Result};
use std::fs::File;
use std::io::Read;
use std::path::Path;

/// Why `path` cannot be read as a regular file, or `None` if it can be opened.
pub fn not_a_regular_file(path: &Path) -> Option<String> {
    match std::fs::metadata(path) {
        Ok(meta) => kind_problem(&meta),
        Err(e) => Some(describe_open_error(&e)),
    }
}

fn kind_problem(meta: &std::fs::Metadata) -> Option<String> {
    let ft = meta.file_type();
    if ft.is_file() {
        return None;
    }
    if ft.is_dir() {
        return Some("is a directory, not a file".into());
    }
    #[cfg(unix)]
    {
        use std::os::unix::fs::FileTypeExt;
        if ft.is_fifo() {
            return Some(
                "is a named pipe (FIFO), not a regular file; reading it could wait forever \
                 (give `-` to read a table from standard input)"
                    .into(),
            );
        }
        if ft.is_char_device() || ft.is_block_device() {
            return Some("is a device, not a regular file".into());
        }
        if ft.is_socket() {
            return Some("is a socket, not a regular file".into());
        }
    }
    Some("is not a regular file".into())
}

fn describe_open_error(e: &std::io::Error) -> String {
    #[cfg(unix)]
    if e.raw_os_error() == Some(libc::ELOOP) {
        return "is a symbolic link that loops (or a chain of too many links)".into();
    }
    match e.kind() {
        std::io::ErrorKind::NotFound => "does not exist".into(),
        std::io::ErrorKind::PermissionDenied => "cannot be read: permission denied".into(),
        _ => format!("cannot be opened: {e}"),
    }
}

/// The error for `path` with a reason from [`not_a_regular_file`].
fn refusal(path: &Path, why: String) -> Error {
    Error::Table {
        path: path.to_path_buf(),
        message: why,
    }
}

/// Open a regular file for reading; anything else is refused with its own message.
pub fn open_regular(path: &Path) -> Result<File> {
    if let Some(why) = not_a_regular_file(path) {
        return Err(refusal(path, why));
    }
    let file = File::open(path).map_err(|e| refusal(path, describe_open_error(&e)))?;
    // The file may have been replaced between the check and the open.
    if let Some(why) = file.metadata().ok().and_then(|m| kind_problem(&m)) {
        return Err(refusal(path, why));
    }
    Ok(file)
}

/// Open a regular data file and check that it ends with a newline (an empty file passes;
/// the readers report it).
pub fn open_table(path: &Path) -> Result<File> {
    let file = open_regular(path)?;
    let len = file.metadata().map_err(|e| Error::io(path, e))?.len();
    if len > 0 {
        let mut last = [0u8];
        #[cfg(unix)]
        {
            use std::os::unix::fs::FileExt;
            file.read_exact_at(&mut last, len - 1)
                .map_err(|e| Error::io(path, e))?;
        }
        #[cfg(not(unix))]
        {
            last[0] = b'\n';
        }
        if last[0] != b'\n' && last[0] != b'\r' {
            return Err(refusal(
                path,
                "the file does not end with a newline, so its last line may have been cut \
                 short (an interrupted copy or download?); check that line and, if it is \
                 complete, end it with a newline"
                    .into(),
            ));
        }
    }
    Ok(file)
}

/// Read a regular text file of at most `max_bytes` (UTF-8); `what` names it in messages
/// ("pipeline file", "mock spec").
pub fn read_text_file(path: &Path, what: &str, max_bytes: u64) -> Result<String> {
    let file = open_regular(path)?;
    let mut bytes = Vec::new();
    file.take(max_bytes + 1)
        .read_to_end(&mut bytes)
        .map_err(|e| Error::io(path, e))?;
    if bytes.len() as u64 > max_bytes {
        return Err(refusal(
            path,
            format!(
                "is larger than {} kB; a {what} is a short YAML file",
                max_bytes / 1024
            ),
        ));
    }
    String::from_utf8(bytes).map_err(|e| {
        refusal(
            path,
            format!(
                "is not UTF-8 text (invalid byte at offset {}); expected a YAML {what}",
                e.utf8_error().valid_up_to()
            ),
        )
    })
}

/// Largest pipeline or mock spec read: real ones are a few kB.
pub const MAX_SPEC_BYTES: u64 = 1 << 20;
