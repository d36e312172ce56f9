//! `restvolt fleet` and `restvolt demo`: ingest many readings, diagnose, rank, report.

use super::check::load_rules;
use super::{output, CliError, CmdResult, EXIT_REJECTED_ROWS};
use crate::fleet::analysis::{finish, finish_owned_on, FleetReport, FleetSettings, FleetState};
use crate::fleet::ingest::{IngestOptions, Parallelism};
use crate::profile::store::ProfileStore;
use crate::report::{self, FormatKind, ReportContext};
use crate::units;
use clap::{Args, ValueEnum};
use std::io::IsTerminal;
use std::path::{Path, PathBuf};

/// Fleet report formats.
#[derive(Clone, Copy, Debug, PartialEq, Eq, ValueEnum)]
pub enum FleetFormatArg {
    /// Ranked table for a terminal
    Table,
    /// One row per unit
    Csv,
    /// Versioned JSON (schema restvolt.fleet/1)
    Json,
    /// Markdown for a ticket or a wiki
    Markdown,
    /// One self-contained HTML page with charts
    Html,
}

impl From<FleetFormatArg> for FormatKind {
    fn from(f: FleetFormatArg) -> FormatKind {
        match f {
            FleetFormatArg::Table => FormatKind::Table,
            FleetFormatArg::Csv => FormatKind::Csv,
            FleetFormatArg::Json => FormatKind::Json,
            FleetFormatArg::Markdown => FormatKind::Markdown,
            FleetFormatArg::Html => FormatKind::Html,
        }
    }
}

/// Arguments of `restvolt fleet`.
#[derive(Debug, Args)]
#[command(after_help = "Examples:
  restvolt fleet demo-data/fleet.csv
  restvolt fleet readings-*.csv --profile agm --format html -o fleet.html
  cat export.csv | restvolt fleet - --delimiter ';' --format json

Exit status: 0 every row accepted; 3 some rows rejected (the report is complete
for the rest, and lists each rejected row with file:line and reason); 2 usage
error; 1 failure.")]
pub struct FleetArgs {
    /// Input CSV files (`-` for standard input)
    #[arg(required = true)]
    pub files: Vec<PathBuf>,
    /// Profile for rows without a `profile` column or value
    #[arg(long)]
    pub profile: Option<String>,
    /// Field delimiter: , ; or tab [default: detected from the header]
    #[arg(long)]
    pub delimiter: Option<String>,
    /// Coldest temperature expected before the next visit (freeze risk): -20C
    #[arg(long, allow_hyphen_values = true)]
    pub min_temp: Option<String>,
    /// Rules overrides (TOML, see `restvolt rules`)
    #[arg(long, value_name = "FILE")]
    pub rules: Option<PathBuf>,
    /// The voltmeter.
    #[command(flatten)]
    pub instrument: super::check::MeterArgs,
    /// Report format
    #[arg(long, value_enum, default_value = "table")]
    pub format: FleetFormatArg,
    /// Write the report here (whole or not at all) instead of standard output
    #[arg(short, long, value_name = "PATH")]
    pub output: Option<PathBuf>,
    /// Fleet name for the report header
    #[arg(long, default_value = "Fleet")]
    pub name: String,
    /// Threads for large inputs [default: one per core, at most 8]
    #[arg(long, value_name = "N", value_parser = clap::value_parser!(u16).range(1..=1024))]
    pub threads: Option<u16>,
}

/// Inputs at least this large are read on several threads, with a progress
/// bar when standard error is a terminal; smaller ones take well under a
/// second on one.
pub const LARGE_INPUT_BYTES: u64 = 8 << 20;

fn parse_delimiter(s: &str) -> Result<u8, CliError> {
    match s {
        "," | "comma" => Ok(b','),
        ";" | "semicolon" => Ok(b';'),
        "\t" | "tab" | "\\t" => Ok(b'\t'),
        other => Err(CliError::usage(format!(
            "--delimiter: '{other}' is not one of , ; tab"
        ))),
    }
}

/// The threads to use: the `--threads` value, else the default's.
fn threads_for(threads: Option<usize>) -> usize {
    threads.unwrap_or(Parallelism::default().threads)
}

