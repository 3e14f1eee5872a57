//! A global allocator that counts allocations, shared by the perf report and the
//! allocation-free test.

use std::alloc::{GlobalAlloc, Layout, System};
use std::sync::atomic::{AtomicUsize, Ordering};

/// Forwards to the system allocator and counts `alloc` and `realloc` calls.
pub struct Counting;

static ALLOCATIONS: AtomicUsize = AtomicUsize::new(0);

/// Allocations so far in this process.
pub fn allocations() -> usize {
    ALLOCATIONS.load(Ordering::SeqCst)
}

// SAFETY: forwards every call to the system allocator unchanged; it only counts.
unsafe impl GlobalAlloc for Counting {
    unsafe fn alloc(&self, layout: Layout) -> *mut u8 {
        ALLOCATIONS.fetch_add(1, Ordering::SeqCst);
        // SAFETY: same contract as our caller's.
        unsafe { System.alloc(layout) }
    }
    unsafe fn dealloc(&self, ptr: *mut u8, layout: Layout) {
        // SAFETY: `ptr` was allocated by `System` with `layout`.
        unsafe { System.dealloc(ptr, layout) }
    }
    unsafe fn realloc(&self, ptr: *mut u8, layout: Layout, size: usize) -> *mut u8 {
        ALLOCATIONS.fetch_add(1, Ordering::SeqCst);
        // SAFETY: same contract as our caller's.
        unsafe { System.realloc(ptr, layout, size) }
    }
}
