//! `glowsim lines` (being built).

/// Command-line options.
#[derive(clap::Args)]
pub struct Args {}

/// Runs the command.
pub fn run(_args: &Args) -> Result<(), String> {
    Err("not built yet".into())
}
