//! One CSV row per unit, in rank order, for spreadsheets.
//!
//! Columns (a header line names them): `rank`, `unit_id`, `site`, `string`,
//! `position`, `profile`, `action`, `soc_percent`, `soc_low_percent`,
//! `soc_high_percent`, `flags` (flag codes joined by `;`), `reasons` (rule ids
//! joined by `;`), `trend_percent_per_30_days`, `trend_readings`,
//! `days_below_recharge`, `ocv_per_cell_25c_volts`, `peer_deviation_mv`,
//! `peer_z`, `ohmic_rise_percent`, `coldest_celsius`,
//! `freezing_point_celsius`, `heat_ageing_factor`, `readings`, `latest_at`.
//! An unknown value is an empty field. Numbers use a decimal point and as
//! many decimals as the analysis kept. A name from the input (unit id, site,
//! string) that begins with `=`, `+`, `-`, `@`, a tab, a carriage return or
//! a NUL is written after a `'`, so that a spreadsheet shows it as text
//! instead of running it as a formula (OWASP ASVS 5.0 requirement 1.2.10 and
//! CWE-1236, published).

use super::{FleetFormat, ReportContext};
use crate::fleet::analysis::FleetReport;

/// The CSV format.
#[derive(Clone, Copy, Debug, Default)]
pub struct Csv;

/// The header, in column order.
pub const COLUMNS: [&str; 24] = [
    "rank",
    "unit_id",
    "site",
    "string",
    "position",
    "profile",
    "action",
    "soc_percent",
    "soc_low_percent",
    "soc_high_percent",
    "flags",
    "reasons",
    "trend_percent_per_30_days",
    "trend_readings",
    "days_below_recharge",
    "ocv_per_cell_25c_volts",
    "peer_deviation_mv",
    "peer_z",
    "ohmic_rise_percent",
    "coldest_celsius",
    "freezing_point_celsius",
    "heat_ageing_factor",
    "readings",
    "latest_at",
];

/// A name from the input as a spreadsheet should see it: as text, never as
/// a formula (see the module's comment).
fn text(name: &str) -> String {
    if name.starts_with(['=', '+', '-', '@', '\t', '\r', '\0']) {
        format!("'{name}")
    } else {
        name.to_string()
    }
}

fn num(v: Option<f64>) -> String {
    v.filter(|x| x.is_finite())
        .map(|x| x.to_string())
        .unwrap_or_default()
}

impl FleetFormat for Csv {
    fn render(&self, report: &FleetReport, ctx: &ReportContext) -> String {
        let mut bytes = Vec::new();
        // Writing into a Vec cannot fail for I/O reasons, and every record has
        // the header's length, so the result carries no real error.
        let _ = self.write_to(report, ctx, &mut bytes);
        String::from_utf8_lossy(&bytes).into_owned()
    }

    fn write_to(
        &self,
        report: &FleetReport,
        _ctx: &ReportContext,
        out: &mut dyn std::io::Write,
    ) -> std::io::Result<()> {
        let mut w = ::csv::WriterBuilder::new()
            .terminator(::csv::Terminator::Any(b'\n'))
            .from_writer(out);
        w.write_record(COLUMNS).map_err(io_error)?;
        for u in &report.units {
            let [lo, hi] = u
                .soc_interval_percent
                .map_or([None, None], |[a, b]| [Some(a), Some(b)]);
            let rules: Vec<&str> = u.reasons.iter().map(|r| r.rule.as_str()).collect();
            let record: [String; 24] = [
                u.rank.to_string(),
                text(&u.unit_id),
                u.site.as_deref().map(text).unwrap_or_default(),
                u.string.as_deref().map(text).unwrap_or_default(),
                u.position.map(|p| p.to_string()).unwrap_or_default(),
                u.profile.clone(),
                u.action.as_str().to_string(),
                num(u.soc_percent),
                num(lo),
                num(hi),
                u.flags.join(";"),
                rules.join(";"),
                num(u.trend_percent_per_30_days),
                u.trend_readings.to_string(),
                num(u.days_below_recharge),
                num(u.ocv_per_cell_25c_volts),
                num(u.peer_deviation_mv),
                num(u.peer_z),
                num(u.ohmic_rise_percent),
                num(u.coldest_celsius),
                num(u.freezing_point_celsius),
                num(u.heat_ageing_factor),
                u.readings.to_string(),
                u.latest_at.clone(),
            ];
            w.write_record(&record).map_err(io_error)?;
        }
        w.flush()
    }
}

