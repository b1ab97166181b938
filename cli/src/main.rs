//! `flowsift`: where, and why, are packets being dropped?

use std::process::ExitCode;

fn main() -> ExitCode {
    flowsift::run_main()
}
