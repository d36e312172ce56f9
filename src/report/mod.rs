//! Reports for people: the fleet report in five formats, and the inline SVG
//! charts that go into the HTML page.
//!
//! Every format implements [`FleetFormat`]; [`render`] picks one by
//! [`FormatKind`]. All formats are deterministic: the same report and context
//! give the same bytes (the time of generation comes from the context, never
//! from the clock).
//!
//! | format | module | for |
//! |---|---|---|
//! | `table` | [`table`] | a terminal: ranked units, summary, data quality |
//! | `csv` | [`csv`] | a spreadsheet: one row per unit |
//! | `json` | [`json`] | programs: the report itself, schema `restvolt.fleet/1` |
//! | `markdown` | [`markdown`] | a ticket or wiki page |
//! | `html` | [`html`] | one self-contained page to read or print |

pub mod charts;
pub mod csv;
pub mod html;
pub mod json;
pub mod markdown;
pub mod table;

use crate::correct::Action;
use crate::fleet::analysis::{FleetReport, UnitReport};
use crate::profile::store::ProfileStore;
use crate::safety::{cautions_for_work, Caution, WorkKind};
use std::fmt;
use std::str::FromStr;

/// What a format needs besides the report itself.
pub struct ReportContext<'a> {
    /// Profiles, for thresholds and freezing-point curves.
    pub store: &'a ProfileStore,
    /// When the report was generated, printed as given.
    pub generated_at: String,
    /// The fleet's name for headings.
    pub fleet_name: String,
    /// ANSI colour in the terminal table (every other format ignores it). The
    /// caller passes false when stdout is not a terminal or `NO_COLOR` is set.
    pub colour: bool,
}

/// One output format of the fleet report.
pub trait FleetFormat {
    /// The whole document.
    fn render(&self, report: &FleetReport, ctx: &ReportContext) -> String;

    /// Write the whole document. Formats whose size grows with the fleet
    /// (JSON, CSV) stream it, so that a large report is never held in memory
    /// twice; the others write what [`FleetFormat::render`] gives.
    fn write_to(
        &self,
        report: &FleetReport,
        ctx: &ReportContext,
        out: &mut dyn std::io::Write,
    ) -> std::io::Result<()> {
        out.write_all(self.render(report, ctx).as_bytes())
    }
}

/// The formats, by name.
#[derive(Clone, Copy, Debug, PartialEq, Eq, clap::ValueEnum)]
pub enum FormatKind {
    /// Terminal table: ranked units, summary, data quality.
    Table,
    /// One CSV row per unit.
    Csv,
    /// The report as JSON (schema restvolt.fleet/1).
    Json,
    /// Markdown for a ticket or wiki page.
    Markdown,
    /// One self-contained HTML page with charts.
    Html,
}

impl FormatKind {
    /// Every format, in the order of the module table.
    pub const ALL: [FormatKind; 5] = [
        FormatKind::Table,
        FormatKind::Csv,
        FormatKind::Json,
        FormatKind::Markdown,
        FormatKind::Html,
    ];

    /// The format's name as typed on the command line.
    pub fn as_str(self) -> &'static str {
        match self {
            FormatKind::Table => "table",
            FormatKind::Csv => "csv",
            FormatKind::Json => "json",
            FormatKind::Markdown => "markdown",
            FormatKind::Html => "html",
        }
    }

    /// The usual file extension (without the dot).
    pub fn extension(self) -> &'static str {
        match self {
            FormatKind::Table => "txt",
            FormatKind::Csv => "csv",
            FormatKind::Json => "json",
            FormatKind::Markdown => "md",
            FormatKind::Html => "html",
        }
    }

    fn formatter(self) -> &'static dyn FleetFormat {
        match self {
            FormatKind::Table => &table::Table,
            FormatKind::Csv => &csv::Csv,
            FormatKind::Json => &json::Json,
            FormatKind::Markdown => &markdown::Markdown,
            FormatKind::Html => &html::Html,
        }
    }
}

impl fmt::Display for FormatKind {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.as_str())
    }
}

/// A format name that is not one of [`FormatKind::ALL`].
#[derive(Clone, Debug, PartialEq, Eq, thiserror::Error)]
#[error("unknown report format '{given}': expected one of table, csv, json, markdown, html")]
pub struct UnknownFormat {
    /// What was given.
    pub given: String,
}

