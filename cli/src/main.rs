//! `flowsift`: where, and why, are packets being dropped?

use std::process::ExitCode;

fn main() -> ExitCode {
    // Batches are freed once written or aggregated: keep their memory.
    ipfix_core::settle_allocator();
    flowsift::run_main()
}
