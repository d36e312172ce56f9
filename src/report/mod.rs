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
use crate::float::{StringFloatAnalysis, UnitFloatCheck};
use crate::profile::store::ProfileStore;
use crate::safety::{cautions_for_work, Caution, WorkKind};
use std::fmt;
use std::fmt::Write as _;
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
    /// Threads a format may use to write a large report (JSON serializes the
    /// units on them); the document is the same on any number.
    pub threads: usize,
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
        .map(|u| &**u)
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
    let mut cautions = cautions_for_work(&work);
    // A unit on float is judged in its string's analysis, not in `units`: its
    // work (a hot VRLA unit above all) brings its own cautions.
    for s in &report.float_strings {
        cautions.extend(s.cautions.iter().copied());
    }
    cautions.sort();
    cautions.dedup();
    cautions
}

/// The actions the cautions cover: those of the units, then those the float
/// checks call for that the units do not, most urgent first.
pub(crate) fn caution_actions(report: &FleetReport) -> Vec<Action> {
    let mut out: Vec<Action> = actions_present(report).iter().map(|(a, _)| *a).collect();
    for s in &report.float_strings {
        out.push(s.action);
        out.extend(s.per_unit.iter().map(|c| c.action));
    }
    out.sort();
    out.dedup();
    out
}

/// Units on float whose float checks raised a flag, with their string, in the
/// order of the float section (string, then most urgent action, then position).
pub(crate) fn float_units_flagged(
    s: &StringFloatAnalysis,
) -> impl Iterator<Item = &UnitFloatCheck> {
    let mut v: Vec<&UnitFloatCheck> = s.per_unit.iter().filter(|c| !c.flags.is_empty()).collect();
    v.sort_by(|a, b| {
        a.action
            .cmp(&b.action)
            .then(a.position.cmp(&b.position))
            .then(a.unit_id.cmp(&b.unit_id))
    });
    v.into_iter()
}

/// The line after the unit list about the units whose latest reading is on
/// float: why they show no state of charge, and where their string's checks
/// are (`section`, as the format names it). None when no unit is on float.
/// Their actions are in the unit list already, like every other unit's.
pub(crate) fn float_units_note(report: &FleetReport, section: &str) -> Option<String> {
    let n = report
        .units
        .iter()
        .filter(|u| u.flags.iter().any(|f| f == "on-float"))
        .count();
    match n {
        0 => None,
        1 => Some(format!(
            "1 unit on float: its state of charge is not read from a float voltage; see {section}"
        )),
        n => Some(format!(
            "{n} units on float: their state of charge is not read from a float voltage; see {section}"
        )),
    }
}

/// The sentence every format opens its float section with.
pub(crate) const FLOAT_INTRO: &str = "Readings taken on float charge, grouped by string. A float \
     voltage is held up by the charger, so no state of charge is read from it; the checks are the \
     share of the float voltage each unit gets, temperatures, and the float current over visits.";

/// "0.45 A (expected 0.100 A)", with what is missing said in words.
pub(crate) fn float_current_text(s: &StringFloatAnalysis) -> String {
    let expected = match s.expected_current_amperes {
        Some(e) => format!("expected {e:.3} A"),
        None => "expected unknown: no capacity given".into(),
    };
    match s.float_current_amperes {
        Some(i) => format!("{i:.3} A ({expected})"),
        None => format!("not read ({expected})"),
    }
}

/// "11.0 K", or why there is none.
pub(crate) fn float_temp_spread_text(s: &StringFloatAnalysis) -> String {
    match s.temperature_spread_c {
        Some(t) => format!("{t:.1} K"),
        None => "not checked (fewer than two unit temperatures)".into(),
    }
}

/// The state-of-charge verdict in a few words; the full note says why.
pub(crate) fn float_soc_status(s: &StringFloatAnalysis) -> String {
    match (s.fully_charged_on_float, s.rest_test_units.is_empty()) {
        (Some(true), _) => "fully charged on float".into(),
        (_, true) => "not shown fully charged; no unit to rest-test yet".into(),
        (_, false) => format!(
            "not shown fully charged; rest-test {}",
            s.rest_test_units.join(", ")
        ),
    }
}

