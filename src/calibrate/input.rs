//! Reading calibration points from CSV.
//!
//! Columns (header names case-insensitive, in any order; other columns are
//! ignored so that a unit id or a date may stay in the sheet):
//! - `soc_percent`: the known state of charge, 0–100 (required);
//! - `volts`: rested voltage across the unit, **or** `sg`: the hydrometer
//!   reading at the acid temperature, one mean value or one value per cell
//!   separated by `;` (as many as the unit has cells; averaged);
//! - `temp_c` or `temp_f`: the temperature of the unit / the acid (the column
//!   names the unit, so the values are bare numbers);
//! - `cells`: cells in series (optional; default the base profile's).
//!
//! The delimiter is `;` or a tab when the header line holds one, else `,`.
//! A decimal comma is accepted (`12,41`; quote it in a comma-separated file,
//! and quote a per-cell SG list in a semicolon-separated one). Every line must
//! have as many fields as the header. Lines starting with `#` are comments.
//! The text must be UTF-8 (a byte-order mark is allowed); UTF-16 and Latin-1
//! are refused with the line of the first bad byte rather than guessed.

use super::CalibrateError;
use crate::electrolyte::{
    self, correct_to_25c, HydrometerRule, TEMPERATURE_MAX_C, TEMPERATURE_MIN_C,
};
use crate::profile::Profile;
use crate::units::{parse_decimal, Celsius, Shown, SocPercent, SpecificGravity, Volts};
use std::io::Read;

/// One known pair: a state of charge and the OCV per cell it gave, referred to 25 °C.
#[derive(Clone, Copy, Debug, PartialEq, serde::Serialize)]
pub struct CalibrationPoint {
    /// 1-based line of the input the point came from.
    pub line: u64,
    /// The known state of charge.
    pub soc: SocPercent,
    /// Open-circuit voltage per cell at 25 °C.
    pub volts_per_cell_25c: Volts,
}

/// Plausible rested OCV per cell at 25 °C for any lead-acid cell; outside it
/// the `cells` count or the reading is wrong (common practice: rested cells sit
/// between about 1.9 and 2.2 V, with margin either side).
const PLAUSIBLE_VOLTS_PER_CELL: (f64, f64) = (1.7, 2.4);

struct Columns {
    soc: usize,
    volts: Option<usize>,
    sg: Option<usize>,
    temp_c: Option<usize>,
    temp_f: Option<usize>,
    cells: Option<usize>,
}

/// Read calibration points from CSV text (see the module documentation for
/// the columns). `name` is used in messages as `name:line`. Every point is
/// corrected to 25 °C with the base profile's OCV coefficient (volts) or
/// through the electrolyte (SG); see [`crate::calibrate`].
pub fn read_points<R: Read>(
    name: &str,
    mut reader: R,
    base: &Profile,
) -> Result<Vec<CalibrationPoint>, CalibrateError> {
    let mut bytes = Vec::new();
    reader
        .read_to_end(&mut bytes)
        .map_err(|e| CalibrateError::Io {
            file: name.to_string(),
            message: e.to_string(),
        })?;
    let text = crate::units::utf8_text(&bytes).map_err(|e| CalibrateError::Csv {
        file: name.to_string(),
        line: e.line,
        message: format!("{e}; re-save the file as UTF-8 (in a spreadsheet: CSV UTF-8)"),
    })?;
    let Some((header_no, header_line)) = text
        .lines()
        .enumerate()
        .find(|(_, l)| !l.trim().is_empty() && !l.trim_start().starts_with('#'))
    else {
        return Err(CalibrateError::Header {
            file: name.to_string(),
            line: 1,
            message: "the file is empty: expected a header such as soc_percent,volts,temp_c and one line per point".into(),
        });
    };
    let header_no = header_no as u64 + 1;
    let delimiter = crate::units::detect_delimiter(header_line.as_bytes());
    let mut csv = csv::ReaderBuilder::new()
        .delimiter(delimiter)
        .comment(Some(b'#'))
        .trim(csv::Trim::All)
        .flexible(true)
        .from_reader(text.as_bytes());
    let headers = csv
        .headers()
        .map_err(|e| csv_error(name, &e))?
        .iter()
        .map(|h| h.trim().to_ascii_lowercase())
        .collect::<Vec<_>>();
    let cols = find_columns(name, header_no, &headers)?;
    let mut points = Vec::new();
    let mut lines = LineCounter::default();
    for record in csv.records() {
        let record = record.map_err(|e| csv_error(name, &e))?;
        let start = record
            .position()
            .map_or(0, |p| usize::try_from(p.byte()).unwrap_or(usize::MAX));
        let line = lines.record_line(text, start);
        if record.iter().all(|f| f.is_empty()) {
            continue;
        }
        if record.len() != headers.len() {
            let quoting = if delimiter == b';' {
                " (in a semicolon-separated file, quote a per-cell SG list: \"1,265;1,270\")"
            } else if delimiter == b',' {
                " (in a comma-separated file, quote a decimal comma: \"12,41\")"
            } else {
                ""
            };
            return Err(CalibrateError::Csv {
                file: name.to_string(),
                line,
                message: format!(
                    "{} fields, but the header has {}: expected one value per column{quoting}",
                    record.len(),
                    headers.len()
                ),
            });
        }
        let field = |i: Option<usize>| i.and_then(|i| record.get(i)).filter(|s| !s.is_empty());
        points.push(read_row(name, line, &cols, field, base)?);
    }
    if points.is_empty() {
        return Err(CalibrateError::NoData {
            file: name.to_string(),
        });
    }
    Ok(points)
}