/// Analyse readers into a report. Large files and standard input are read on
/// `threads` threads (the result is the same: see `fleet::tests`).
pub fn analyse_files(
    files: &[PathBuf],
    store: &ProfileStore,
    settings: &FleetSettings,
    opts: &IngestOptions,
    threads: Option<usize>,
) -> Result<FleetReport, CliError> {
    let how = Parallelism {
        threads: threads_for(threads),
        ..Parallelism::default()
    };
    let mut state = FleetState::default();
    for path in files {
        let name = path.display().to_string();
        let stats = if path.as_os_str() == "-" {
            state.ingest_parallel(
                "-",
                std::io::stdin(),
                opts,
                store,
                settings,
                how,
                &mut |_| {},
            )
        } else {
            let f =
                std::fs::File::open(path).map_err(|e| CliError::fail(format!("{name}: {e}")))?;
            let size = f.metadata().map(|m| m.len()).unwrap_or(0);
            if size >= LARGE_INPUT_BYTES && how.threads > 1 {
                let bar = progress_bar(&name, size);
                let stats =
                    state.ingest_parallel(&name, f, opts, store, settings, how, &mut |done| {
                        if let Some(b) = &bar {
                            b.set_position(done);
                        }
                    });
                if let Some(b) = bar {
                    b.finish_and_clear();
                }
                stats
            } else {
                state.ingest(&name, std::io::BufReader::new(f), opts, store, settings)
            }
        }
        .map_err(CliError::usage)?;
        for n in stats.notices {
            eprintln!("restvolt: note: {n}");
        }
    }
    Ok(finish_owned_on(state, store, settings, how.threads))
}

/// A progress bar on standard error, only when it is a terminal.
fn progress_bar(name: &str, size: u64) -> Option<indicatif::ProgressBar> {
    if !std::io::stderr().is_terminal() {
        return None;
    }
    let bar = indicatif::ProgressBar::with_draw_target(
        Some(size),
        indicatif::ProgressDrawTarget::stderr(),
    );
    if let Ok(style) = indicatif::ProgressStyle::with_template(
        "{msg} {wide_bar} {bytes}/{total_bytes} {bytes_per_sec} {eta}",
    ) {
        bar.set_style(style);
    }
    bar.set_message(format!("reading {name}"));
    Some(bar)
}

/// Run `restvolt fleet`.
pub fn run(args: FleetArgs, store: &ProfileStore) -> CmdResult {
    let rules = load_rules(&args.rules)?;
    let min_temperature = args
        .min_temp
        .as_deref()
        .map(units::parse_temperature)
        .transpose()
        .map_err(|e| CliError::usage(format!("--min-temp: {e}")))?;
    if let Some(p) = &args.profile {
        store
            .get(p)
            .map_err(|e| CliError::usage(format!("--profile: {e}")))?;
    }
    let settings = FleetSettings {
        setup: args.instrument.setup()?,
        rules,
        min_temperature,
        without_chart_history: args.format != FleetFormatArg::Html,
    };
    let opts = IngestOptions {
        default_profile: args.profile.clone(),
        delimiter: args.delimiter.as_deref().map(parse_delimiter).transpose()?,
        known_profiles: Some(store.iter().map(|p| p.id().to_string()).collect()),
        now: Some(chrono::Local::now().naive_local() + chrono::Duration::days(1)),
    };
    let threads = threads_for(args.threads.map(usize::from));
    let report = analyse_files(&args.files, store, &settings, &opts, Some(threads))?;
    write_report(
        &report,
        store,
        args.format.into(),
        args.output.as_deref(),
        &args.files,
        &args.name,
        threads,
    )?;
    let code = if report.summary.rows_rejected > 0 {
        EXIT_REJECTED_ROWS
    } else {
        0
    };
    // The command ends here and the process with it: freeing a large report
    // piece by piece (50,000 units, a million small allocations) took a
    // twelfth of a fleet run, for memory the system takes back at exit anyway.
    std::mem::forget(report);
    Ok(code)
}

/// Render and write a report.
pub fn write_report(
    report: &FleetReport,
    store: &ProfileStore,
    format: FormatKind,
    path: Option<&Path>,
    inputs: &[PathBuf],
    name: &str,
    threads: usize,
) -> Result<(), CliError> {
    let to_terminal = path.is_none() && std::io::stdout().is_terminal();
    let ctx = ReportContext {
        store,
        generated_at: chrono::Local::now().format("%Y-%m-%d %H:%M").to_string(),
        fleet_name: name.to_string(),
        colour: to_terminal && std::env::var_os("NO_COLOR").is_none(),
        threads,
    };
    output::emit_with(path, inputs, &mut |w| {
        report::write(format, report, &ctx, w)
    })
}

