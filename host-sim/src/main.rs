//! `glowsim`: the desk-side face of glowcheck. Every subcommand runs the same lib code the firmware runs.
use clap::{Parser, Subcommand};
use std::process::ExitCode;

mod batch_cmd;
mod check_cmd;
mod defaults;
mod demo_cmd;
mod excerpt;
mod instrument;
mod labels;
mod lines_cmd;
mod link;
mod map_convert;
mod peaks_cmd;
mod plot;
mod profile_file;
mod record_cmd;
mod replay;
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
    /// Defaults file (instrument, profile, folders, port); `glowsim.toml` in the working directory
    /// is read when present.
    #[arg(long, global = true, value_name = "FILE")]
    config: Option<std::path::PathBuf>,
    #[command(subcommand)]
    command: Command,
}

#[derive(Subcommand)]
enum Command {
    /// Predict hydrogen-like emission lines (vacuum and air wavelengths).
    Lines(lines_cmd::Args),
    /// Synthesize a sensor trace from predicted lines and a sensor model.
    Synth(Box<synth_cmd::Args>),
    /// Find peaks and sub-pixel centroids in a trace.
    Peaks(peaks_cmd::Args),
    /// Check a tube: calibrate or verify, match lines, isotope shares, verdict.
    Check(check_cmd::Args),
    /// Incoming-inspection demo: check a bundled batch of tubes, print a table, write plots and JSON.
    Demo(demo_cmd::Args),
    /// Check many traces in parallel; summary JSON and CSV; resumable.
    Batch(batch_cmd::Args),
    /// Receive frames from a board over a serial line into a trace file.
    Record(record_cmd::Args),
}

fn main() -> ExitCode {
    let cli = Cli::parse();
    let defaults = || defaults::Defaults::load(cli.config.as_deref());
    let result = match cli.command {
        Command::Lines(a) => lines_cmd::run(&a),
        Command::Synth(a) => synth_cmd::run(&a),
        Command::Peaks(a) => peaks_cmd::run(&a),
        // The verdict is the exit status: 0 pass, 1 fail, 3 inconclusive.
        Command::Check(a) => match check_cmd::run(&a) {
            Ok(code) => return code,
            Err(e) => Err(e),
        },
        // Demo and batch: 0 all as expected / all pass, 1 a mismatch / a fail.
        Command::Demo(a) => match defaults().and_then(|d| demo_cmd::run(&a, &d)) {
            Ok(code) => return code,
            Err(e) => Err(e),
        },
        Command::Batch(a) => match defaults().and_then(|d| batch_cmd::run(&a, &d)) {
            Ok(code) => return code,
            Err(e) => Err(e),
        },
        Command::Record(a) => defaults().and_then(|d| record_cmd::run(&a, &d)),
    };
    match result {
        Ok(()) => ExitCode::SUCCESS,
        Err(msg) => {
            eprintln!("glowsim: error: {msg}");
            ExitCode::from(2)
        }
    }
}
