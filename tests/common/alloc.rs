//! A counting global allocator for the test binary: `peak_bytes(f)` runs `f` and returns the
//! peak of the bytes allocated by the calling thread during it (other test threads do not
//! count), so memory bounds can be tested without timing or process-wide measurements.

use std::alloc::{GlobalAlloc, Layout, System};
use std::cell::Cell;

struct Counting;

thread_local! {
    static TRACKING: Cell<bool> = const { Cell::new(false) };
    static CURRENT: Cell<isize> = const { Cell::new(0) };
    static PEAK: Cell<isize> = const { Cell::new(0) };
}

fn record(delta: isize) {
    let _ = TRACKING.try_with(|on| {
        if on.get() {
            let now = CURRENT.get() + delta;
            CURRENT.set(now);
            PEAK.set(PEAK.get().max(now));
        }
    });
}

// SAFETY: every call is forwarded unchanged to the system allocator; the bookkeeping touches
// only const-initialised thread-local cells, which never allocate.
unsafe impl GlobalAlloc for Counting {
    unsafe fn alloc(&self, layout: Layout) -> *mut u8 {
        record(layout.size() as isize);
        System.alloc(layout)
    }

    unsafe fn dealloc(&self, ptr: *mut u8, layout: Layout) {
        record(-(layout.size() as isize));
        System.dealloc(ptr, layout)
    }

    unsafe fn alloc_zeroed(&self, layout: Layout) -> *mut u8 {
        record(layout.size() as isize);
        System.alloc_zeroed(layout)
    }

    unsafe fn realloc(&self, ptr: *mut u8, layout: Layout, new_size: usize) -> *mut u8 {
        record(new_size as isize - layout.size() as isize);
        System.realloc(ptr, layout, new_size)
    }
}

#[global_allocator]
static COUNTING: Counting = Counting;

/// Run `f` and return its result with the peak number of bytes the calling thread held
/// allocated during it (allocations made before `f` do not count).
pub fn peak_bytes<T>(f: impl FnOnce() -> T) -> (T, usize) {
    CURRENT.with(|c| c.set(0));
    PEAK.with(|p| p.set(0));
    TRACKING.with(|t| t.set(true));
    let out = f();
    TRACKING.with(|t| t.set(false));
    (out, PEAK.with(Cell::get).max(0) as usize)
}