impl FromStr for FormatKind {
    type Err = UnknownFormat;
    fn from_str(s: &str) -> Result<FormatKind, UnknownFormat> {
        let t = s.trim().to_ascii_lowercase();
        FormatKind::ALL
            .into_iter()
            .find(|k| k.as_str() == t || (t == "md" && *k == FormatKind::Markdown))
            .ok_or_else(|| UnknownFormat {
                given: s.to_string(),
            })
    }
}

/// Render `report` in `format`.
pub fn render(format: FormatKind, report: &FleetReport, ctx: &ReportContext) -> String {
    format.formatter().render(report, ctx)
}

/// Write a report in a format to `out` (streamed where the format allows).
pub fn write(
    format: FormatKind,
    report: &FleetReport,
    ctx: &ReportContext,
    out: &mut dyn std::io::Write,
) -> std::io::Result<()> {
    format.formatter().write_to(report, ctx, out)
}

/// The actions present in the report, most urgent first, with their unit counts.
pub(crate) fn actions_present(report: &FleetReport) -> Vec<(Action, usize)> {
    Action::ALL
        .into_iter()
        .filter_map(|a| {
            let n = report.units.iter().filter(|u| u.action == a).count();
            (n > 0).then_some((a, n))
        })
        .collect()
}

/// One site's counts as `N action, …` (most urgent first), with the site's total.
pub(crate) fn site_actions(counts: &std::collections::BTreeMap<String, usize>) -> (usize, String) {
    let parts: Vec<String> = Action::ALL
        .into_iter()
        .filter_map(|a| {
            counts
                .get(a.as_str())
                .map(|n| format!("{n} {}", a.as_str()))
        })
        .collect();
    (counts.values().sum(), parts.join(", "))
}

/// Units whose action is not `serviceable`, in rank order.
pub(crate) fn needing_action(report: &FleetReport) -> impl Iterator<Item = &UnitReport> {
    report
        .units
        .iter()
        .filter(|u| u.action != Action::Serviceable)
}

/// The cautions for the work the report's actions call for. A unit flagged
/// `freeze-risk` adds the frozen-battery caution, because the action it gets
/// (charge) is exactly what must not be done to a battery that has frozen.
pub(crate) fn report_cautions(report: &FleetReport) -> Vec<Caution> {
    let mut work: Vec<WorkKind> = actions_present(report)
        .iter()
        .flat_map(|(a, _)| a.work().iter().copied())
        .collect();
    if report
        .units
        .iter()
        .any(|u| u.flags.iter().any(|f| f == "freeze-risk"))
    {
        work.push(WorkKind::Frozen);
    }
    cautions_for_work(&work)
}

/// "site / string / #position" with the parts that are known.
pub(crate) fn location(u: &UnitReport) -> String {
    let mut parts: Vec<String> = Vec::new();
    if let Some(s) = &u.site {
        parts.push(s.clone());
    }
    if let Some(s) = &u.string {
        parts.push(s.clone());
    }
    if let Some(p) = u.position {
        parts.push(format!("#{p}"));
    }
    if parts.is_empty() {
        "-".into()
    } else {
        parts.join(" / ")
    }
}

/// "54.3 % [48.1–60.2]" or "-" when the state of charge is unknown.
pub(crate) fn soc_text(u: &UnitReport) -> String {
    match (u.soc_percent, u.soc_interval_percent) {
        (Some(s), Some([lo, hi])) => format!("{s:.1} [{lo:.1}–{hi:.1}]"),
        (Some(s), None) => format!("{s:.1}"),
        _ => "-".into(),
    }
}

