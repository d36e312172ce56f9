//! Small commands: `rules`, `ventilation`, `completions`, and `check --float`.

use super::check::{load_rules, CheckArgs, OneFormat};
use super::{output, CliError, CmdResult};
use crate::profile::Profile;
use crate::rules::Rules;
use crate::units::{AmpHours, Amperes, Celsius, Volts};
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

/// `check --float`: one unit on float charge. The float voltage is judged
/// against the temperature-compensated window; it is never turned into a
/// state of charge. With `--float-current` (and `--capacity-ah`, and the
/// previous visit's current) the string-current checks of the fleet report
/// are made too: the rising-current rule and "fully charged on float".
pub fn check_float(
    args: &CheckArgs,
    profile: &Profile,
    volts: Option<Volts>,
    temperature: Option<Celsius>,
    rules: &Rules,
) -> CmdResult {
    let volts = volts.ok_or_else(|| {
        CliError::usage("--float needs --volts (the float voltage across the unit or cell)")
    })?;
    let ambient = args
        .ambient
        .as_deref()
        .map(|s| super::check::temperature_option("--ambient", s))
        .transpose()?;
    let number = |flag: &str, text: &Option<String>, expected: &str| {
        text.as_deref()
            .map(|t| {
                crate::units::parse_decimal(t, expected)
                    .map_err(|e| CliError::usage(format!("{flag}: {e}")))
            })
            .transpose()
    };
    let float_current = number(
        "--float-current",
        &args.float_current,
        "a current in amperes, like 0.10",
    )?
    .map(Amperes);
    let capacity = number(
        "--capacity-ah",
        &args.capacity_ah,
        "a rated capacity in Ah, like 100",
    )?
    .map(AmpHours);
    let previous = match (
        number(
            "--previous-float-current",
            &args.previous_float_current,
            "a current in amperes, like 0.10",
        )?,
        number(
            "--previous-volts",
            &args.previous_volts,
            "a voltage like 54.48",
        )?,
        args.previous_at.as_deref(),
    ) {
        (Some(i), Some(v), Some(at)) => {
            let at = crate::fleet::ingest::parse_timestamp(at).ok_or_else(|| {
                CliError::usage(format!(
                    "--previous-at: '{at}' is not a time (expected YYYY-MM-DD HH:MM, or RFC 3339)"
                ))
            })?;
            vec![(at, Amperes(i), Volts(v))]
        }
        // clap requires all three together.
        _ => Vec::new(),
    };
    let reading = crate::float::FloatReading {
        unit_id: "unit".into(),
        string: None,
        position: None,
        taken_at: None,
        volts,
        cells: super::check::cells_option(args.cells)?.unwrap_or(profile.cells()),
        temperature,
        ambient,
        float_current,
        capacity,
    };
    let with_current = float_current.is_some() || capacity.is_some();
    let (c, current) = if with_current {
        let a = crate::float::analyse_string(profile, "unit", &[reading], &previous, rules)
            .map_err(CliError::usage)?;
        (one_unit_verdict(&a)?, Some(a))
    } else {
        (
            crate::float::check_unit(profile, &reading, rules).map_err(CliError::usage)?,
            None,
        )
    };
    let text = match args.format {
        OneFormat::Json => {
            let mut v = serde_json::to_value(&c).map_err(CliError::fail)?;
            if let Some(o) = v.as_object_mut() {
                o.insert("schema".into(), "restvolt.check-float/1".into());
                if let Some(a) = &current {
                    o.insert(
                        "float_current_amperes".into(),
                        a.float_current_amperes.into(),
                    );
                    o.insert(
                        "expected_current_amperes".into(),
                        a.expected_current_amperes.into(),
                    );
                    o.insert(
                        "fully_charged_on_float".into(),
                        a.fully_charged_on_float.into(),
                    );
                    o.insert("state_of_charge_note".into(), one_unit_note(a).into());
                }
            }
            serde_json::to_string_pretty(&v).map_err(CliError::fail)? + "\n"
        }
        OneFormat::Text => {
            // As `check` without --float: the free text wraps under its bullet.
            let width = output::stdout_columns();
            let wrap = |lead: &str, text: &str, indent: usize| {
                output::wrap_hanging(lead, text, indent, width)
            };
            let mut s = String::new();
            let _ = writeln!(
                s,
                "{} on float ({} cell{})",
                profile.spec.name,
                c.cells,
                if c.cells == 1 { "" } else { "s" }
            );
            let _ = writeln!(
                s,
                "Float   {:.3} V/cell; window {:.3}–{:.3} V/cell at {:.1} °C",
                c.volts_per_cell,
                c.window_volts_per_cell[0],
                c.window_volts_per_cell[1],
                c.compensation_celsius
            );
            match &current {
                Some(a) => {
                    let _ = writeln!(s, "Current {}", crate::report::float_current_text(a));
                    for (at, i, v) in &previous {
                        let _ = writeln!(
                            s,
                            "        previous visit {} A at {:.2} V, {}",
                            i.0,
                            v.0,
                            at.format("%Y-%m-%d %H:%M")
                        );
                    }
                    s += &wrap("", &one_unit_note(a), 2);
                }
                None => {
                    s += &wrap(
                        "",
                        "State of charge cannot be read from a float voltage: rest the unit to measure it.",
                        2,
                    );
                }
            }
            for f in &c.flags {
                s += &wrap(&format!("  {}: ", f.code.as_str()), &f.detail, 4);
            }
            for n in &c.notes {
                s += &wrap("  note: ", n, 4);
            }
            s += &wrap(
                &format!("ACTION  {}: ", c.action.as_str()),
                c.action.meaning(),
                8,
            );
            for r in &c.reasons {
                let head = format!("{} ({}): {}", r.rule, r.action.as_str(), r.detail);
                s += &wrap("  - ", &head, 4);
                s += &wrap("    source: ", &r.source, 6);
            }
            let _ = writeln!(s, "Cautions");
            for k in &c.cautions {
                let t = crate::safety::caution_text(*k);
                s += &wrap("  ! ", &format!("{}: {}", t.title, t.text), 4);
            }
            s
        }
    };
    output::emit(None, text.as_bytes(), &[])?;
    Ok(0)
}

