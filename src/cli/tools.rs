//! Small commands: `rules`, `ventilation`, `completions`, and `check --float`.

use super::check::{load_rules, CheckArgs, OneFormat};
use super::{output, CliError, CmdResult};
use crate::profile::Profile;
use crate::rules::Rules;
use crate::units::{AmpHours, Celsius, Volts};
use crate::ventilation::{self, CellType, ChargeMode, VentilationInput};
use clap::{Args, ValueEnum};
use std::fmt::Write as _;
use std::path::PathBuf;

/// Arguments of `restvolt rules`.
#[derive(Debug, Args)]
#[command(
    after_help = "Examples:\n  restvolt rules\n  restvolt rules --rules site-rules.toml --format json\n\nAn override file holds a [rules] table of id = value, e.g.\n  [rules]\n  sg-spread = 0.030"
)]
pub struct RulesArgs {
    /// Rules overrides (TOML)
    #[arg(long, value_name = "FILE")]
    pub rules: Option<PathBuf>,
    /// Output format
    #[arg(long, value_enum, default_value = "text")]
    pub format: OneFormat,
}

/// Print the rules table in effect.
pub fn rules(args: RulesArgs) -> CmdResult {
    let r: Rules = load_rules(&args.rules)?;
    let rows = r.effective();
    let text = match args.format {
        OneFormat::Json => {
            serde_json::to_string_pretty(
                &serde_json::json!({"schema": "restvolt.rules/1", "rules": rows}),
            )
            .map_err(CliError::fail)?
                + "\n"
        }
        OneFormat::Text => {
            let mut s = String::new();
            for e in rows {
                let _ = writeln!(
                    s,
                    "{}{} = {} {}",
                    e.id,
                    if e.overridden { " (overridden)" } else { "" },
                    e.value,
                    e.unit
                );
                let _ = writeln!(s, "    {}", e.description);
                let _ = writeln!(s, "    source: {}", e.source);
            }
            s.push_str("\nProfile-specific limits (rest times, recharge thresholds, curve tolerance) are in each profile: `restvolt profiles show ID`.\n");
            s
        }
    };
    output::emit(None, text.as_bytes(), &[])?;
    Ok(0)
}

/// Cell construction for ventilation.
#[derive(Clone, Copy, Debug, PartialEq, Eq, ValueEnum)]
pub enum CellTypeArg {
    /// Vented (flooded) cells
    Vented,
    /// Valve-regulated (AGM, gel)
    Vrla,
}

/// Charging mode for ventilation.
#[derive(Clone, Copy, Debug, PartialEq, Eq, ValueEnum)]
pub enum ModeArg {
    /// Float charge
    Float,
    /// Boost (or equalizing) charge
    Boost,
}

/// Arguments of `restvolt ventilation`.
#[derive(Debug, Args)]
#[command(
    after_help = "Examples:\n  restvolt ventilation --cells 24 --capacity-ah 200 --type vented --mode boost\n  restvolt ventilation --cells 240 --capacity-ah 100 --type vrla --mode float --format json"
)]
pub struct VentilationArgs {
    /// Cells in the room (all strings)
    #[arg(long)]
    pub cells: u32,
    /// Rated capacity C_rt of one cell or string, Ah
    #[arg(long, value_name = "AH")]
    pub capacity_ah: f64,
    /// Cell construction
    #[arg(long = "type", value_enum)]
    pub cell_type: CellTypeArg,
    /// Charging mode
    #[arg(long, value_enum)]
    pub mode: ModeArg,
    /// Output format
    #[arg(long, value_enum, default_value = "text")]
    pub format: OneFormat,
}

/// Compute battery-room ventilation.
pub fn ventilation(a: VentilationArgs) -> CmdResult {
    let input = VentilationInput {
        cells: a.cells,
        capacity: AmpHours(a.capacity_ah),
        cell_type: match a.cell_type {
            CellTypeArg::Vented => CellType::Vented,
            CellTypeArg::Vrla => CellType::Vrla,
        },
        mode: match a.mode {
            ModeArg::Float => ChargeMode::Float,
            ModeArg::Boost => ChargeMode::Boost,
        },
    };
    let r = ventilation::required_ventilation(&input).map_err(CliError::usage)?;
    let text = match a.format {
        OneFormat::Json => {
            let mut v = serde_json::to_value(&r).map_err(CliError::fail)?;
            if let Some(o) = v.as_object_mut() {
                o.insert("schema".into(), "restvolt.ventilation/1".into());
            }
            serde_json::to_string_pretty(&v).map_err(CliError::fail)? + "\n"
        }
        OneFormat::Text => ventilation::render_text(&r),
    };
    output::emit(None, text.as_bytes(), &[])?;
    Ok(0)
}

/// What to generate.
#[derive(Clone, Copy, Debug, PartialEq, Eq, ValueEnum)]
pub enum CompletionTarget {
    /// bash completions
    Bash,
    /// zsh completions
    Zsh,
    /// fish completions
    Fish,
    /// PowerShell completions
    Powershell,
    /// Elvish completions
    Elvish,
    /// The man page (roff)
    Man,
}

/// Arguments of `restvolt completions`.
#[derive(Debug, Args)]
#[command(
    after_help = "Examples:\n  restvolt completions bash > /etc/bash_completion.d/restvolt\n  restvolt completions man > restvolt.1"
)]
pub struct CompletionsArgs {
    /// Shell, or `man`
    #[arg(value_enum)]
    pub target: CompletionTarget,
}

/// Write completions or the man page to stdout.
pub fn completions(a: CompletionsArgs, cmd: &mut clap::Command) -> CmdResult {
    let mut buf = Vec::new();
    let shell = match a.target {
        CompletionTarget::Man => {
            clap_mangen::Man::new(cmd.clone())
                .render(&mut buf)
                .map_err(CliError::fail)?;
            output::emit(None, &buf, &[])?;
            return Ok(0);
        }
        CompletionTarget::Bash => clap_complete::Shell::Bash,
        CompletionTarget::Zsh => clap_complete::Shell::Zsh,
        CompletionTarget::Fish => clap_complete::Shell::Fish,
        CompletionTarget::Powershell => clap_complete::Shell::PowerShell,
        CompletionTarget::Elvish => clap_complete::Shell::Elvish,
    };
    clap_complete::generate(shell, cmd, "restvolt", &mut buf);
    output::emit(None, &buf, &[])?;
    Ok(0)
}

/// `check --float`: one unit on float charge.
pub fn check_float(
    args: &CheckArgs,
    profile: &Profile,
    volts: Option<Volts>,
    temperature: Option<Celsius>,
    rules: &Rules,
) -> CmdResult {
    let _ = (args, profile, volts, temperature, rules);
    Err(CliError::usage(
        "--float needs the float checks, which this build does not have",
    ))
}
