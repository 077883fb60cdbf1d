//! The process heap, as the allocator holds it.

/// Return the heap's free pages to the system (glibc's `malloc_trim`): after a start-up
/// scan or a large export the service idles at its working size, not at its peak; during
/// a pass over a lot of many cycles the space it frees is not held as well.
pub fn release_heap() {
    #[cfg(all(target_os = "linux", target_env = "gnu"))]
    // SAFETY: malloc_trim only walks the allocator's own free lists; it takes no pointer.
    unsafe {
        libc::malloc_trim(0);
    }
}
