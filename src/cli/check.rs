//! `restvolt check`: one unit, one reading, on site, now.

use super::{output, CliError, CmdResult};
use crate::correct::{assess, Action, After, Assessment, Reading, Setup};
use crate::electrolyte::HydrometerRule;
use crate::profile::store::ProfileStore;
use crate::profile::Profile;
use crate::rules::Rules;
use crate::safety::caution_text;
use crate::units::{self, Celsius, Hours, Kelvins, MeterAccuracy, SpecificGravity, Volts};
use clap::{Args, ValueEnum};
use serde::Serialize;
use std::fmt::Write as _;
use std::path::PathBuf;

/// Schema id of `check --format json`.
pub const CHECK_SCHEMA: &str = "restvolt.check/1";

/// Output format of single-unit commands.
#[derive(Clone, Copy, Debug, PartialEq, Eq, ValueEnum)]
pub enum OneFormat {
    /// Short text for a terminal (phone-sized)
    Text,
    /// JSON with a versioned schema
    Json,
}

/// What came before the reading, as typed.
#[derive(Clone, Copy, Debug, PartialEq, Eq, ValueEnum)]
pub enum AfterArg {
    /// Taken off charge
    Charge,
    /// After a discharge or load
    Discharge,
    /// Standing unused for a long time
    Idle,
    /// Not known
    Unknown,
}

impl From<AfterArg> for After {
    fn from(a: AfterArg) -> After {
        match a {
            AfterArg::Charge => After::Charge,
            AfterArg::Discharge => After::Discharge,
            AfterArg::Idle => After::Idle,
            AfterArg::Unknown => After::Unknown,
        }
    }
}

/// Hydrometer temperature-correction rule, as typed.
#[derive(Clone, Copy, Debug, PartialEq, Eq, ValueEnum)]
pub enum HydroArg {
    /// 0.001 per 1.67 °C (3 °F) from 25 °C (IEEE Std 450 practice)
    Step,
    /// 0.004 per 10 °F from 80 °F (US Army TM 5-4210-230-14&P-1)
    Army,
    /// The Laliberté density model of sulfuric acid
    Density,
}

impl From<HydroArg> for HydrometerRule {
    fn from(h: HydroArg) -> HydrometerRule {
        match h {
            HydroArg::Step => HydrometerRule::Step167,
            HydroArg::Army => HydrometerRule::Army10F,
            HydroArg::Density => HydrometerRule::DensityModel,
        }
    }
}

/// Arguments of `restvolt check`.
#[derive(Debug, Args)]
#[command(after_help = "Examples:
  restvolt check --volts 12.45 --temp 25C --rest 24h
  restvolt check --volts 12.38 --temp -5C --rest 40m --after charge --meter 0.5%+2
  restvolt check --sg 1.265,1.262,1.268,1.200,1.264,1.266 --temp 50F --profile flooded-automotive
  restvolt check --volts 13.52 --float --profile agm --temp 24C --ambient 22C
  restvolt check --volts 13.62 --float --profile agm --float-current 0.1 --capacity-ah 100

Actions, most urgent first (the first that applies wins):
  replace        take the unit out of service and replace it
  recharge-now   charge today: deeply discharged or at risk of freezing
  remeasure      the reading cannot be trusted: rest, check the leads, measure again
  equalize       give a controlled equalizing charge, where the maker allows it
  capacity-test  run a capacity test to learn the unit's real capacity
  recharge       charge at the next opportunity
  serviceable    leave in service; nothing to do")]
