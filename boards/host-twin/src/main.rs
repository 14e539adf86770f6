//! Host twin of the QEMU boards: the same report code, printed to stdout.
//!
//! Exit status 0 when every case behaved as expected, 1 otherwise (the report still prints in full
//! so the diff shows where).

use std::process::ExitCode;

fn main() -> ExitCode {
    let mut out = String::new();
    match glowcheck_report::run(&mut out) {
        Ok(summary) => {
            print!("{out}");
            if summary.unexpected == 0 {
                ExitCode::SUCCESS
            } else {
                eprintln!(
                    "glowcheck-host-twin: {} unexpected result(s)",
                    summary.unexpected
                );
                ExitCode::FAILURE
            }
        }
        Err(_) => {
            print!("{out}");
            eprintln!("glowcheck-host-twin: error: report could not be written");
            ExitCode::FAILURE
        }
    }
}
