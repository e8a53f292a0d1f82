//! SIGINT and SIGTERM remove this process's temporary output directories before it ends.
//!
//! Why it exists: a run interrupted with Ctrl-C would otherwise leave a hidden
//! `.NAME.tmp-PID-N` directory of up to tens of megabytes behind. The signal handler itself
//! only writes one byte to a socket (an async-signal-safe call); a watcher thread wakes up,
//! removes the registered directories and ends the process with the signal's default action
//! (the self-pipe pattern, common practice). [`hold`] lets a directory swap finish before
//! the watcher acts.

use std::path::{Path, PathBuf};
use std::sync::{Mutex, MutexGuard, Once};

/// Temporary directories to remove on a signal.
static DIRS: Mutex<Vec<PathBuf>> = Mutex::new(Vec::new());

fn lock() -> MutexGuard<'static, Vec<PathBuf>> {
    DIRS.lock().unwrap_or_else(|e| e.into_inner())
}

/// Install the handlers once per process (later calls do nothing).
pub fn install() {
    static ONCE: Once = Once::new();
    ONCE.call_once(|| {
        #[cfg(unix)]
        unix::install();
    });
}

/// Remove `dir` if the process is interrupted.
pub fn register(dir: &Path) {
    lock().push(dir.to_path_buf());
}

/// Forget `dir` (committed or already removed).
pub fn unregister(dir: &Path) {
    lock().retain(|d| d != dir);
}

/// Signals wait while this is held.
pub struct Held(MutexGuard<'static, Vec<PathBuf>>);

/// Hold signals back (their clean-up waits) until the returned value is dropped.
pub fn hold() -> Held {
    Held(lock())
}

/// [`unregister`] while holding signals back.
pub fn unregister_held(held: &mut Held, dir: &Path) {
    held.0.retain(|d| d != dir);
}

#[cfg(unix)]
mod unix {
    use std::io::Read;
    use std::os::fd::IntoRawFd;
    use std::os::unix::net::UnixStream;
    use std::sync::atomic::{AtomicI32, Ordering};

    /// The socket end the handler writes to.
    static WRITE_FD: AtomicI32 = AtomicI32::new(-1);

    extern "C" fn on_signal(sig: libc::c_int) {
        let fd = WRITE_FD.load(Ordering::Relaxed);
        let byte = sig as u8;
        // SAFETY: write(2) is async-signal-safe; the buffer is a live local byte.
        unsafe {
            libc::write(fd, (&byte as *const u8).cast(), 1);
        }
    }

    pub(super) fn install() {
        let Ok((reader, writer)) = UnixStream::pair() else {
            return;
        };
        WRITE_FD.store(writer.into_raw_fd(), Ordering::Relaxed);
        let spawned = std::thread::Builder::new()
            .name("signal-cleanup".into())
            .spawn(move || watch(reader));
        if spawned.is_err() {
            return;
        }
        let handler = on_signal as extern "C" fn(libc::c_int);
        for sig in [libc::SIGINT, libc::SIGTERM] {
            // SAFETY: the handler only loads an atomic and calls write(2).
            unsafe {
                libc::signal(sig, handler as libc::sighandler_t);
            }
        }
    }

    fn watch(mut reader: UnixStream) {
        let mut byte = [0u8];
        if reader.read_exact(&mut byte).is_err() {
            return;
        }
        let sig = libc::c_int::from(byte[0]);
        let dirs = super::lock();
        for dir in dirs.iter() {
            // Writers may still be adding files; a few attempts catch up with them.
            for _ in 0..3 {
                if std::fs::remove_dir_all(dir).is_ok() || !dir.exists() {
                    break;
                }
            }
        }
        // SAFETY: restoring the default action and raising the signal again ends the process
        // the way the signal would have.
        unsafe {
            libc::signal(sig, libc::SIG_DFL);
            libc::raise(sig);
        }
        std::process::exit(128 + sig);
    }
}