pub struct CheckArgs {
    /// Rest voltage across the unit's terminals, in volts (e.g. 12.45)
    #[arg(long, value_name = "V", allow_hyphen_values = true)]
    pub volts: Option<String>,
    /// Hydrometer readings: one per cell, comma-separated, or one mean value (SG as read)
    #[arg(long, value_name = "LIST")]
    pub sg: Option<String>,
    /// Profile id (see `restvolt profiles list`)
    #[arg(long, default_value = "flooded-automotive")]
    pub profile: String,
    /// Cells in series [default: the profile's]
    #[arg(long)]
    pub cells: Option<u32>,
    /// Battery temperature with its unit: -4C, 25F
    #[arg(long, value_name = "TEMP", allow_hyphen_values = true)]
    pub temp: Option<String>,
    /// Rest since the last charge or discharge: 40m, 6h, 2d, or unknown
    // Hyphen values reach parse_duration so `--rest -2h` gets its own message.
    #[arg(long, default_value = "unknown", allow_hyphen_values = true)]
    pub rest: String,
    /// What came before the rest
    #[arg(long, value_enum, default_value = "unknown")]
    pub after: AfterArg,
    /// The voltmeter.
    #[command(flatten)]
    pub instrument: MeterArgs,
    /// Standard uncertainty of the temperature, in K [default: 2 K, or 10 K with no --temp]
    #[arg(long, value_name = "K")]
    pub temp_uncertainty: Option<String>,
    /// Coldest temperature expected before the next visit: -20C
    #[arg(long, value_name = "TEMP", allow_hyphen_values = true)]
    pub min_temp: Option<String>,
    /// Hydrometer temperature-correction rule
    #[arg(long, value_enum, default_value = "step")]
    pub hydrometer_rule: HydroArg,
    /// The voltage was taken on float charge (not a rest voltage)
    #[arg(long)]
    pub float: bool,
    /// Ambient temperature, for --float: 22C
    #[arg(long, value_name = "TEMP", allow_hyphen_values = true)]
    pub ambient: Option<String>,
    /// The string's float current at this visit, in amperes, for --float: 0.10
    #[arg(long, value_name = "A", requires = "float", allow_hyphen_values = true)]
    pub float_current: Option<String>,
    /// Rated capacity of the unit (and so of its string), in Ah, for --float: 100
    #[arg(
        long,
        visible_alias = "capacity",
        value_name = "AH",
        requires = "float",
        allow_hyphen_values = true
    )]
    pub capacity_ah: Option<String>,
    /// The string's float current at the previous visit, in amperes (with --float-current)
    #[arg(
        long,
        value_name = "A",
        requires_all = ["float_current", "previous_volts", "previous_at"],
        allow_hyphen_values = true
    )]
    pub previous_float_current: Option<String>,
    /// Voltage read the same way (same unit, or whole string) at the previous visit
    #[arg(
        long,
        value_name = "V",
        requires = "previous_float_current",
        allow_hyphen_values = true
    )]
    pub previous_volts: Option<String>,
    /// When the previous visit was: 2026-09-15 09:30
    #[arg(long, value_name = "TIME", requires = "previous_float_current")]
    pub previous_at: Option<String>,
    /// Rules overrides (TOML, see `restvolt rules`)
    #[arg(long, value_name = "FILE")]
    pub rules: Option<PathBuf>,
    /// Output format
    #[arg(long, value_enum, default_value = "text")]
    pub format: OneFormat,
}

/// The voltmeter's accuracy and resolution, shared by every command that reads volts.
#[derive(Clone, Debug, Args)]
pub struct MeterArgs {
    /// Meter DC-volts accuracy as PERCENT%+COUNTS
    #[arg(long, default_value = "0.5%+2")]
    pub meter: String,
    /// Meter display resolution in volts
    #[arg(long, default_value = "0.01", value_name = "V")]
    pub resolution: String,
}

impl MeterArgs {
    /// A setup with this meter and every other setting at its default.
    pub fn setup(&self) -> Result<Setup, CliError> {
        let meter: MeterAccuracy = opt_usage("--meter", units::parse_meter(&self.meter))?;
        let resolution = opt_usage(
            "--resolution",
            units::parse_decimal(&self.resolution, "a resolution in volts, like 0.01"),
        )?;
        if !(resolution > 0.0 && resolution <= 1.0) {
            return Err(CliError::usage(format!(
                "--resolution: {resolution} V is not a meter resolution (expected 0.0001–1, like 0.01)"
            )));
        }
        Ok(Setup {
            meter,
            resolution: Volts(resolution),
            ..Setup::default()
        })
    }
}

