//! `restvolt settle`: the rested voltage from a few readings taken during one rest.

use super::check::{load_rules, OneFormat};
use super::{output, CliError, CmdResult};
use crate::correct::{assess, After, Flag, FlagCode, Reading, Setup};
use crate::profile::store::ProfileStore;
use crate::settle::{self, RelaxationModel, RestAfter, SettleOptions};
use crate::units::{Hours, Volts};
use clap::{Args, ValueEnum};
use serde::Serialize;
use std::fmt::Write as _;
use std::path::PathBuf;

/// Direction of the rest, as typed.
#[derive(Clone, Copy, Debug, PartialEq, Eq, ValueEnum)]
pub enum SettleAfterArg {
    /// The rest follows a charge: the voltage falls
    Charge,
    /// The rest follows a discharge: the voltage recovers
    Discharge,
}

/// Arguments of `restvolt settle`.
#[derive(Debug, Args)]
#[command(after_help = "Examples:
  restvolt settle demo-data/rest-series.csv --after charge --temp 18C
  restvolt settle --reading 20m=12.93 --reading 40m=12.85 --reading 1h=12.80 --reading 2h=12.74 --after charge

The CSV has `minutes` or `hours` (elapsed since the charge or discharge ended)
or `taken_at` timestamps with --ended-at, a `volts` column, and optional
`temp_c` or `temp_f`.")]
pub struct SettleArgs {
    /// CSV of readings during one rest (`-` for standard input)
    pub file: Option<PathBuf>,
    /// A hand-typed reading ELAPSED=VOLTS, e.g. 30m=12.93 (repeat)
    // Hyphen values reach the parser so `--reading -40m=12.8` gets its own message.
    #[arg(
        long = "reading",
        value_name = "ELAPSED=VOLTS",
        allow_hyphen_values = true
    )]
    pub readings: Vec<String>,
    /// When the charge or discharge ended, for timestamped files: 2026-11-30 14:05
    #[arg(long, value_name = "TIME")]
    pub ended_at: Option<String>,
    /// Profile id
    #[arg(long, default_value = "flooded-automotive")]
    pub profile: String,
    /// Cells in series [default: the profile's]
    #[arg(long)]
    pub cells: Option<u32>,
    /// What the rest follows (checks the curve moves the right way)
    #[arg(long, value_enum)]
    pub after: Option<SettleAfterArg>,
    /// Battery temperature with its unit (else the file's temperatures, else 25 °C assumed)
    #[arg(long, allow_hyphen_values = true)]
    pub temp: Option<String>,
    /// The voltmeter.
    #[command(flatten)]
    pub instrument: super::check::MeterArgs,
    /// Rules overrides (TOML)
    #[arg(long, value_name = "FILE")]
    pub rules: Option<PathBuf>,
    /// Output format
    #[arg(long, value_enum, default_value = "text")]
    pub format: OneFormat,
}

#[derive(Serialize)]
struct SettleJson<'a> {
    schema: &'static str,
    profile: &'a str,
    cells: u32,
    rested_volts: f64,
    rested_interval_volts: [f64; 2],
    model: RelaxationModel,
    settling_rate_mv_per_h: f64,
    finite_difference_rate_mv_per_h: f64,
    settling_limit_mv_per_h: f64,
    settled: bool,
    settled_at: Option<String>,
    settled_after_hours: Option<f64>,
    soc_percent: f64,
    soc_interval_percent: [f64; 2],
    temperature_celsius: f64,
    fits: &'a [settle::ModelFit],
    notes: &'a [String],
    flags: &'a [Flag],
}

fn parse_time(s: &str) -> Result<chrono::NaiveDateTime, CliError> {
    let t = s.trim();
    chrono::DateTime::parse_from_rfc3339(t)
        .map(|d| d.naive_local())
        .or_else(|_| chrono::NaiveDateTime::parse_from_str(t, "%Y-%m-%d %H:%M"))
        .or_else(|_| chrono::NaiveDateTime::parse_from_str(t, "%Y-%m-%dT%H:%M"))
        .or_else(|_| chrono::NaiveDateTime::parse_from_str(t, "%Y-%m-%d %H:%M:%S"))
        .map_err(|_| {
            CliError::usage(format!(
                "--ended-at: '{t}' is not a time: expected YYYY-MM-DD HH:MM or RFC 3339"
            ))
        })
}

