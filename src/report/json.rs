//! The report as JSON: `serde_json` pretty output of
//! [`crate::fleet::analysis::FleetReport`] itself.
//!
//! This layout is a public promise, schema id `restvolt.fleet/1`. A later
//! version may add fields; removing or changing the meaning of one changes the
//! schema id. Fields:
//!
//! - `schema`: `"restvolt.fleet/1"`.
//! - `summary`: counts over the whole run.
//!   - `rows_read`, `rows_accepted`, `rows_rejected`: records read, kept and
//!     rejected (`rows_read = rows_accepted + rows_rejected`).
//!   - `units`: number of units.
//!   - `by_action`: action word → number of units.
//!   - `by_site`: site (or `"(no site)"`) → action word → number of units.
//!   - `duplicate_readings`: readings repeated exactly (counted once).
//!   - `short_rest_readings`: readings taken with less than the profile's rest.
//!   - `period`: `[first, last]` reading time as `YYYY-MM-DD HH:MM`, or null.
//!   - `profiles`: profile ids used, sorted.
//! - `units`: one object per unit, most urgent first.
//!   - `rank` (1 = most urgent), `unit_id`, `site`, `string`, `position`
//!     (null when not given), `profile`.
//!   - `action`: one of `replace`, `recharge-now`, `remeasure`, `equalize`,
//!     `capacity-test`, `recharge`, `serviceable` (that order is precedence).
//!   - `soc_percent`: state of charge at the latest reading, %; null for a
//!     float-only or unusable reading, and for a `suspect-shorted-cell` unit
//!     (the flag's detail gives the charge of the remaining cells).
//!     `soc_interval_percent`: its 95 % interval `[low, high]`, %.
//!   - `ocv_per_cell_25c_volts`: latest rested voltage per cell referred to
//!     25 °C, V; null when the reading was not rested or not trusted.
//!   - `flags`: flag codes, sorted (e.g. `short-rest`, `freeze-risk`,
//!     `peer-outlier`, `sulfation-risk`; for a unit read on float `on-float`
//!     and its float check's codes).
//!   - `reasons`: `{rule, action, detail, source}` each, most urgent first:
//!     the rule id, the action it calls for, the evidence in words, and where
//!     the rule comes from. A unit read on float has its float check's
//!     reasons, and its string's that concern it (detail `string NAME: …`).
//!   - `readings`: readings of the unit; `latest_at`: time of the latest.
//!   - `trend_percent_per_30_days`: slope of rested state of charge, % per 30
//!     days; `trend_readings`: rested readings behind it.
//!   - `days_below_recharge`: days in the current stretch below the profile's
//!     recharge threshold.
//!   - `peer_deviation_mv`: rested per-cell voltage minus the peer median, mV;
//!     `peer_z`: robust (modified) z-score among peers.
//!   - `ohmic_rise_percent`: ohmic value over its baseline, %.
//!   - `coldest_celsius`: coldest temperature seen or expected, °C;
//!     `freezing_point_celsius`: electrolyte freezing point at the latest
//!     state of charge, °C.
//!   - `heat_ageing_factor`: mean heat-ageing factor (1 = as at 25 °C).
//!   - `sg_mean_25c`: mean SG 25/25 of the latest hydrometer reading.
//! - `float_strings`: per string on float: `string`, `units`,
//!   `average_volts_per_cell`, `spread_volts_per_cell`, `temperature_spread_c`,
//!   `per_unit` checks, `flags` (`{code, detail, rule, source}`, and `units`
//!   when a string-level flag names units), `action`, `reasons`,
//!   `fully_charged_on_float`, `rest_test_units`, `state_of_charge_note`
//!   (never a state of charge).
//! - `rejected`: `{file, line, reason}` per rejected record (at most the
//!   first 1000; `summary.rows_rejected` is always the full count).
//! - `notices`: messages from reading the input.
//!
//! Unknown numbers are `null`, never `NaN`.

use super::{FleetFormat, ReportContext};
use crate::fleet::analysis::FleetReport;

/// The JSON format.
#[derive(Clone, Copy, Debug, Default)]
pub struct Json;

impl FleetFormat for Json {
    fn write_to(
        &self,
        report: &FleetReport,
        _ctx: &ReportContext,
        out: &mut dyn std::io::Write,
    ) -> std::io::Result<()> {
        // A buffer of its own type: the serializer's many small writes then
        // stay in inlined code instead of each going through `dyn Write`.
        let mut w = std::io::BufWriter::with_capacity(1 << 16, out);
        // serde_json gives back the writer's own error (a broken pipe stays one).
        serde_json::to_writer_pretty(&mut w, report).map_err(std::io::Error::from)?;
        std::io::Write::write_all(&mut w, b"\n")?;
        std::io::Write::flush(&mut w)
    }

    fn render(&self, report: &FleetReport, _ctx: &ReportContext) -> String {
        match serde_json::to_string_pretty(report) {
            Ok(mut s) => {
                s.push('\n');
                s
            }
            // Serializing plain structs, maps with string keys and floats
            // (NaN becomes null) does not fail; say so in JSON if it ever does.
            Err(e) => format!(
                "{{\"schema\": {:?}, \"error\": {:?}}}\n",
                report.schema,
                e.to_string()
            ),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::report::fixture;

    #[test]
    fn snapshot_json() {
        let (report, store) = fixture::report();
        insta::assert_snapshot!(Json.render(&report, &fixture::ctx(&store)));
    }

    #[test]
    fn parses_with_the_promised_fields() {
        let (report, store) = fixture::report();
        let text = Json.render(&report, &fixture::ctx(&store));
        let v: serde_json::Value = serde_json::from_str(&text).unwrap();
        assert_eq!(v["schema"], "restvolt.fleet/1");
        for k in ["summary", "units", "float_strings", "rejected", "notices"] {
            assert!(v.get(k).is_some(), "{k}");
        }
        assert_eq!(v["units"].as_array().unwrap().len(), report.units.len());
        assert_eq!(v["summary"]["rows_rejected"], 2);
        // Every field documented above for a unit is present in the output.
        let unit = v["units"][0].as_object().unwrap();
        for k in [
            "rank",
            "unit_id",
            "site",
            "string",
            "position",
            "profile",
            "action",
            "soc_percent",
            "soc_interval_percent",
            "ocv_per_cell_25c_volts",
            "flags",
            "reasons",
            "readings",
            "latest_at",
            "trend_percent_per_30_days",
            "trend_readings",
            "days_below_recharge",
            "peer_deviation_mv",
            "peer_z",
            "ohmic_rise_percent",
            "coldest_celsius",
            "freezing_point_celsius",
            "heat_ageing_factor",
            "sg_mean_25c",
        ] {
            assert!(unit.contains_key(k), "unit field {k}");
        }
        assert_eq!(unit.len(), 24, "a unit field is undocumented: {unit:?}");
        let r = v["rejected"][0].as_object().unwrap();
        assert!(r.contains_key("file") && r.contains_key("line") && r.contains_key("reason"));
    }
}