/// Read `--rules FILE` or the defaults.
pub fn load_rules(path: &Option<PathBuf>) -> Result<Rules, CliError> {
    match path {
        None => Ok(Rules::default()),
        Some(p) => {
            let text = std::fs::read_to_string(p)
                .map_err(|e| CliError::fail(format!("{}: {e}", p.display())))?;
            Rules::from_toml(&text, &p.display().to_string()).map_err(CliError::usage)
        }
    }
}

fn opt_usage<T>(flag: &str, r: Result<T, units::UnitError>) -> Result<T, CliError> {
    r.map_err(|e| CliError::usage(format!("{flag}: {e}")))
}

/// A temperature option (`--temp 25C`), within the range the electrolyte
/// model accepts. A °C value that is implausible as °C but plausible as °F
/// says so; it is not guessed.
pub fn temperature_option(flag: &str, raw: &str) -> Result<Celsius, CliError> {
    use crate::electrolyte::{TEMPERATURE_MAX_C, TEMPERATURE_MIN_C};
    let t = opt_usage(flag, units::parse_temperature(raw))?;
    if (TEMPERATURE_MIN_C..=TEMPERATURE_MAX_C).contains(&t.0) {
        return Ok(t);
    }
    let as_f = Celsius::from_fahrenheit(t.0).0;
    let hint = if raw.to_ascii_uppercase().trim_end().ends_with('C')
        && (TEMPERATURE_MIN_C..=TEMPERATURE_MAX_C).contains(&as_f)
    {
        format!(
            "; if that was °F, write {}F ({as_f:.1} °C)",
            raw.trim()
                .trim_end_matches(['C', 'c'])
                .trim_end_matches('°')
                .trim()
        )
    } else {
        String::new()
    };
    Err(CliError::usage(format!(
        "{flag}: temperature {} °C is outside the accepted range {TEMPERATURE_MIN_C} to {TEMPERATURE_MAX_C} °C{hint}",
        units::Shown((t.0 * 10.0).round() / 10.0)
    )))
}

/// A `--cells` option: 1–400 cells in series, as in a fleet file.
pub fn cells_option(cells: Option<u32>) -> Result<Option<u32>, CliError> {
    match cells {
        Some(n) if !(1..=400).contains(&n) => Err(CliError::usage(format!(
            "--cells: {n} is not a number of cells in series (expected 1–400, like 6 for a 12 V block)"
        ))),
        c => Ok(c),
    }
}

/// The measurement setup from the arguments.
pub fn setup_from(args: &CheckArgs) -> Result<Setup, CliError> {
    let mut setup = args.instrument.setup()?;
    if let Some(s) = &args.temp_uncertainty {
        let k = opt_usage(
            "--temp-uncertainty",
            units::parse_decimal(s.trim_end_matches(['K', 'k']), "kelvin, like 2"),
        )?;
        if !(0.0..=30.0).contains(&k) {
            return Err(CliError::usage(format!(
                "--temp-uncertainty: {k} K is outside 0–30 K"
            )));
        }
        setup.temperature_uncertainty = Some(Kelvins(k));
    }
    if let Some(s) = &args.min_temp {
        setup.min_temperature = Some(opt_usage("--min-temp", units::parse_temperature(s))?);
    }
    setup.hydrometer_rule = args.hydrometer_rule.into();
    Ok(setup)
}

fn parse_volts(s: &str) -> Result<Volts, CliError> {
    let v = opt_usage("--volts", units::parse_decimal(s, "a voltage like 12.45"))?;
    if v.abs() > 1000.0 {
        return Err(CliError::usage(format!(
            "--volts: {} V is not a battery rest voltage (expected a value like 12.45; at most 1000 V)",
            units::Shown(v)
        )));
    }
    Ok(Volts(v))
}

fn parse_sg_list(s: &str) -> Result<Vec<SpecificGravity>, CliError> {
    s.split([',', ';', ' '])
        .filter(|p| !p.trim().is_empty())
        .enumerate()
        .map(|(i, p)| {
            let v = opt_usage(
                "--sg",
                units::parse_decimal(p, "a specific gravity like 1.265"),
            )?;
            if !(1.0..=1.4).contains(&v) {
                return Err(CliError::usage(format!(
                    "--sg: reading {} is {}: a lead-acid electrolyte reads 1.000–1.400",
                    i + 1,
                    units::Shown(v)
                )));
            }
            Ok(SpecificGravity(v))
        })
        .collect()
}

