//! Opening a correlator file: the HDF5 signature is checked without the library (a foreign
//! or truncated file gets a clear error, and only a regular file is opened: a FIFO would make
//! the open wait forever) before the library opens it.

use crate::error::{Error, Result};
use std::path::Path;

/// The HDF5 signature, at offset 0 or a power of two from 512 (after a user block).
const SIGNATURE: &[u8; 8] = b"\x89HDF\r\n\x1a\n";

/// Whether `bytes`, a whole file, hold the HDF5 signature where [`open_file`] looks for it
/// (offset 0, then 512, 1024, ...).
pub fn has_signature(bytes: &[u8]) -> bool {
    let mut offset = 0usize;
    while let Some(sig) = bytes.get(offset..offset.saturating_add(8)) {
        if sig == SIGNATURE {
            return true;
        }
        offset = if offset == 0 {
            512
        } else {
            offset.saturating_mul(2)
        };
    }
    false
}

/// Check that `path` is a regular file holding the HDF5 signature (where [`has_signature`]
/// looks) without the library; returns its size in bytes.
pub fn check_signature(path: &Path) -> Result<u64> {
    // Only a regular file: a FIFO would make the open wait forever.
    let mut f = crate::io::open_regular(path)?;
    let len = f.metadata().map_err(|e| Error::io(path, e))?.len();
    find_signature(&mut f, len, path)?;
    Ok(len)
}

/// [`check_signature`] of the open file `f` (of `len` bytes, at `path`).
pub fn find_signature(f: &mut std::fs::File, len: u64, path: &Path) -> Result<()> {
    use std::io::{Read, Seek, SeekFrom};
    let mut found = false;
    let mut offset = 0u64;
    while offset + 8 <= len {
        let mut sig = [0u8; 8];
        f.seek(SeekFrom::Start(offset))
            .and_then(|_| f.read_exact(&mut sig))
            .map_err(|e| Error::io(path, e))?;
        if &sig == SIGNATURE {
            found = true;
            break;
        }
        offset = if offset == 0 { 512 } else { offset * 2 };
    }
    if !found {
        return Err(Error::Table {
            path: path.to_path_buf(),
            message: "not an HDF5 file (no HDF5 signature); expected correlators written by an HDF5 library".into(),
        });
    }
    Ok(())
}

/// Open `path` for reading after checking that it is an HDF5 file. Returns the file and its
/// size in bytes.
pub fn open_file(path: &Path) -> Result<(hdf5::File, u64)> {
    let len = check_signature(path)?;
    let file = hdf5::File::open(path).map_err(|e| Error::Table {
        path: path.to_path_buf(),
        message: format!("cannot open as HDF5 (damaged or truncated?): {e}"),
    })?;
    Ok((file, len))
}
