//! `glowsim`: the desk-side face of glowcheck. Every subcommand runs the same lib code the firmware runs.
use clap::{Parser, Subcommand};
use std::process::ExitCode;

mod check_cmd;
mod instrument;
mod labels;
mod lines_cmd;
mod map_convert;
mod peaks_cmd;
mod profile_file;
mod report_out;
mod sensor;
mod synth_cmd;
mod toml_keys;
mod trace;

#[cfg(test)]
mod check_bar_tests;

/// Hydrogen-like spectrum checker: host simulator.
#[derive(Parser)]
#[command(name = "glowsim", version, about, long_about = None)]
struct Cli {
    #[command(subcommand)]
    command: Command,
}

#[derive(Subcommand)]
enum Command {
    /// Predict hydrogen-like emission lines (vacuum and air wavelengths).
    Lines(lines_cmd::Args),
    /// Synthesize a sensor trace from predicted lines and a sensor model.
    Synth(synth_cmd::Args),
    /// Find peaks and sub-pixel centroids in a trace.
    Peaks(peaks_cmd::Args),
    /// Check a tube: calibrate or verify, match lines, isotope shares, verdict.
    Check(check_cmd::Args),
}

fn main() -> ExitCode {
    let cli = Cli::parse();
    let result = match cli.command {
        Command::Lines(a) => lines_cmd::run(&a),
        Command::Synth(a) => synth_cmd::run(&a),
        Command::Peaks(a) => peaks_cmd::run(&a),
        // The verdict is the exit status: 0 pass, 1 fail, 3 inconclusive.
        Command::Check(a) => match check_cmd::run(&a) {
            Ok(code) => return code,
            Err(e) => Err(e),
        },
    };
    match result {
        Ok(()) => ExitCode::SUCCESS,
        Err(msg) => {
            eprintln!("glowsim: error: {msg}");
            ExitCode::from(2)
        }
    }
}
