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
//!   - `duplicate_readings`: readings taken at the same time as another
//!     reading of the same unit (each repeat after the first counts one),
//!     counted among each unit's 12 latest readings
//!     (the history kept per unit; repeats older than that are not counted,
//!     so the number is a floor).
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

mod unit;

use super::{FleetFormat, ReportContext};
use crate::fleet::analysis::{FleetReport, UnitReport};
use serde::Serialize;
use std::io::Write;
use std::sync::mpsc::sync_channel;

/// The JSON format.
#[derive(Clone, Copy, Debug, Default)]
pub struct Json;

impl FleetFormat for Json {
    fn write_to(
        &self,
        report: &FleetReport,
        ctx: &ReportContext,
        out: &mut dyn std::io::Write,
    ) -> std::io::Result<()> {
        // A buffer of its own type: the serializer's many small writes then
        // stay in inlined code instead of each going through `dyn Write`.
        let mut w = std::io::BufWriter::with_capacity(1 << 16, out);
        write_pretty(report, &mut w, ctx.threads)?;
        w.write_all(b"\n")?;
        w.flush()
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

/// Blocks below which an array is serialized on the calling thread.
const PARALLEL_BLOCKS: usize = 4;

/// Text per block that one thread serializes at a time (256 units).
const BLOCK_BYTES: usize = 256 * 1536;

/// `serde_json::to_writer_pretty` of the report, byte for byte (tested), with
/// its two long arrays (units, float strings) serialized on up to `threads`
/// threads: on 50,000 units the document is 70 MB, and serializing it was a
/// tenth of a fleet run, after everything else had finished. The fields are
/// written in the order `FleetReport` declares them (the report is taken
/// apart without `..`, so a new field stops the build here until it is
/// written); the test compares the result with serde's on reports that have
/// every part.
pub fn write_pretty(
    report: &FleetReport,
    w: &mut impl Write,
    threads: usize,
) -> std::io::Result<()> {
    let FleetReport {
        schema,
        summary,
        units,
        float_strings,
        rejected,
        notices,
    } = report;
    w.write_all(b"{\n  \"schema\": ")?;
    write_nested(w, schema, 1)?;
    w.write_all(b",\n  \"summary\": ")?;
    write_nested(w, summary, 1)?;
    w.write_all(b",\n  \"units\": ")?;
    write_array(w, units, threads)?;
    w.write_all(b",\n  \"float_strings\": ")?;
    write_array(w, float_strings, threads)?;
    w.write_all(b",\n  \"rejected\": ")?;
    write_nested(w, rejected, 1)?;
    w.write_all(b",\n  \"notices\": ")?;
    write_nested(w, notices, 1)?;
    w.write_all(b"\n}")
}

/// A value's pretty JSON as it appears `depth` levels deep, written by
/// [`NestedPretty`] straight into `w`.
fn write_nested(w: &mut impl Write, value: &impl Serialize, depth: usize) -> std::io::Result<()> {
    let mut ser = serde_json::Serializer::with_formatter(
        w,
        NestedPretty {
            depth,
            has_value: false,
        },
    );
    value.serialize(&mut ser).map_err(std::io::Error::from)
}

/// serde_json's `PrettyFormatter` (two spaces a level), starting `depth`
/// levels in: its methods are serde_json's own, with the indent level
/// counted from `depth` (serde's formatter always starts at the left margin).
struct NestedPretty {
    depth: usize,
    has_value: bool,
}

impl NestedPretty {
    fn indent<W: ?Sized + Write>(&self, w: &mut W) -> std::io::Result<()> {
        for _ in 0..self.depth {
            w.write_all(b"  ")?;
        }
        Ok(())
    }

    /// `[` or `{`: one level in, nothing inside yet.
    fn open<W: ?Sized + Write>(&mut self, w: &mut W, bracket: &[u8]) -> std::io::Result<()> {
        self.depth += 1;
        self.has_value = false;
        w.write_all(bracket)
    }

    /// `]` or `}`, on a line of its own when something was inside.
    fn close<W: ?Sized + Write>(&mut self, w: &mut W, bracket: &[u8]) -> std::io::Result<()> {
        self.depth -= 1;
        if self.has_value {
            w.write_all(b"\n")?;
            self.indent(w)?;
        }
        w.write_all(bracket)
    }

    /// The start of an array item or an object key: a new line at the depth.
    fn next<W: ?Sized + Write>(&mut self, w: &mut W, first: bool) -> std::io::Result<()> {
        w.write_all(if first { b"\n" } else { b",\n" })?;
        self.indent(w)
    }
}

impl serde_json::ser::Formatter for NestedPretty {
    fn begin_array<W: ?Sized + Write>(&mut self, w: &mut W) -> std::io::Result<()> {
        self.open(w, b"[")
    }

    fn end_array<W: ?Sized + Write>(&mut self, w: &mut W) -> std::io::Result<()> {
        self.close(w, b"]")
    }

    fn begin_array_value<W: ?Sized + Write>(
        &mut self,
        w: &mut W,
        first: bool,
    ) -> std::io::Result<()> {
        self.next(w, first)
    }

    fn end_array_value<W: ?Sized + Write>(&mut self, _w: &mut W) -> std::io::Result<()> {
        self.has_value = true;
        Ok(())
    }

    fn begin_object<W: ?Sized + Write>(&mut self, w: &mut W) -> std::io::Result<()> {
        self.open(w, b"{")
    }

    fn end_object<W: ?Sized + Write>(&mut self, w: &mut W) -> std::io::Result<()> {
        self.close(w, b"}")
    }

    fn begin_object_key<W: ?Sized + Write>(
        &mut self,
        w: &mut W,
        first: bool,
    ) -> std::io::Result<()> {
        self.next(w, first)
    }

    fn begin_object_value<W: ?Sized + Write>(&mut self, w: &mut W) -> std::io::Result<()> {
        w.write_all(b": ")
    }

    fn end_object_value<W: ?Sized + Write>(&mut self, _w: &mut W) -> std::io::Result<()> {
        self.has_value = true;
        Ok(())
    }
}

/// An item of one of the report's two long arrays, written as serde writes
/// it one level inside the array.
trait ArrayItem: Sync {
    /// About how many bytes an item takes, to size the blocks.
    const ITEM_BYTES: usize;
    /// Items per block.
    const BLOCK_ITEMS: usize = if BLOCK_BYTES / Self::ITEM_BYTES > 1 {
        BLOCK_BYTES / Self::ITEM_BYTES
    } else {
        1
    };
    fn write_item(&self, out: &mut Vec<u8>) -> std::io::Result<()>;
}

impl ArrayItem for Box<UnitReport> {
    const ITEM_BYTES: usize = 1536;

    /// By hand (see [`unit`]): the units are nearly the whole document.
    fn write_item(&self, out: &mut Vec<u8>) -> std::io::Result<()> {
        unit::write_unit(out, self)
    }
}

impl ArrayItem for crate::float::StringFloatAnalysis {
    /// A line per unit of the string: in blocks of 256, as units are, the
    /// 826 strings of the bench's fleet (6 MB) were one thread's work.
    const ITEM_BYTES: usize = 8192;
    fn write_item(&self, out: &mut Vec<u8>) -> std::io::Result<()> {
        write_nested(out, self, 2)
    }
}

/// One block of array items, as serde writes them one level inside the
/// report's array: each on its own lines, separated by commas.
fn block_bytes<T: ArrayItem>(items: &[T], first: bool) -> std::io::Result<Vec<u8>> {
    let mut out = Vec::with_capacity(items.len() * T::ITEM_BYTES);
    for (i, item) in items.iter().enumerate() {
        out.extend_from_slice(if first && i == 0 {
            b"\n    "
        } else {
            b",\n    "
        });
        item.write_item(&mut out)?;
    }
    Ok(out)
}

/// An array of the report's top level. Blocks of [`ArrayItem::BLOCK_ITEMS`] are dealt
/// to the threads in turn; each thread sends its blocks, in its own order,
/// down a channel of its own that holds two, and they are written in block
/// order, so that at most a few blocks wait in memory.
fn write_array<T: ArrayItem>(
    w: &mut impl Write,
    items: &[T],
    threads: usize,
) -> std::io::Result<()> {
    if items.is_empty() {
        return w.write_all(b"[]");
    }
    w.write_all(b"[")?;
    let blocks: Vec<&[T]> = items.chunks(T::BLOCK_ITEMS).collect();
    let threads = if blocks.len() < PARALLEL_BLOCKS {
        1
    } else {
        threads.clamp(1, blocks.len())
    };
    if threads == 1 {
        for (b, block) in blocks.iter().enumerate() {
            w.write_all(&block_bytes(block, b == 0)?)?;
        }
    } else {
        std::thread::scope(|scope| -> std::io::Result<()> {
            let mut receivers = Vec::with_capacity(threads);
            for t in 0..threads {
                let (tx, rx) = sync_channel::<std::io::Result<Vec<u8>>>(2);
                receivers.push(rx);
                let blocks = &blocks;
                scope.spawn(move || {
                    for b in (t..blocks.len()).step_by(threads) {
                        // A closed channel means the writer gave up: stop.
                        if tx.send(block_bytes(blocks[b], b == 0)).is_err() {
                            return;
                        }
                    }
                });
            }
            for b in 0..blocks.len() {
                match receivers[b % threads].recv() {
                    Ok(bytes) => w.write_all(&bytes?)?,
                    Err(_) => {
                        return Err(std::io::Error::other("a JSON serializing thread stopped"))
                    }
                }
            }
            Ok(())
        })?;
    }
    w.write_all(b"\n  ]")
}

#[cfg(test)]
mod parallel_tests {
    use super::{write_pretty, ArrayItem, UnitReport};
    use crate::fleet::generate::{generate, GenerateOptions};
    use crate::float::StringFloatAnalysis;

    fn report_of(text: &[u8]) -> crate::fleet::analysis::FleetReport {
        crate::report::fixture::report_of("in.csv", text).0
    }

    #[test]
    fn the_parallel_writer_writes_what_serde_writes() {
        let mut generated = Vec::new();
        generate(
            &GenerateOptions {
                units: 9000,
                days: 60,
                seed: 3,
                readings_per_unit: Some(2),
            },
            &mut generated,
        )
        .unwrap();
        // A bad row, so that `rejected` is not empty.
        generated.extend_from_slice(b"XX-1,not a time,agm,,,,,12.7,,,,,,,,,\n");
        let empty = b"unit_id,taken_at,profile,volts\n".to_vec();
        for (what, text) in [
            ("generated", generated),
            ("demo", include_bytes!("../../demo-data/fleet.csv").to_vec()),
            ("empty", empty),
        ] {
            let report = report_of(&text);
            let want = serde_json::to_vec_pretty(&report).unwrap();
            if what == "generated" {
                let blocks = |items: usize, per: usize| items.div_ceil(per);
                assert!(
                    blocks(report.units.len(), Box::<UnitReport>::BLOCK_ITEMS)
                        >= super::PARALLEL_BLOCKS
                        && blocks(report.float_strings.len(), StringFloatAnalysis::BLOCK_ITEMS)
                            >= super::PARALLEL_BLOCKS,
                    "{what}: too few units or float strings to share out"
                );
                assert!(
                    !report.float_strings.is_empty() && !report.rejected.is_empty(),
                    "{what}"
                );
            }
            for threads in [1, 2, 3] {
                let mut got = Vec::new();
                write_pretty(&report, &mut got, threads).unwrap();
                assert!(
                    got == want,
                    "{what} on {threads} threads: {}",
                    first_difference(&got, &want)
                );
            }
        }
    }

    fn first_difference(a: &[u8], b: &[u8]) -> String {
        let at = a
            .iter()
            .zip(b)
            .position(|(x, y)| x != y)
            .unwrap_or(a.len().min(b.len()));
        format!(
            "at byte {at}: got {:?}, want {:?}",
            String::from_utf8_lossy(&a[at.saturating_sub(40)..(at + 40).min(a.len())]),
            String::from_utf8_lossy(&b[at.saturating_sub(40)..(at + 40).min(b.len())])
        )
    }
}
