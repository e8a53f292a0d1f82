//! The digest of an input taken while the reader consumes it: the run manifest records the
//! SHA-256 (FIPS 180-4) of every table, and hashing the bytes as they pass saves a second read
//! of files that can be gigabytes long.

use std::io::Read;
use std::path::{Path, PathBuf};

/// The SHA-256 digest (FIPS 180-4) and size of an input, computed from the bytes the reader
/// consumed, so the run manifest needs no second pass over the file.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct FileDigest {
    /// The path as the user gave it.
    pub path: PathBuf,
    /// Size in bytes.
    pub bytes: u64,
    /// SHA-256 of the contents, lower-case hex.
    pub sha256: String,
}

/// A reader that hashes every byte it passes on, on the thread that reads: the block reader
/// reads straight into its blocks, and with two cores a thread of its own for the hashing made
/// the CSV data stage slower, not faster (three threads on two cores; measured in
/// DEVELOPERS.md, Performance).
pub(crate) struct Hashing<R> {
    inner: R,
    hasher: sha2::Sha256,
    bytes: u64,
}

impl<R: Read> Hashing<R> {
    /// Hash what `inner` yields.
    pub fn new(inner: R) -> Self {
        Hashing {
            inner,
            hasher: sha2::Digest::new(),
            bytes: 0,
        }
    }

    /// The digest of the whole input (what was not read yet is read and hashed first),
    /// recorded under `path`.
    pub fn finish(mut self, path: &Path) -> std::io::Result<FileDigest> {
        std::io::copy(&mut self, &mut std::io::sink())?;
        let digest = sha2::Digest::finalize(self.hasher);
        let sha256 = digest.iter().map(|b| format!("{b:02x}")).collect();
        Ok(FileDigest {
            path: path.to_path_buf(),
            bytes: self.bytes,
            sha256,
        })
    }
}

impl<R: Read> Read for Hashing<R> {
    fn read(&mut self, buf: &mut [u8]) -> std::io::Result<usize> {
        let n = self.inner.read(buf)?;
        sha2::Digest::update(&mut self.hasher, &buf[..n]);
        self.bytes += n as u64;
        Ok(n)
    }
}