/// Run `restvolt settle`.
pub fn run(args: SettleArgs, store: &ProfileStore) -> CmdResult {
    let profile = store
        .get(&args.profile)
        .map_err(|e| CliError::usage(format!("--profile: {e}")))?;
    let rules = load_rules(&args.rules)?;
    let ended_at = args.ended_at.as_deref().map(parse_time).transpose()?;
    let mut readings = Vec::new();
    let now = Some(chrono::Local::now().fixed_offset());
    if let Some(path) = &args.file {
        let name = path.display().to_string();
        let r = if path.as_os_str() == "-" {
            settle::read_rest_csv(std::io::stdin().lock(), "<stdin>", ended_at, now)
        } else {
            let f =
                std::fs::File::open(path).map_err(|e| CliError::fail(format!("{name}: {e}")))?;
            settle::read_rest_csv(std::io::BufReader::new(f), &name, ended_at, now)
        };
        readings = r.map_err(CliError::usage)?;
    }
    let mut points = settle::points(&readings);
    for r in &args.readings {
        points.push(
            settle::parse_reading_arg(r).map_err(|e| CliError::usage(format!("--reading: {e}")))?,
        );
    }
    if args.file.is_none() && args.readings.is_empty() {
        return Err(CliError::usage(
            "give a CSV file or --reading ELAPSED=VOLTS (at least three)",
        ));
    }
    let setup: Setup = args.instrument.setup()?;
    let temperature = match &args.temp {
        Some(s) => Some(super::check::temperature_option("--temp", s)?),
        None => {
            let ts: Vec<f64> = readings
                .iter()
                .filter_map(|r| r.temperature.map(|t| t.0))
                .collect();
            (!ts.is_empty())
                .then(|| crate::units::Celsius(ts.iter().sum::<f64>() / ts.len() as f64))
        }
    };
    let opts = SettleOptions {
        after: args.after.map(|a| match a {
            SettleAfterArg::Charge => RestAfter::Charge,
            SettleAfterArg::Discharge => RestAfter::Discharge,
        }),
        resolution: setup.resolution,
        target_rest: Hours(profile.preferred_rest_hours()),
        settling_limit_mv_per_h: profile.spec.rest.settling_limit_mv_per_h.value,
    };
    let analysis = settle::analyse(&points, &opts).map_err(|e| {
        if e.is_input_error() {
            CliError::usage(e)
        } else {
            CliError::fail(e)
        }
    })?;
    let fit = analysis.chosen_fit();
    let cells = super::check::cells_option(args.cells)?.unwrap_or(profile.cells());
    let at = |v: f64| {
        assess(
            profile,
            &Reading {
                volts: Some(Volts(v)),
                cells: Some(cells),
                temperature,
                rest: Some(Hours(profile.preferred_rest_hours())),
                after: After::Idle,
                ..Reading::default()
            },
            &setup,
            &rules,
        )
        .map_err(CliError::usage)
    };
    let mid = at(fit.rested_volts.0)?;
    // A rested voltage that no cell count of this profile explains has no
    // state of charge: refuse rather than print a confident one.
    if let Some(f) = mid.flags.iter().find(|f| {
        matches!(
            f.code,
            FlagCode::CheckConnection | FlagCode::WrongCellCount | FlagCode::SuspectShortedCell
        )
    }) {
        return Err(CliError::fail(format!(
            "rested voltage {:.3} V over {cells} cells (profile {}): {} ({}); no state of charge is given for it",
            fit.rested_volts.0,
            profile.id(),
            f.detail,
            f.code.as_str(),
        )));
    }
    let lo = at(fit.rested_interval_volts.0 .0)?;
    let hi = at(fit.rested_interval_volts.1 .0)?;
    let soc_interval = [lo.soc_interval_percent[0], hi.soc_interval_percent[1]];
    let last_elapsed = points.iter().map(|p| p.elapsed.0).fold(0.0, f64::max);
    let settled_at = fit.settled_at_elapsed.and_then(|h| {
        ended_at.map(|e| {
            (e + Hours(h.0).to_duration())
                .format("%Y-%m-%d %H:%M")
                .to_string()
        })
    });
    let doc = SettleJson {
        schema: "restvolt.settle/1",
        profile: profile.id(),
        cells,
        rested_volts: fit.rested_volts.0,
        rested_interval_volts: [
            fit.rested_interval_volts.0 .0,
            fit.rested_interval_volts.1 .0,
        ],
        model: fit.model,
        settling_rate_mv_per_h: fit.rate_at_last_mv_per_h,
        finite_difference_rate_mv_per_h: analysis.finite_difference_rate_mv_per_h,
        settling_limit_mv_per_h: opts.settling_limit_mv_per_h,
        settled: analysis.settled,
        settled_at,
        settled_after_hours: fit.settled_at_elapsed.map(|h| h.0),
        soc_percent: mid.soc_percent,
        soc_interval_percent: soc_interval,
        temperature_celsius: mid.temperature_celsius,
        fits: &analysis.fits,
        notes: &analysis.notes,
        flags: &mid.flags,
    };
    let text = match args.format {
        OneFormat::Json => serde_json::to_string_pretty(&doc).map_err(CliError::fail)? + "\n",
        OneFormat::Text => {
            let mut s = String::new();
            let _ = writeln!(
                s,
                "{} readings over {:.1} h; profile {} ({} cells)",
                points.len(),
                last_elapsed,
                profile.id(),
                cells
            );
            // The choice is by AICc only when the chosen fit's AICc is defined
            // and lower than every other's; otherwise the semi-log model, with
            // fewer parameters, was taken (see `settle`'s module doc).
            let by_aicc = fit.aicc.is_finite()
                && analysis
                    .fits
                    .iter()
                    .all(|f| f.model == fit.model || fit.aicc < f.aicc);
            let _ = writeln!(
                s,
                "  {:<12} {:>8}  {:<13}  {:>8}  {:>6}",
                "model", "rested V", "95 % interval", "residual", "AICc"
            );
            for f in &analysis.fits {
                let aicc = if f.aicc.is_finite() {
                    format!("{:.1}", f.aicc)
                } else {
                    "-".to_string()
                };
                let _ = writeln!(
                    s,
                    "  {:<12} {:>8.3}  {:<13}  {:>5.1} mV  {aicc:>6}{}",
                    f.model.to_string(),
                    f.rested_volts.0,
                    format!(
                        "{:.3}–{:.3}",
                        f.rested_interval_volts.0 .0, f.rested_interval_volts.1 .0
                    ),
                    f.residual_sd_mv,
                    if f.model == fit.model { "  chosen" } else { "" }
                );
            }
            let _ = writeln!(
                s,
                "  {}",
                if by_aicc {
                    "chosen by the lower AICc (small-sample Akaike criterion)".to_string()
                } else if analysis.fits.iter().any(|f| !f.aicc.is_finite()) {
                    format!(
                        "chosen for fewer parameters: AICc (-) is undefined with {} readings",
                        points.len()
                    )
                } else {
                    "chosen for fewer parameters: no lower AICc to choose by".to_string()
                }
            );
            for n in &analysis.notes {
                let _ = writeln!(s, "  note: {n}");
            }
            for f in &mid.flags {
                let _ = writeln!(s, "  flag {}: {}", f.code.as_str(), f.detail);
            }
            let what = match fit.model {
                RelaxationModel::SemiLog => {
                    format!("at {:.0} h of rest", profile.preferred_rest_hours())
                }
                RelaxationModel::Exponential => "asymptote".to_string(),
            };
            let _ = writeln!(s, "Rested voltage  {:.3} V ({what})", fit.rested_volts.0);
            let _ = writeln!(
                s,
                "Charge          {:.0} %  (95 %: {:.0}–{:.0} %)",
                mid.soc_percent, soc_interval[0], soc_interval[1]
            );
            let _ = writeln!(
                s,
                "                {}",
                super::check::gauge(mid.soc_percent, soc_interval)
            );
            let _ = writeln!(
                s,
                "Settling rate   {:+.1} mV/h at the last reading; limit {} mV/h",
                fit.rate_at_last_mv_per_h, opts.settling_limit_mv_per_h
            );
            let _ = writeln!(
                s,
                "                ({:+.1} mV/h between the last two readings)",
                analysis.finite_difference_rate_mv_per_h
            );
            let verdict = if analysis.settled {
                "settled: a rest reading now is trustworthy".to_string()
            } else {
                match (fit.settled_at_elapsed, &doc.settled_at) {
                    (_, Some(at)) => format!("not yet settled; steady at about {at}"),
                    (Some(h), None) => {
                        format!("not yet settled; steady about {:.1} h after the event", h.0)
                    }
                    (None, None) => {
                        "not yet settled, and not within 30 days by this model".to_string()
                    }
                }
            };
            let _ = writeln!(s, "Verdict         {verdict}");
            output::wrap_long_lines(&s, output::stdout_columns())
        }
    };
    output::emit(None, text.as_bytes(), &[])?;
    Ok(0)
}