/// Run `restvolt check`.
pub fn run(args: CheckArgs, store: &ProfileStore) -> CmdResult {
    let profile = store
        .get(&args.profile)
        .map_err(|e| CliError::usage(format!("--profile: {e}")))?;
    let rules = load_rules(&args.rules)?;
    let setup = setup_from(&args)?;
    let temperature: Option<Celsius> = match &args.temp {
        None => None,
        Some(s) => Some(temperature_option("--temp", s)?),
    };
    let cells = cells_option(args.cells)?;
    let rest: Option<Hours> = opt_usage("--rest", units::parse_duration(&args.rest))?;
    if let Some(h) = rest.filter(|h| h.0 > crate::fleet::ingest::MAX_REST_HOURS) {
        return Err(CliError::usage(format!(
            "--rest: '{}' is {:.0} days, more than 10 years: expected the time since the last charge or discharge, like 40m, 6h or 2d (or unknown)",
            units::clip(&args.rest),
            h.0 / 24.0
        )));
    }
    let volts = args.volts.as_deref().map(parse_volts).transpose()?;
    let sg = args
        .sg
        .as_deref()
        .map(parse_sg_list)
        .transpose()?
        .unwrap_or_default();
    if args.float {
        return super::tools::check_float(&args, profile, volts, temperature, &rules);
    }
    let reading = Reading {
        volts,
        sg,
        cells,
        temperature,
        rest,
        after: args.after.into(),
    };
    let a = assess(profile, &reading, &setup, &rules).map_err(CliError::usage)?;
    let now = chrono::Local::now().naive_local();
    let text = match args.format {
        OneFormat::Json => {
            let mut s = serde_json::to_string_pretty(&CheckJson::new(&a, &setup, now))
                .map_err(CliError::fail)?;
            s.push('\n');
            s
        }
        OneFormat::Text => render_text(&a, &setup, profile, now, output::stdout_columns()),
    };
    output::emit(None, text.as_bytes(), &[])?;
    Ok(0)
}

/// The JSON document of `check` (schema `restvolt.check/1`).
#[derive(Serialize)]
pub struct CheckJson<'a> {
    /// Schema id and version.
    pub schema: &'static str,
    /// The assessment's fields, flattened.
    #[serde(flatten)]
    pub assessment: &'a Assessment,
    /// Clock time to measure again, for a short rest.
    pub remeasure_at: Option<String>,
    /// Setup in effect (defaults stated).
    pub setup: SetupJson,
}

/// The setup as reported.
#[derive(Serialize)]
pub struct SetupJson {
    /// Meter accuracy.
    pub meter: String,
    /// Resolution, V.
    pub resolution_volts: f64,
    /// Temperature standard uncertainty, K (None: rules-table default).
    pub temperature_uncertainty_k: Option<f64>,
}

