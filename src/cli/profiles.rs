//! `restvolt profiles list|show|check`.

use super::check::OneFormat;
use super::{output, store, CliError, CmdResult};
use crate::profile::store::load_file;
use crate::profile::Profile;
use crate::units::{self, Celsius, SocPercent};
use clap::Subcommand;
use serde::Serialize;
use std::fmt::Write as _;
use std::path::PathBuf;

/// The profiles subcommands.
#[derive(Debug, Subcommand)]
pub enum ProfilesCommand {
    /// List the profiles in effect: id, family, cells, full-charge OCV per unit
    #[command(after_help = "Example:\n  restvolt profiles list")]
    List,
    /// Show one profile: its curve at 25 °C (or --temp) and every value's source
    #[command(
        after_help = "Examples:\n  restvolt profiles show agm\n  restvolt profiles show flooded-automotive --temp -10C\n  restvolt profiles show gel --format json"
    )]
    Show {
        /// Profile id
        id: String,
        /// Also show the curve at this temperature: -10C, 95F
        #[arg(long, allow_hyphen_values = true)]
        temp: Option<String>,
        /// Output format
        #[arg(long, value_enum, default_value = "text")]
        format: OneFormat,
    },
    /// Validate a user profile file; exits non-zero with the reasons when it fails
    #[command(after_help = "Example:\n  restvolt profiles check my-agm.toml")]
    Check {
        /// The TOML file
        file: PathBuf,
    },
}

/// One curve sample.
#[derive(Serialize)]
struct Sample {
    soc_percent: f64,
    volts_per_cell_25c: f64,
    unit_volts_25c: f64,
    #[serde(skip_serializing_if = "Option::is_none")]
    unit_volts_at_temperature: Option<f64>,
}

#[derive(Serialize)]
struct ShowJson<'a> {
    schema: &'static str,
    origin: &'a str,
    profile: &'a crate::profile::ProfileFile,
    temperature_celsius: Option<f64>,
    curve_samples: Vec<Sample>,
}

fn samples(p: &Profile, t: Option<Celsius>) -> Vec<Sample> {
    let n = p.cells() as f64;
    (0..=10)
        .map(|i| {
            let soc = SocPercent(i as f64 * 10.0);
            let v = p.curve().volts_at(soc).0;
            Sample {
                soc_percent: soc.0,
                volts_per_cell_25c: v,
                unit_volts_25c: v * n,
                unit_volts_at_temperature: t.map(|t| p.ocv_per_cell_at(soc, t).0 * n),
            }
        })
        .collect()
}

/// Run a profiles subcommand.
pub fn run(cmd: ProfilesCommand, dir: &Option<PathBuf>) -> CmdResult {
    match cmd {
        ProfilesCommand::List => {
            let store = store(dir)?;
            let mut s = format!(
                "{:<20} {:<8} {:>5} {:>9}  {}\n",
                "id", "family", "cells", "full (V)", "name"
            );
            for p in store.iter() {
                let full = p.curve().volts_max().0 * p.cells() as f64;
                let _ = writeln!(
                    s,
                    "{:<20} {:<8} {:>5} {:>9.3}  {}",
                    p.id(),
                    p.family().as_str(),
                    p.cells(),
                    full,
                    p.spec.name
                );
            }
            output::emit(None, s.as_bytes(), &[])?;
            Ok(0)
        }
        ProfilesCommand::Show { id, temp, format } => {
            let store = store(dir)?;
            let p = store.get(&id).map_err(CliError::usage)?;
            let t = temp
                .as_deref()
                .map(units::parse_temperature)
                .transpose()
                .map_err(|e| CliError::usage(format!("--temp: {e}")))?;
            let text = match format {
                OneFormat::Json => {
                    let doc = ShowJson {
                        schema: "restvolt.profile/1",
                        origin: &p.origin,
                        profile: &p.spec,
                        temperature_celsius: t.map(|t| t.0),
                        curve_samples: samples(p, t),
                    };
                    serde_json::to_string_pretty(&doc).map_err(CliError::fail)? + "\n"
                }
                OneFormat::Text => show_text(p, t),
            };
            output::emit(None, text.as_bytes(), &[])?;
            Ok(0)
        }
        ProfilesCommand::Check { file } => match load_file(&file) {
            Ok(p) => {
                let s = format!(
                    "{}: profile '{}' is valid ({} cells, curve {:.3}–{:.3} V per cell at 25 °C)\n",
                    file.display(),
                    p.id(),
                    p.cells(),
                    p.curve().volts_min().0,
                    p.curve().volts_max().0
                );
                output::emit(None, s.as_bytes(), &[])?;
                Ok(0)
            }
            Err(e) => Err(CliError::fail(e)),
        },
    }
}

