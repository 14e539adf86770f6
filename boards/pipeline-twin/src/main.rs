//! Host twin of the QEMU pipeline firmware: the same checks on the same embedded frames, printed to
//! stdout. Exit status 0 when every case produced a report.

use std::process::ExitCode;

use glowcheck::check::Buffers;
use glowcheck::judge::Report;
use glowcheck_pipeline_report::traces::PIXELS;

fn main() -> ExitCode {
    let mut out = String::new();
    let mut buffers = Box::new(Buffers::<PIXELS>::new());
    let mut report = Box::new(Report::new());
    let result = glowcheck_pipeline_report::run(&mut out, &mut buffers, &mut report);
    print!("{out}");
    match result {
        Ok(_) => ExitCode::SUCCESS,
        Err(e) => {
            eprintln!("glowcheck-pipeline-twin: error: {e}");
            ExitCode::FAILURE
        }
    }
}