/// Lines of records, counted from their bytes. The CSV reader's own line is
/// where it started looking for a record: before the `\n` of a CRLF, blank
/// lines and comment lines, so a CRLF file had every line one short.
#[derive(Default)]
struct LineCounter {
    /// Bytes counted so far.
    at: usize,
    /// `\n` bytes before `at`.
    newlines: u64,
}

impl LineCounter {
    /// The 1-based line of the record the reader started looking for at byte `from`.
    fn record_line(&mut self, text: &str, from: usize) -> u64 {
        let b = text.as_bytes();
        let mut i = from.min(b.len());
        loop {
            while i < b.len() && matches!(b[i], b'\r' | b'\n') {
                i += 1;
            }
            if b.get(i) != Some(&b'#') {
                break;
            }
            while i < b.len() && b[i] != b'\n' {
                i += 1;
            }
        }
        if i >= self.at {
            self.newlines += b[self.at..i].iter().filter(|&&c| c == b'\n').count() as u64;
            self.at = i;
        }
        self.newlines + 1
    }
}

fn csv_error(name: &str, e: &csv::Error) -> CalibrateError {
    CalibrateError::Csv {
        file: name.to_string(),
        line: e.position().map(|p| p.line()).unwrap_or(1),
        message: e.to_string(),
    }
}

fn find_columns(name: &str, line: u64, headers: &[String]) -> Result<Columns, CalibrateError> {
    let find = |want: &str| -> Result<Option<usize>, CalibrateError> {
        let mut hits = headers
            .iter()
            .enumerate()
            .filter(|(_, h)| h.as_str() == want);
        let first = hits.next().map(|(i, _)| i);
        if hits.next().is_some() {
            return Err(CalibrateError::Header {
                file: name.to_string(),
                line,
                message: format!("column `{want}` appears more than once"),
            });
        }
        Ok(first)
    };
    let cols = Columns {
        soc: find("soc_percent")?.ok_or_else(|| CalibrateError::Header {
            file: name.to_string(),
            line,
            message: format!(
                "no `soc_percent` column (found: {}); expected soc_percent, volts or sg, temp_c or temp_f, and optionally cells",
                headers.join(", ")
            ),
        })?,
        volts: find("volts")?,
        sg: find("sg")?,
        temp_c: find("temp_c")?,
        temp_f: find("temp_f")?,
        cells: find("cells")?,
    };
    if cols.volts.is_none() && cols.sg.is_none() {
        return Err(CalibrateError::Header {
            file: name.to_string(),
            line,
            message: "no `volts` or `sg` column: each point needs a rested voltage or a hydrometer reading".into(),
        });
    }
    if cols.temp_c.is_none() && cols.temp_f.is_none() {
        return Err(CalibrateError::Header {
            file: name.to_string(),
            line,
            message: "no `temp_c` or `temp_f` column: a reading cannot be referred to 25 °C without its temperature".into(),
        });
    }
    Ok(cols)
}

/// The `cells` field, or the base profile's count when it is empty.
fn cells_or_base<'a>(
    field: &impl Fn(Option<usize>) -> Option<&'a str>,
    cols: &Columns,
    base: &Profile,
    err: &impl Fn(&str, String) -> CalibrateError,
) -> Result<u32, CalibrateError> {
    match field(cols.cells) {
        None => Ok(base.cells()),
        Some(raw) => {
            let c = parse_decimal(raw, "a whole number of cells")
                .map_err(|e| err("cells", e.to_string()))?;
            if c.fract() != 0.0 || !(1.0..=400.0).contains(&c) {
                return Err(err(
                    "cells",
                    format!("{}: expected a whole number 1–400", Shown(c)),
                ));
            }
            Ok(c as u32)
        }
    }
}

/// The mean of an `sg` field: one value, or one per cell separated by `;`.
fn mean_sg(
    raw: &str,
    cells: u32,
    err: &impl Fn(&str, String) -> CalibrateError,
) -> Result<f64, CalibrateError> {
    let parts: Vec<&str> = raw.split(';').map(str::trim).collect();
    let mut values = Vec::with_capacity(parts.len());
    for (k, part) in parts.iter().enumerate() {
        let v = parse_decimal(part, "a specific gravity like 1.265").map_err(|e| {
            let which = if parts.len() > 1 {
                format!("value {}: ", k + 1)
            } else {
                String::new()
            };
            err("sg", format!("{which}{e}"))
        })?;
        if (1000.0..=1400.0).contains(&v) {
            return Err(err(
                "sg",
                format!(
                    "{}: write specific gravity as a ratio ({:.3}), not in points",
                    Shown(v),
                    v / 1000.0
                ),
            ));
        }
        values.push(v);
    }
    if values.len() > 1 && values.len() != cells as usize {
        return Err(err(
            "sg",
            format!(
                "{} values for {cells} cells: give one per cell, or one mean value",
                values.len()
            ),
        ));
    }
    Ok(values.iter().sum::<f64>() / values.len() as f64)
}