/// Arguments of `restvolt demo`.
#[derive(Debug, Args)]
#[command(after_help = "Examples:\n  restvolt demo\n  restvolt demo --html demo-report.html")]
pub struct DemoArgs {
    /// Also write the HTML report to this path
    #[arg(long, value_name = "PATH")]
    pub html: Option<PathBuf>,
    /// Format printed on standard output
    #[arg(long, value_enum, default_value = "table")]
    pub format: FleetFormatArg,
}

/// The bundled demo fleet (invented), embedded so `restvolt demo` works anywhere.
pub const DEMO_FLEET: &str = include_str!("../../demo-data/fleet.csv");

/// Run `restvolt demo`.
pub fn demo(args: DemoArgs, store: &ProfileStore) -> CmdResult {
    let settings = FleetSettings {
        min_temperature: None,
        ..FleetSettings::default()
    };
    let opts = IngestOptions {
        known_profiles: Some(store.iter().map(|p| p.id().to_string()).collect()),
        ..IngestOptions::default()
    };
    let mut state = FleetState::default();
    state
        .ingest(
            "demo-data/fleet.csv",
            DEMO_FLEET.as_bytes(),
            &opts,
            store,
            &settings,
        )
        .map_err(CliError::fail)?;
    let report = finish(&state, store, &settings);
    let name = "Demo fleet: Larchmere Rural Networks (invented)";
    if let Some(p) = &args.html {
        write_report(&report, store, FormatKind::Html, Some(p), &[], name, 1)?;
    }
    write_report(&report, store, args.format.into(), None, &[], name, 1)?;
    Ok(0)
}

/// Arguments of `restvolt generate`.
#[derive(Debug, Args)]
#[command(
    after_help = "Examples:\n  restvolt generate --units 500 --days 180 --seed 1 -o fleet.csv --truth faults.json\n  restvolt generate --units 50000 --days 140 --seed 7 -o big.csv"
)]
pub struct GenerateArgs {
    /// Number of units
    #[arg(long, default_value = "100")]
    pub units: u32,
    /// Days the readings span, from 2024-01-08 (fixed, so that a seed always gives the same file)
    #[arg(long, default_value = "90")]
    pub days: u32,
    /// Random seed (the same seed gives the same file)
    #[arg(long, default_value = "1")]
    pub seed: u64,
    /// Readings per unit [default: one a week plus one]
    #[arg(long)]
    pub readings_per_unit: Option<u32>,
    /// Output file (`-` or absent: standard output)
    #[arg(short, long, value_name = "PATH")]
    pub output: Option<PathBuf>,
    /// Also write the answer key here: JSON with every faulty unit's fault
    #[arg(long, value_name = "PATH")]
    pub truth: Option<PathBuf>,
}

/// Run `restvolt generate`.
pub fn generate(args: GenerateArgs) -> CmdResult {
    use crate::fleet::generate::{generate, GenerateOptions};
    let opts = GenerateOptions {
        units: args.units,
        days: args.days,
        seed: args.seed,
        readings_per_unit: args.readings_per_unit,
    };
    let mut summary = None;
    output::emit_with(args.output.as_deref(), &[], &mut |w| {
        summary = Some(generate(&opts, w)?);
        Ok(())
    })?;
    let Some(summary) = summary else {
        return Ok(0);
    };
    if let Some(p) = args.output.as_deref().filter(|p| *p != Path::new("-")) {
        // Counts only: the unit-by-unit answer key can be tens of thousands
        // of entries, and goes to --truth.
        let counts = serde_json::json!({
            "units": summary.units,
            "readings": summary.readings,
            "by_fault": summary.by_fault,
            "by_profile": summary.by_profile,
        });
        eprintln!("restvolt: wrote {}: {counts}", p.display());
    }
    // The start is fixed, so a long span runs past today, and `fleet`
    // rejects what is dated more than a day ahead.
    let first = crate::fleet::generate::first_day();
    let last = first + chrono::Duration::days(i64::from(args.days));
    let today = chrono::Local::now().date_naive();
    if last > today {
        eprintln!(
            "restvolt: note: the readings start on {first} and run to {last}, past today: `restvolt fleet` rejects readings dated more than a day ahead; --days {} or fewer keeps them all in the past",
            (today - first).num_days().max(0)
        );
    }
    if let Some(t) = &args.truth {
        let key = serde_json::to_vec_pretty(&summary).map_err(CliError::fail)?;
        let inputs: Vec<PathBuf> = args.output.iter().cloned().collect();
        output::write_atomic(t, &key, &inputs)?;
    }
    Ok(0)
}