impl<'a> CheckJson<'a> {
    /// Build the document.
    pub fn new(a: &'a Assessment, setup: &Setup, now: chrono::NaiveDateTime) -> CheckJson<'a> {
        CheckJson {
            schema: CHECK_SCHEMA,
            assessment: a,
            remeasure_at: remeasure_at(a, now),
            setup: SetupJson {
                meter: setup.meter.to_string(),
                resolution_volts: setup.resolution.0,
                temperature_uncertainty_k: setup.temperature_uncertainty.map(|k| k.0),
            },
        }
    }
}

fn remeasure_at(a: &Assessment, now: chrono::NaiveDateTime) -> Option<String> {
    a.rest
        .wait_hours
        .map(|h| (now + Hours(h).to_duration()).format("%H:%M").to_string())
}

/// A 20-character charge gauge: `[##########··········]`.
pub fn gauge(soc: f64, interval: [f64; 2]) -> String {
    let cells = 20usize;
    let pos = |x: f64| ((x.clamp(0.0, 100.0) / 100.0) * cells as f64).round() as usize;
    let (fill, lo, hi) = (pos(soc), pos(interval[0]), pos(interval[1]));
    let body: String = (0..cells)
        .map(|i| {
            if i < fill {
                '#'
            } else if i >= lo && i < hi.max(lo + 1) {
                '-'
            } else {
                '.'
            }
        })
        .collect();
    format!("[{body}]")
}

/// The short text report. The head (charge, gauge, rest) fits a phone; the
/// free text below (flags, reasons and their sources, cautions) is wrapped at
/// spaces to `width_columns`, continuation lines indented under their bullet.
pub fn render_text(
    a: &Assessment,
    setup: &Setup,
    profile: &Profile,
    now: chrono::NaiveDateTime,
    width_columns: usize,
) -> String {
    let wrap = |lead: &str, text: &str, indent: usize| {
        output::wrap_hanging(lead, text, indent, width_columns)
    };
    let mut s = String::new();
    let _ = writeln!(s, "{}  ({} cells)", profile.spec.name, a.cells);
    let unknown = a.charge_unknown();
    if unknown {
        // As the fleet report does: no number that would read as a charge.
        let _ = writeln!(s, "Charge  not known: this reading says nothing of it");
    } else {
        let _ = writeln!(
            s,
            "Charge  {:.0} %  (95 %: {:.0}–{:.0} %)",
            a.soc_percent, a.soc_interval_percent[0], a.soc_interval_percent[1]
        );
        let _ = writeln!(
            s,
            "        {}",
            gauge(a.soc_percent, a.soc_interval_percent)
        );
    }
    if let (Some(v), Some(c)) = (a.ocv_25c_volts, a.ocv_per_cell_25c_volts) {
        let _ = writeln!(s, "Rest V at 25 °C  {v:.3} V  ({c:.4} V/cell)");
    }
    if let Some(t) = a.temperature_correction_mv {
        let _ = writeln!(
            s,
            "Temp. correction {t:+.0} mV at {:.1} °C",
            a.temperature_celsius
        );
    }
    if let Some(sg) = &a.sg {
        let _ = writeln!(
            s,
            "SG at 25 °C      {:.3} mean, spread {:.3}",
            sg.mean_25c, sg.spread
        );
    }
    let rest = match (a.rest.status, a.rest.rest_hours) {
        (crate::correct::RestStatus::Settled, _) => "settled".to_string(),
        (crate::correct::RestStatus::Usable, Some(h)) => format!("{h:.1} h: usable"),
        (crate::correct::RestStatus::Short, Some(h)) => format!("{h:.1} h: too short"),
        _ => "unknown".to_string(),
    };
    let _ = writeln!(s, "Rest    {rest} (min {:.0} h)", a.rest.minimum_hours);
    if let Some(at) = remeasure_at(a, now) {
        let _ = writeln!(s, "        measure again at {at}");
    }
    // With the charge not known, the figure is a flat battery's (see
    // `Assessment::freezing_point_celsius`).
    let at = if unknown { "if flat" } else { "at this charge" };
    if let Some(fp) = a.freezing_point_celsius {
        let _ = writeln!(s, "Freezes near {fp:.0} °C {at}");
    }
    if !a.flags.is_empty() {
        let _ = writeln!(s, "Flags");
        for f in &a.flags {
            s += &wrap(&format!("  {}: ", f.code.as_str()), &f.detail, 4);
        }
    }
    s += &wrap(
        &format!("ACTION  {}: ", a.action.as_str()),
        a.action.meaning(),
        8,
    );
    for r in &a.reasons {
        let head = format!("{} ({}): {}", r.rule, r.action.as_str(), r.detail);
        s += &wrap("  - ", &head, 4);
        s += &wrap("    source: ", &r.source, 6);
    }
    let _ = writeln!(s, "Cautions");
    for c in &a.cautions {
        let t = caution_text(*c);
        s += &wrap("  ! ", &format!("{}: {}", t.title, t.text), 4);
    }
    s += &wrap(
        "",
        &format!(
            "Meter {} at {} V resolution; interval k = 2 (GUM).",
            setup.meter, setup.resolution.0
        ),
        2,
    );
    if a.action != Action::Serviceable {
        let _ = writeln!(s, "See SAFETY.md; the maker's instructions govern.");
    }
    s
}