/// The evidence numbers of a unit, as `(what, value with unit)` pairs, only
/// those that are known.
pub(crate) fn evidence(u: &UnitReport) -> Vec<(&'static str, String)> {
    let mut out = Vec::new();
    if let Some(v) = u.ocv_per_cell_25c_volts {
        out.push(("rest voltage per cell at 25 °C", format!("{v:.3} V")));
    }
    if let Some(t) = u.trend_percent_per_30_days {
        out.push((
            "trend",
            format!(
                "{t:+.1} % per 30 days ({} rested readings)",
                u.trend_readings
            ),
        ));
    }
    if let Some(d) = u.days_below_recharge {
        out.push(("below the recharge threshold", format!("{d:.0} days")));
    }
    if let (Some(d), Some(z)) = (u.peer_deviation_mv, u.peer_z) {
        out.push((
            "from the peer median",
            format!("{d:+.0} mV per cell (robust z {z:.1})"),
        ));
    }
    if let Some(r) = u.ohmic_rise_percent {
        out.push(("ohmic value over baseline", format!("{r:+.0} %")));
    }
    if let Some(c) = u.coldest_celsius {
        out.push(("coldest seen or expected", format!("{c:.0} °C")));
    }
    if let Some(f) = u.freezing_point_celsius {
        out.push(("freezing point now", format!("{f:.0} °C")));
    }
    if let Some(h) = u.heat_ageing_factor {
        if h > 1.0 {
            out.push(("heat-ageing factor", format!("{h:.2}×")));
        }
    }
    out.push((
        "latest reading",
        format!(
            "{} ({} reading{})",
            u.latest_at,
            u.readings,
            if u.readings == 1 { "" } else { "s" }
        ),
    ));
    out
}

/// `text` cut to at most `max` characters, ending in "…" when cut.
pub(crate) fn truncate(text: &str, max: usize) -> String {
    if text.chars().count() <= max {
        return text.to_string();
    }
    let keep = max.saturating_sub(1);
    let mut s: String = text.chars().take(keep).collect();
    s.push('…');
    s
}

#[cfg(test)]
pub(crate) mod fixture;

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn format_names_round_trip() {
        for k in FormatKind::ALL {
            assert_eq!(k.as_str().parse::<FormatKind>(), Ok(k));
        }
        assert_eq!("MD".parse::<FormatKind>(), Ok(FormatKind::Markdown));
        let e = "pdf".parse::<FormatKind>().unwrap_err();
        assert!(e.to_string().contains("'pdf'"));
    }

    #[test]
    fn streamed_output_is_the_rendered_document() {
        let (report, store) = fixture::report();
        let ctx = fixture::ctx(&store);
        for k in FormatKind::ALL {
            let mut bytes = Vec::new();
            write(k, &report, &ctx, &mut bytes).unwrap();
            assert_eq!(
                String::from_utf8(bytes).unwrap(),
                render(k, &report, &ctx),
                "{k}"
            );
        }
    }

    #[test]
    fn every_format_renders_the_fixture() {
        let (report, store) = fixture::report();
        let ctx = fixture::ctx(&store);
        for k in FormatKind::ALL {
            let out = render(k, &report, &ctx);
            // Every unit needing action appears in every format.
            for u in needing_action(&report) {
                assert!(out.contains(&u.unit_id), "{k}: {} missing", u.unit_id);
            }
        }
    }

    #[test]
    fn an_empty_fleet_renders_in_every_format() {
        use crate::fleet::analysis::{finish, FleetSettings, FleetState};
        let store = ProfileStore::builtin().unwrap();
        let report = finish(&FleetState::default(), &store, &FleetSettings::default());
        let ctx = fixture::ctx(&store);
        for k in FormatKind::ALL {
            assert!(!render(k, &report, &ctx).is_empty(), "{k}");
        }
        let csv = render(FormatKind::Csv, &report, &ctx);
        assert_eq!(csv.lines().count(), 1, "header only");
        let html = render(FormatKind::Html, &report, &ctx);
        assert!(html.contains("No unit needs action"));
    }

    #[test]
    fn truncate_counts_characters() {
        assert_eq!(truncate("abc", 3), "abc");
        assert_eq!(truncate("abcd", 3), "ab…");
        assert_eq!(truncate("°°°°", 2), "°…");
    }

    #[test]
    fn freeze_risk_brings_the_frozen_caution() {
        // OD1002 (published, via safety.rs): never charge a frozen battery; the
        // fixture's cold unit is flagged freeze-risk.
        let (report, _) = fixture::report();
        let c = report_cautions(&report);
        assert!(c.contains(&Caution::Frozen));
        assert_eq!(c.last(), Some(&Caution::General));
    }
}
