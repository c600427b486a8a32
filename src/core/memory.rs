//! Giving memory that a finished phase of a run freed back to the operating system.
//!
//! Why: glibc's allocator keeps the pages a program frees, in the arena of the thread that freed
//! them (one per worker thread here), for that thread to reuse. A run's phases allocate in
//! different threads: the import and the report in the main thread, the window and progress fits
//! in rayon's workers, so each phase's peak stays resident after it ends and the peaks add up.
//! On the 1536-well, 2000-read plate this made the resident peak about 90 MB above the largest
//! heap in use at any one time (DEVELOPERS.md, "Memory"). `malloc_trim(0)` returns the free pages
//! of every arena; it costs a walk over the free lists (milliseconds), so it runs only between
//! phases. Elsewhere than glibc it does nothing.
//!
//! References: glibc manual, "Memory Allocation Tunables" and malloc_trim(3).

/// Returns the pages freed so far to the operating system (a no-op without glibc).
pub fn release_freed_memory() {
    #[cfg(all(target_os = "linux", target_env = "gnu"))]
    // SAFETY: malloc_trim only walks the allocator's own free lists; it has no preconditions.
    unsafe {
        libc::malloc_trim(0);
    }
}
