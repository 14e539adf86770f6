//! `glowsim`: the desk-side face of glowcheck. Every subcommand runs the same lib code the firmware runs.
use clap::{Parser, Subcommand};
use std::process::ExitCode;

mod labels;
mod lines_cmd;
mod peaks_cmd;
mod sensor;
mod synth_cmd;
mod trace;

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
}

fn main() -> ExitCode {
    let cli = Cli::parse();
    let result = match cli.command {
        Command::Lines(a) => lines_cmd::run(&a),
        Command::Synth(a) => synth_cmd::run(&a),
        Command::Peaks(a) => peaks_cmd::run(&a),
    };
    match result {
        Ok(()) => ExitCode::SUCCESS,
        Err(msg) => {
            eprintln!("glowsim: error: {msg}");
            ExitCode::from(2)
        }
    }
}