fn read_row<'a>(
    name: &str,
    line: u64,
    cols: &Columns,
    field: impl Fn(Option<usize>) -> Option<&'a str>,
    base: &Profile,
) -> Result<CalibrationPoint, CalibrateError> {
    let err = |column: &str, message: String| CalibrateError::Field {
        file: name.to_string(),
        line,
        column: column.to_string(),
        message,
    };
    let number = |column: &str, raw: &str, expected: &str| {
        parse_decimal(raw, expected).map_err(|e| err(column, e.to_string()))
    };

    let soc_raw = field(Some(cols.soc)).ok_or_else(|| {
        err(
            "soc_percent",
            "is empty: the known state of charge is the point of the line".into(),
        )
    })?;
    let soc = number("soc_percent", soc_raw, "a state of charge in percent")?;
    if !(0.0..=100.0).contains(&soc) {
        return Err(err(
            "soc_percent",
            format!("{} % is outside 0–100 %", Shown(soc)),
        ));
    }

    let t = match (field(cols.temp_c), field(cols.temp_f)) {
        (Some(_), Some(_)) => {
            return Err(err(
                "temp_c",
                "both temp_c and temp_f are given: give one".into(),
            ))
        }
        (Some(raw), None) => Celsius(number("temp_c", raw, "a temperature in °C")?),
        (None, Some(raw)) => {
            Celsius::from_fahrenheit(number("temp_f", raw, "a temperature in °F")?)
        }
        (None, None) => {
            let column = if cols.temp_c.is_some() {
                "temp_c"
            } else {
                "temp_f"
            };
            return Err(err(
                column,
                "is empty: the temperature is needed to refer the reading to 25 °C".into(),
            ));
        }
    };
    if !(TEMPERATURE_MIN_C..=TEMPERATURE_MAX_C).contains(&t.0) {
        let in_celsius = field(cols.temp_c).is_some();
        let column = if in_celsius { "temp_c" } else { "temp_f" };
        let as_f = Celsius::from_fahrenheit(t.0).0;
        // Not guessed: a °F value in the °C column is named, and refused.
        let hint = if in_celsius && (TEMPERATURE_MIN_C..=TEMPERATURE_MAX_C).contains(&as_f) {
            format!(
                " ({} °C is implausible; as °F it would be {as_f:.1} °C: put °F values in a temp_f column)",
                Shown(t.0)
            )
        } else {
            String::new()
        };
        return Err(err(
            column,
            format!(
                "{:.1} °C is outside {TEMPERATURE_MIN_C}–{TEMPERATURE_MAX_C} °C{hint}",
                Shown(t.0)
            ),
        ));
    }

    let v25 = match (field(cols.volts), field(cols.sg)) {
        (Some(_), Some(_)) => {
            return Err(err(
                "volts",
                "both volts and sg are given: give one reading per line".into(),
            ))
        }
        (None, None) => {
            let column = if cols.volts.is_some() { "volts" } else { "sg" };
            return Err(err(
                column,
                "is empty: a rested voltage or a hydrometer reading is needed".into(),
            ));
        }
        (Some(raw), None) => {
            let volts = number("volts", raw, "a voltage in volts")?;
            let cells = cells_or_base(&field, cols, base, &err)?;
            let per_cell = volts / f64::from(cells);
            let coef = base.ocv_coefficient(SocPercent(soc));
            let v25 = per_cell - coef.0 / 1000.0 * (t.0 - 25.0);
            let (lo, hi) = PLAUSIBLE_VOLTS_PER_CELL;
            if !(lo..=hi).contains(&v25) {
                return Err(err(
                    "volts",
                    format!(
                        "{} V over {cells} cells is {:.3} V per cell at 25 °C, outside the {lo}–{hi} V a rested lead-acid cell reads; check the reading and the cells count",
                        Shown(volts),
                        Shown(v25)
                    ),
                ));
            }
            v25
        }
        (None, Some(raw)) => {
            if !base.hydrometer_usable() {
                return Err(err(
                    "sg",
                    format!(
                        "base profile '{}' is valve-regulated: its electrolyte cannot be sampled with a hydrometer",
                        base.id()
                    ),
                ));
            }
            let sg = mean_sg(raw, cells_or_base(&field, cols, base, &err)?, &err)?;
            let sg25 = correct_to_25c(SpecificGravity(sg), t, HydrometerRule::default())
                .map_err(|e| err("sg", e.to_string()))?
                .value;
            electrolyte::cell_ocv_25c_from_sg25(sg25)
                .map_err(|e| err("sg", format!("SG 25/25 {:.4}: {e}", sg25.0)))?
                .0
        }
    };
    Ok(CalibrationPoint {
        line,
        soc: SocPercent(soc),
        volts_per_cell_25c: Volts(v25),
    })
}
