//! Returning freed memory to the system between stages.
//!
//! Why it exists: glibc's allocator keeps memory a program frees inside its heaps (one per
//! thread that allocated, with `--jobs 2` several), where only later allocations from the same
//! heap reuse it. The read's buffers and the spectrum fits' temporaries are freed before the
//! next stage allocates elsewhere, so without this the run's resident memory counts them on
//! top of the data (production mock, 1000 configurations, `--jobs 2`: measured in
//! DEVELOPERS.md § Performance). `malloc_trim(0)` hands every wholly free page of every heap
//! back; it changes no value the program computes.

/// Give the free pages of every allocator heap back to the system (glibc only; a no-op
/// elsewhere).
pub(super) fn release_free_memory() {
    #[cfg(all(target_os = "linux", target_env = "gnu"))]
    // SAFETY: malloc_trim only inspects the allocator's own free lists; it has no
    // preconditions and may be called from any thread at any time.
    unsafe {
        libc::malloc_trim(0);
    }
}
