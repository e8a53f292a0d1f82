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

/// A reader that hashes every byte it passes on. With more than one worker thread the input
/// is read ahead and hashed on a thread of its own, so neither the hashing nor the system's
/// copy of the file's bytes is done by the thread that cuts the input into blocks (which
/// bounds a parallel read); with one worker thread the bytes are hashed as they pass.
pub(crate) struct Hashing<R> {
    how: How<R>,
}

enum How<R> {
    /// Hash on the reading thread.
    Here {
        inner: R,
        hasher: sha2::Sha256,
        bytes: u64,
    },
    /// A thread reads and hashes the input; its chunks are passed on in order.
    Ahead(Ahead),
}

/// Bytes per chunk read ahead.
const CHUNK: usize = 1 << 20;
/// Chunks read ahead of the consumer.
const AHEAD: usize = 4;

/// The consumer's end of a read-ahead thread.
struct Ahead {
    chunks: std::sync::mpsc::Receiver<std::io::Result<Vec<u8>>>,
    /// Consumed chunks go back to the thread to be filled again (no fresh memory per chunk).
    spare: std::sync::mpsc::SyncSender<Vec<u8>>,
    current: Vec<u8>,
    /// Bytes of `current` passed on so far.
    pos: usize,
    /// The end of the input was reached (or an error passed on).
    done: bool,
    thread: std::thread::JoinHandle<(sha2::Sha256, u64)>,
}

impl<R: Read + Send + 'static> Hashing<R> {
    /// Hash what `inner` yields; an error only when the read-ahead thread cannot start.
    pub fn new(inner: R) -> std::io::Result<Self> {
        let how = if rayon::current_num_threads() > 1 {
            How::Ahead(Ahead::start(inner)?)
        } else {
            How::Here {
                inner,
                hasher: sha2::Digest::new(),
                bytes: 0,
            }
        };
        Ok(Hashing { how })
    }

    /// The digest of the whole input (what was not read yet is read and hashed first),
    /// recorded under `path`.
    pub fn finish(mut self, path: &Path) -> std::io::Result<FileDigest> {
        std::io::copy(&mut self, &mut std::io::sink())?;
        let (hasher, bytes) = match self.how {
            How::Here { hasher, bytes, .. } => (hasher, bytes),
            How::Ahead(Ahead {
                thread,
                chunks,
                spare,
                ..
            }) => {
                // The channels close first: a thread that still waits on them ends.
                drop((chunks, spare));
                thread
                    .join()
                    .map_err(|_| std::io::Error::other("the hashing thread failed"))?
            }
        };
        let digest = sha2::Digest::finalize(hasher);
        let sha256 = digest.iter().map(|b| format!("{b:02x}")).collect();
        Ok(FileDigest {
            path: path.to_path_buf(),
            bytes,
            sha256,
        })
    }
}

impl Ahead {
    /// Start the thread that reads `input` in chunks, hashes them and passes them on; it
    /// stops at the end of the input, at a read error (passed on) or when the consumer is
    /// gone.
    fn start<R: Read + Send + 'static>(mut input: R) -> std::io::Result<Self> {
        use std::sync::mpsc::sync_channel;
        let (to_consumer, chunks) = sync_channel(AHEAD);
        let (spare, from_consumer) = sync_channel::<Vec<u8>>(AHEAD + 2);
        let thread = std::thread::Builder::new()
            .name("read-ahead".into())
            .spawn(move || {
                let mut hasher: sha2::Sha256 = sha2::Digest::new();
                let mut bytes = 0u64;
                loop {
                    let mut buf = from_consumer.try_recv().unwrap_or_default();
                    buf.clear();
                    buf.reserve_exact(CHUNK);
                    let read = (&mut input).take(CHUNK as u64).read_to_end(&mut buf);
                    let failed = read.is_err();
                    match read {
                        Ok(0) => break,
                        Ok(n) => {
                            sha2::Digest::update(&mut hasher, &buf);
                            bytes += n as u64;
                        }
                        Err(_) => {}
                    }
                    // A consumer that is gone stopped early: nothing more to read for it.
                    if to_consumer.send(read.map(|_| buf)).is_err() || failed {
                        break;
                    }
                }
                (hasher, bytes)
            })?;
        Ok(Ahead {
            chunks,
            spare,
            current: Vec::new(),
            pos: 0,
            done: false,
            thread,
        })
    }
}

impl<R: Read> Read for Hashing<R> {
    fn read(&mut self, buf: &mut [u8]) -> std::io::Result<usize> {
        match &mut self.how {
            How::Here {
                inner,
                hasher,
                bytes,
            } => {
                let n = inner.read(buf)?;
                sha2::Digest::update(hasher, &buf[..n]);
                *bytes += n as u64;
                Ok(n)
            }
            How::Ahead(a) => a.read(buf),
        }
    }
}

impl Ahead {
    fn read(&mut self, buf: &mut [u8]) -> std::io::Result<usize> {
        while self.pos == self.current.len() {
            if self.done {
                return Ok(0);
            }
            match self.chunks.recv() {
                Ok(Ok(chunk)) => {
                    let used = std::mem::replace(&mut self.current, chunk);
                    self.pos = 0;
                    if used.capacity() > 0 {
                        // A full queue of spares only means the thread has enough.
                        let _ = self.spare.try_send(used);
                    }
                }
                Ok(Err(e)) => {
                    self.done = true;
                    return Err(e);
                }
                Err(_) => self.done = true,
            }
        }
        let n = buf.len().min(self.current.len() - self.pos);
        buf[..n].copy_from_slice(&self.current[self.pos..self.pos + n]);
        self.pos += n;
        Ok(n)
    }
}