/// "2.255 V/cell at 35.0 °C (ambient 23.0 °C)" with the parts that are known.
pub(crate) fn float_unit_reading(c: &UnitFloatCheck) -> String {
    let mut t = format!("{:.3} V/cell", c.volts_per_cell);
    if let Some(x) = c.temperature_celsius {
        let _ = write!(t, " at {x:.1} °C");
    }
    if let Some(a) = c.ambient_celsius {
        let _ = write!(t, " (ambient {a:.1} °C)");
    }
    let _ = write!(
        t,
        "; window {:.3}–{:.3} V/cell",
        c.window_volts_per_cell[0], c.window_volts_per_cell[1]
    );
    t
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

/// `n` and the noun that goes with it: "1 unit", "2 units".
pub(crate) fn plural(n: usize, one: &str, many: &str) -> String {
    format!("{n} {}", if n == 1 { one } else { many })
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
    fn every_format_renders_the_float_strings_without_a_state_of_charge() {
        let (report, store) = fixture::float_report();
        let ctx = fixture::ctx(&store);
        assert_eq!(report.float_strings.len(), 1);
        // The fixture's float units are never given a state of charge
        // (a float voltage is held by the charger: common practice).
        assert!(report.units.iter().all(|u| u.soc_percent.is_none()));
        for k in [FormatKind::Table, FormatKind::Markdown, FormatKind::Html] {
            let out = render(k, &report, &ctx);
            assert!(
                out.contains("cannot be read from float voltage"),
                "{k}: the state-of-charge note"
            );
            // The flagged blocks and their flags, in every format.
            for want in [
                "E2",
                "E4",
                "float-low",
                "float-deviation",
                "thermal-runaway-risk",
                "temp-spread",
                "FIST 3-6",
                "rest-test E2",
            ] {
                assert!(out.contains(want), "{k}: {want} missing");
            }
            // The healthy blocks have no line of their own in the float section.
            assert!(!out.contains("E1 #1") && !out.contains("| E1 | 1 |"), "{k}");
        }
    }

    #[test]
    fn a_fleet_of_one_unit_is_one_unit_in_every_heading() {
        let text =
            b"unit_id,taken_at,profile,volts,temp_c,rest_h\nA1,2026-03-01 10:00,agm,12.70,25,24\n";
        let (report, store) = fixture::report_of("one.csv", text);
        let ctx = fixture::ctx(&store);
        for (kind, want) in [
            (FormatKind::Table, "; 1 unit; generated"),
            (FormatKind::Markdown, " · 1 unit · generated"),
        ] {
            let out = render(kind, &report, &ctx);
            assert!(out.contains(want), "{kind:?}: {out}");
        }
        assert_eq!(plural(2, "unit", "units"), "2 units");
        assert_eq!(plural(0, "unit", "units"), "0 units");
    }

    #[test]
    fn the_float_units_line_counts_in_singular_and_plural() {
        let (mut report, _) = fixture::float_report();
        assert_eq!(
            float_units_note(&report, "X").as_deref(),
            Some("4 units on float: their state of charge is not read from a float voltage; see X")
        );
        for u in &mut report.units[1..] {
            u.flags.retain(|f| f != "on-float");
        }
        assert_eq!(
            float_units_note(&report, "X").as_deref(),
            Some("1 unit on float: its state of charge is not read from a float voltage; see X")
        );
        assert_eq!(float_units_note(&fixture::report().0, "X"), None);
    }

    #[test]
    fn a_hot_unit_on_float_brings_the_thermal_runaway_caution() {
        // VRLA makers' manuals (published, REFERENCES §5, via safety.rs): a unit
        // in thermal runaway is a hazard of its own; the float fixture's E4 is
        // 13 K above the room, so its caution must reach the report's list.
        let (report, _) = fixture::float_report();
        assert!(report_cautions(&report).contains(&Caution::ThermalRunaway));
        let acting: Vec<&str> = needing_action(&report)
            .map(|u| u.unit_id.as_str())
            .collect();
        // E4 is replaced; the string's rising current concerns every unit, so
        // all four are in the unit list with an action.
        assert_eq!(acting, ["E4", "E1", "E2", "E3"]);
        let (plain, _) = fixture::report();
        assert!(!report_cautions(&plain).contains(&Caution::ThermalRunaway));
    }

    #[test]
    fn a_settled_string_is_reported_fully_charged_on_float() {
        use crate::float::{analyse_string, FloatReading};
        use crate::rules::Rules;
        use crate::units::{AmpHours, Amperes, Celsius, Volts};
        let (mut report, store) = fixture::report();
        let p = store.get("agm").unwrap();
        let at = |d: u32| {
            chrono::NaiveDate::from_ymd_opt(2024, 1, d)
                .unwrap()
                .and_hms_opt(9, 0, 0)
                .unwrap()
        };
        let readings: Vec<FloatReading> = (1..=4)
            .map(|i| FloatReading {
                unit_id: format!("S{i}"),
                string: Some("settled".into()),
                position: Some(i),
                taken_at: Some(at(20)),
                volts: Volts(13.62),
                cells: 6,
                temperature: Some(Celsius(24.0)),
                ambient: Some(Celsius(23.0)),
                float_current: Some(Amperes(0.10)),
                capacity: Some(AmpHours(100.0)),
            })
            .collect();
        // 100 Ah × 1 mA/Ah (the profile's expected float current, from memory)
        // = 0.1 A; 0.1 A at both visits is within the ×2 settled factor (common practice).
        let previous = [(at(6), Amperes(0.11), Volts(54.48))];
        let a = analyse_string(p, "settled", &readings, &previous, &Rules::default()).unwrap();
        assert_eq!(a.fully_charged_on_float, Some(true));
        report.float_strings = vec![a];
        let ctx = fixture::ctx(&store);
        for k in [FormatKind::Table, FormatKind::Markdown, FormatKind::Html] {
            let out = render(k, &report, &ctx);
            assert!(out.contains("fully charged on float"), "{k}");
            assert!(out.contains("0.100 A (expected 0.100 A)"), "{k}");
            assert!(!out.contains("rest-test S"), "{k}");
        }
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
