//! The command line: clap definitions and their conversion to typed settings.
//! Nothing here computes; every command calls the library.
//!
//! Exit status: 0 success; 1 the command failed (a message says why);
//! 2 usage error (bad option or value); 3 fleet input had rejected rows (the
//! report is complete for the rest).

pub mod check;
pub mod fleet;
pub mod output;
pub mod profiles;
pub mod settle;
pub mod tools;

use clap::{CommandFactory, Parser, Subcommand};
use std::ffi::OsString;
use std::path::PathBuf;
use std::process::ExitCode;

/// Exit status for a failed command.
pub const EXIT_FAILURE: u8 = 1;
/// Exit status for a usage error.
pub const EXIT_USAGE: u8 = 2;
/// Exit status when some input rows were rejected.
pub const EXIT_REJECTED_ROWS: u8 = 3;

/// restvolt: state of charge of lead-acid batteries from rest voltage and hydrometer readings.
#[derive(Debug, Parser)]
#[command(name = "restvolt", version, about, long_about = None, propagate_version = true,
    after_help = "Start with `restvolt demo` (a fleet report on invented data) or\n`restvolt check --volts 12.45 --temp 25C --rest 24h`.\nSafety: read SAFETY.md before working on batteries.")]
pub struct Cli {
    /// Directory of user profiles (overrides built-ins of the same id) [env: RESTVOLT_PROFILES]
    #[arg(long, global = true, value_name = "DIR")]
    pub profiles: Option<PathBuf>,
    /// The command.
    #[command(subcommand)]
    pub command: Command,
}

/// The commands.
#[derive(Debug, Subcommand)]
pub enum Command {
    /// Assess one unit from a rest voltage and/or hydrometer readings
    Check(check::CheckArgs),
    /// Diagnose and rank a fleet from CSV readings
    Fleet(fleet::FleetArgs),
    /// Run the fleet report on the bundled, invented demo fleet
    Demo(fleet::DemoArgs),
    /// Write a synthetic fleet (input format) with a documented fault mix
    Generate(fleet::GenerateArgs),
    /// Fit a new profile from your own known-state-of-charge measurements
    Calibrate(tools::CalibrateArgs),
    /// Estimate the rested voltage from readings taken while the unit rests
    Settle(settle::SettleArgs),
    /// List, show and validate battery profiles
    #[command(
        subcommand,
        after_help = "Examples:\n  restvolt profiles list\n  restvolt profiles show agm --temp -10C\n  restvolt profiles check my-agm.toml"
    )]
    Profiles(profiles::ProfilesCommand),
    /// Print the rules table in effect (thresholds, defaults and sources)
    Rules(tools::RulesArgs),
    /// Battery-room ventilation airflow by IEC 62485-2
    Ventilation(tools::VentilationArgs),
    /// Write shell completions or the man page
    Completions(tools::CompletionsArgs),
}

/// An error that ends a command, with its exit status.
#[derive(Debug)]
pub struct CliError {
    /// Exit status.
    pub code: u8,
    /// Message for the user.
    pub message: String,
}

impl CliError {
    /// A failure (exit 1).
    pub fn fail(message: impl std::fmt::Display) -> CliError {
        CliError {
            code: EXIT_FAILURE,
            message: message.to_string(),
        }
    }
    /// A usage error (exit 2).
    pub fn usage(message: impl std::fmt::Display) -> CliError {
        CliError {
            code: EXIT_USAGE,
            message: message.to_string(),
        }
    }
}

/// What a command reports back: an exit status (0, or 3 with rejected rows).
pub type CmdResult = Result<u8, CliError>;

/// Parse arguments, run, and return the exit code. Messages go to stderr.
pub fn main_with_args<I, T>(args: I) -> ExitCode
where
    I: IntoIterator<Item = T>,
    T: Into<OsString> + Clone,
{
    let cli = match Cli::try_parse_from(args) {
        Ok(c) => c,
        Err(e) => {
            let code = if e.use_stderr() { EXIT_USAGE } else { 0 };
            let _ = e.print();
            return ExitCode::from(code);
        }
    };
    match run(cli) {
        Ok(code) => ExitCode::from(code),
        Err(e) if e.message.is_empty() => ExitCode::from(e.code),
        Err(e) => {
            eprintln!("restvolt: {}", e.message);
            ExitCode::from(e.code)
        }
    }
}

/// The profile store in effect for this run (built-ins plus the user directory).
pub fn store(cli_dir: &Option<PathBuf>) -> Result<restvolt_store::ProfileStore, CliError> {
    let dir = cli_dir
        .clone()
        .or_else(|| std::env::var_os(restvolt_store::PROFILES_ENV).map(PathBuf::from));
    let store =
        restvolt_store::ProfileStore::with_user_dir(dir.as_deref()).map_err(CliError::fail)?;
    for n in store.notices() {
        eprintln!("restvolt: note: {n}");
    }
    Ok(store)
}

use crate::profile::store as restvolt_store;

/// Run a parsed command line.
pub fn run(cli: Cli) -> CmdResult {
    match cli.command {
        Command::Check(a) => check::run(a, &store(&cli.profiles)?),
        Command::Fleet(a) => fleet::run(a, &store(&cli.profiles)?),
        Command::Demo(a) => fleet::demo(a, &store(&cli.profiles)?),
        Command::Generate(a) => fleet::generate(a),
        Command::Calibrate(a) => tools::calibrate(a, &store(&cli.profiles)?),
        Command::Settle(a) => settle::run(a, &store(&cli.profiles)?),
        Command::Profiles(c) => profiles::run(c, &cli.profiles),
        Command::Rules(a) => tools::rules(a),
        Command::Ventilation(a) => tools::ventilation(a),
        Command::Completions(a) => tools::completions(a, &mut Cli::command()),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn command_definition_is_consistent() {
        Cli::command().debug_assert();
    }
}
