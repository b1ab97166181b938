//! `flowsift`: where, and why, are packets being dropped?

use std::process::ExitCode;

fn main() -> ExitCode {
    settle_allocator();
    flowsift::run_main()
}

/// glibc's malloc hands memory freed at the top of its heap back to the
/// system once more than its trim threshold (128 KiB at start) is free, and
/// serves requests above its mmap threshold from fresh mappings; both
/// thresholds rise only when a large mapping is freed (mallopt(3),
/// M_MMAP_THRESHOLD, "dynamic adjustment"). Until then every batch's column
/// buffers, freed once written, come back as fresh pages that fault in on
/// first touch. Freeing one 31 MiB allocation (zeroed, so it is mapped but
/// never touched) raises both at start. Other allocators ignore this.
fn settle_allocator() {
    drop(std::hint::black_box(vec![0u8; 31 << 20]));
}