fn show_text(p: &Profile, t: Option<Celsius>) -> String {
    let s = &p.spec;
    let mut o = String::new();
    let _ = writeln!(o, "{} — {}", s.id, s.name);
    let _ = writeln!(o, "{}", s.description);
    let _ = writeln!(
        o,
        "family {}, {} cells ({}), from {}",
        s.family.as_str(),
        s.cells.value,
        s.cells.source,
        p.origin
    );
    let _ = writeln!(o, "\nCurve ({}):", s.curve.source);
    match t {
        Some(t) => {
            let _ = writeln!(o, "  SOC %   V/cell 25°C   unit 25°C   unit {:.1}°C", t.0);
        }
        None => {
            let _ = writeln!(o, "  SOC %   V/cell 25°C   unit 25°C");
        }
    }
    for x in samples(p, t) {
        let _ = write!(
            o,
            "  {:>5.0}   {:>11.4}   {:>9.3}",
            x.soc_percent, x.volts_per_cell_25c, x.unit_volts_25c
        );
        if let Some(v) = x.unit_volts_at_temperature {
            let _ = write!(o, "   {v:>10.3}");
        }
        o.push('\n');
    }
    let e = &s.electrolyte;
    let _ = writeln!(
        o,
        "\nElectrolyte SG 25/25: full {} ({}); discharged {} ({})",
        e.full_charge_sg.value,
        e.full_charge_sg.source,
        e.discharged_sg.value,
        e.discharged_sg.source
    );
    let _ = writeln!(
        o,
        "OCV temperature coefficient: {:.3} mV/K per cell at 50 % ({})",
        p.ocv_coefficient(SocPercent(50.0)).0,
        s.temperature.source
    );
    let r = &s.rest;
    let _ = writeln!(
        o,
        "Rest: minimum {} h ({}); preferred {} h ({}); steady below {} mV/h ({})",
        r.minimum_hours.value,
        r.minimum_hours.source,
        r.preferred_hours.value,
        r.preferred_hours.source,
        r.settling_limit_mv_per_h.value,
        r.settling_limit_mv_per_h.source
    );
    let th = &s.thresholds;
    let _ = writeln!(
        o,
        "Recharge below {} % ({}); urgent below {} % ({})",
        th.recharge_below_soc_percent.value,
        th.recharge_below_soc_percent.source,
        th.urgent_below_soc_percent.value,
        th.urgent_below_soc_percent.source
    );
    let _ = writeln!(
        o,
        "Curve tolerance ±{} mV per cell ({})",
        s.tolerance.curve_mv_per_cell.value, s.tolerance.curve_mv_per_cell.source
    );
    let _ = writeln!(
        o,
        "Equalizing allowed: {} ({})",
        s.equalize_allowed.value, s.equalize_allowed.source
    );
    if let Some(f) = &s.float {
        let _ = writeln!(
            o,
            "Float window {:.2}–{:.2} V per cell at 25 °C ({}); compensation {} mV/K per cell",
            f.window_low_volts_per_cell.value,
            f.window_high_volts_per_cell.value,
            f.window_low_volts_per_cell.source,
            f.compensation_mv_per_k_per_cell.value
        );
    }
    for line in &s.provenance {
        let _ = writeln!(o, "provenance: {line}");
    }
    o
}