/// The verdict on one unit checked by hand with the string current: its own
/// check, with the string-level flags and reasons (a rising current) folded
/// in, as the fleet report does for a unit on float.
fn one_unit_verdict(
    a: &crate::float::StringFloatAnalysis,
) -> Result<crate::float::UnitFloatCheck, CliError> {
    let mut c = a
        .per_unit
        .first()
        .cloned()
        .ok_or_else(|| CliError::fail("the float check returned no unit"))?;
    c.flags.extend(a.flags.iter().cloned());
    c.reasons.extend(a.reasons_for_unit(&c.unit_id));
    c.reasons.sort_by_key(|r| r.action);
    if let Some(r) = c.reasons.first() {
        c.action = r.action;
    }
    c.cautions = a.cautions.clone();
    // The comparisons between the units of a string do not apply to one unit.
    c.notes.extend(
        a.notes
            .iter()
            .filter(|n| {
                !n.starts_with("one unit only")
                    && !n.starts_with("fewer than two unit temperatures")
            })
            .cloned(),
    );
    Ok(c)
}

/// The string analysis's state-of-charge note, worded for one unit.
fn one_unit_note(a: &crate::float::StringFloatAnalysis) -> String {
    let list = format!(
        "take these units off float and rest-test them: {}.",
        a.rest_test_units.join(", ")
    );
    a.state_of_charge_note
        .replace(&list, "take the unit off float and rest-test it.")
}

/// Arguments of `restvolt calibrate`.
#[derive(Debug, Args)]
#[command(after_help = "Examples:
  restvolt calibrate capacity-tests.csv --id site-agm --from agm -o site-agm.toml
  restvolt profiles check site-agm.toml

The CSV has `soc_percent` (known state of charge, e.g. from a capacity test) and
`volts` (rested, across the unit) or `sg` (mean hydrometer reading), with
`temp_c` or `temp_f` and optionally `cells`.")]
pub struct CalibrateArgs {
    /// CSV of known state of charge against rested voltage or SG
    pub file: PathBuf,
    /// Id of the new profile (lower case, digits, hyphens)
    #[arg(long)]
    pub id: String,
    /// Base profile whose temperature coefficient, rules and shape outside the data are used
    #[arg(long, default_value = "flooded-automotive")]
    pub from: String,
    /// Where to write the new profile (TOML)
    #[arg(short, long, value_name = "PATH.toml")]
    pub output: PathBuf,
    /// Report format
    #[arg(long, value_enum, default_value = "text")]
    pub format: OneFormat,
}

/// Run `restvolt calibrate`.
pub fn calibrate(a: CalibrateArgs, store: &crate::profile::store::ProfileStore) -> CmdResult {
    use crate::calibrate::{calibrate, read_points, sha256_hex, CalibrateOptions};
    let base = store
        .get(&a.from)
        .map_err(|e| CliError::usage(format!("--from: {e}")))?;
    let name = a.file.display().to_string();
    let bytes = std::fs::read(&a.file).map_err(|e| CliError::fail(format!("{name}: {e}")))?;
    let points = read_points(&name, bytes.as_slice(), base).map_err(CliError::usage)?;
    let opts = CalibrateOptions {
        new_id: a.id.clone(),
        input_name: a
            .file
            .file_name()
            .map(|n| n.to_string_lossy().into_owned())
            .unwrap_or(name.clone()),
        input_sha256: sha256_hex(&bytes),
        today: chrono::Local::now().date_naive(),
    };
    let c = calibrate(&points, base, &opts).map_err(|e| match e {
        crate::calibrate::CalibrateError::BadId(_) => CliError::usage(format!("--id: {e}")),
        e => CliError::usage(e),
    })?;
    let toml = c.to_toml().map_err(CliError::fail)?;
    output::write_atomic(&a.output, toml.as_bytes(), std::slice::from_ref(&a.file))?;
    let text = match a.format {
        OneFormat::Json => serde_json::to_string_pretty(&c.report).map_err(CliError::fail)? + "\n",
        OneFormat::Text => {
            let mut s = c.report.render_text();
            let _ = writeln!(s, "wrote {}", a.output.display());
            output::wrap_long_lines(&s, output::stdout_columns())
        }
    };
    output::emit(None, text.as_bytes(), &[])?;
    Ok(0)
}