/// The writer's own error out of a csv error, so that a broken pipe stays
/// one (csv's conversion to `io::Error` would make it "other").
fn io_error(e: ::csv::Error) -> std::io::Error {
    match e.into_kind() {
        ::csv::ErrorKind::Io(e) => e,
        other => std::io::Error::other(format!("{other:?}")),
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::report::fixture;

    fn out() -> (String, FleetReport) {
        let (report, store) = fixture::report();
        (Csv.render(&report, &fixture::ctx(&store)), report)
    }

    /// OWASP ASVS 5.0 requirement 1.2.10 and CWE-1236 (published): a cell
    /// that begins with `=`, `+`, `-` or `@` (or a tab, a carriage return or a
    /// NUL) is read as a formula by spreadsheets, and is to be written after
    /// a single quote; names from the input are.
    #[test]
    fn names_that_a_spreadsheet_would_run_are_written_as_text() {
        let csv_in = "unit_id,taken_at,profile,site,string,volts,temp_c,rest_h\n\
            \"=HYPERLINK(\"\"http://x\"\")\",2026-03-01 10:00,agm,@north,-S1,12.7,25,24\n\
            +B2,2026-03-01 10:00,agm,south,S2,12.7,25,24\n\
            C-3,2026-03-01 10:00,agm,east,S3,12.7,25,24\n";
        let (report, store) = fixture::report_of("in.csv", csv_in.as_bytes());
        let text = Csv.render(&report, &fixture::ctx(&store));
        let mut r = ::csv::Reader::from_reader(text.as_bytes());
        let rows: Vec<Vec<String>> = r
            .records()
            .map(|rec| rec.unwrap().iter().take(4).map(str::to_string).collect())
            .collect();
        let find = |id: &str| rows.iter().find(|row| row[1] == id).cloned();
        let a = find("'=HYPERLINK(\"http://x\")").expect("the formula id, as text");
        assert_eq!((a[2].as_str(), a[3].as_str()), ("'@north", "'-S1"));
        assert!(find("'+B2").is_some());
        // A name that only holds such a character further on is left as it is.
        assert_eq!(
            find("C-3").map(|row| row[2].clone()).as_deref(),
            Some("east")
        );
    }

    #[test]
    fn snapshot_csv() {
        insta::assert_snapshot!(out().0);
    }

    #[test]
    fn parses_back_one_row_per_unit() {
        let (text, report) = out();
        let mut r = ::csv::Reader::from_reader(text.as_bytes());
        let head: Vec<String> = r.headers().unwrap().iter().map(String::from).collect();
        assert_eq!(head, COLUMNS);
        let rows: Vec<::csv::StringRecord> = r.records().map(|x| x.unwrap()).collect();
        assert_eq!(rows.len(), report.units.len());
        for (row, u) in rows.iter().zip(&report.units) {
            assert_eq!(&row[0], u.rank.to_string());
            assert_eq!(&row[1], u.unit_id);
            assert_eq!(&row[6], u.action.as_str());
            let soc: Option<f64> = row[7].parse().ok();
            assert_eq!(soc, u.soc_percent);
            assert_eq!(
                row[10].split(';').filter(|s| !s.is_empty()).count(),
                u.flags.len()
            );
        }
        // The fixture's site name has '<' and '&'-free text but a space; the
        // quoting round trip must keep it intact.
        assert!(rows.iter().any(|r| &r[2] == "North <Depot>"));
    }

    #[test]
    fn awkward_text_round_trips() {
        let (mut report, store) = fixture::report();
        report.units[0].unit_id = "a,\"b\"\nc".into();
        let text = Csv.render(&report, &fixture::ctx(&store));
        let mut r = ::csv::Reader::from_reader(text.as_bytes());
        let first = r.records().next().unwrap().unwrap();
        assert_eq!(&first[1], "a,\"b\"\nc");
    }
}
