//! Reading a rest series: a CSV file, or readings typed as `30m=12.93`.
//!
//! A rest series file has a header row (names case-insensitive, surrounding
//! spaces ignored, unknown columns ignored) and one reading per row:
//!
//! - exactly one time column: `minutes` or `hours` of elapsed time since the
//!   end of the charge or discharge, or `taken_at` timestamps;
//! - `volts`, the reading (a decimal comma is accepted, `12,93`; a trailing
//!   `V` is allowed);
//! - optionally `temp_c` or `temp_f` (not both), the battery temperature; an
//!   empty cell means not measured.
//!
//! The delimiter is a comma, or a semicolon or tab when the header uses one
//! (spreadsheets that write decimal commas use semicolons). Lines starting
//! with `#` are comments.
//!
//! **Timestamps.** Elapsed time is always counted from the end of the charge
//! or discharge: the semi-log model depends on where t = 0 lies, so counting
//! from the first reading would silently bend the fit. Timestamps-only input
//! therefore needs `event_end`; without it the file is refused
//! ([`SettleError::NeedEventEnd`]) rather than guessed. Timestamps are RFC 3339
//! (`2024-03-05T14:30:00+01:00`) or local `YYYY-MM-DD HH:MM[:SS]` (a `T` may
//! replace the space). With RFC 3339 offsets, `event_end` is read as wall-clock
//! time in the offset of the first reading, and differences are taken in
//! absolute time, so a clock change during the rest does not shift readings.
//! One file may not mix the two forms. `event_end` is ignored when the file
//! has a `minutes` or `hours` column.
//!
//! **Future readings.** Given the time now, a timestamp more than
//! [`FUTURE_ALLOWANCE_HOURS`] after it is refused: a reading cannot have been
//! taken yet, so the year or the meter's clock is wrong, and the fit would
//! still run on it. The allowance covers a file written in a zone ahead of
//! this computer's (as the fleet reader allows a day).

use super::{RestPoint, SettleError};
use crate::electrolyte::{TEMPERATURE_MAX_C, TEMPERATURE_MIN_C};
use crate::units::{clip, parse_decimal, parse_duration, Celsius, Hours, Volts};
use chrono::{DateTime, FixedOffset, NaiveDateTime, TimeZone};
use std::io::Read;

/// Unit voltages above this are no lead-acid unit or string (as `check --volts`).
pub const MAX_VOLTS: f64 = 1000.0;
/// Elapsed times beyond this (10 years) are typing errors, not a rest.
pub const MAX_ELAPSED_HOURS: f64 = 10.0 * 365.25 * 24.0;
/// How far after now a timestamp may lie before it is refused as in the
/// future: a day, so that local times from a zone ahead of this computer's pass.
pub const FUTURE_ALLOWANCE_HOURS: i64 = 24;

/// What a temperature column should hold, for a value outside the range the
/// electrolyte model accepts; a °C value that reads as a plausible °F one says
/// so rather than being guessed.
fn implausible_temperature(x: f64, fahrenheit: bool) -> String {
    let range = format!("{TEMPERATURE_MIN_C} to {TEMPERATURE_MAX_C} °C");
    if fahrenheit {
        return format!(
            "a plausible temperature in °F ({:.0} to {:.0} °F, i.e. {range})",
            Celsius(TEMPERATURE_MIN_C).to_fahrenheit(),
            Celsius(TEMPERATURE_MAX_C).to_fahrenheit()
        );
    }
    let as_f = Celsius::from_fahrenheit(x).0;
    if (TEMPERATURE_MIN_C..=TEMPERATURE_MAX_C).contains(&as_f) {
        format!("a plausible temperature in °C ({range}): {x} °C is implausible, and as °F it would be {as_f:.1} °C; write °F values in a temp_f column")
    } else {
        format!("a plausible temperature in °C ({range})")
    }
}

/// A reading with the battery temperature, when the file gave one.
#[derive(Clone, Copy, Debug, PartialEq, serde::Serialize)]
pub struct RestReading {
    /// Elapsed time and voltage.
    pub point: RestPoint,
    /// Battery temperature at the reading, if measured.
    pub temperature: Option<Celsius>,
}

/// The bare points of a series, as [`super::analyse`] takes them.
pub fn points(readings: &[RestReading]) -> Vec<RestPoint> {
    readings.iter().map(|r| r.point).collect()
}

#[derive(Clone, Copy)]
enum TimeColumn {
    Minutes(usize),
    Hours(usize),
    TakenAt(usize),
}

#[derive(Clone, Copy)]
enum Stamp {
    Local(NaiveDateTime),
    Offset(DateTime<FixedOffset>),
}

fn parse_stamp(raw: &str) -> Option<Stamp> {
    let text = raw.trim();
    if let Ok(dt) = DateTime::parse_from_rfc3339(text) {
        return Some(Stamp::Offset(dt));
    }
    const FORMS: [&str; 4] = [
        "%Y-%m-%d %H:%M",
        "%Y-%m-%d %H:%M:%S",
        "%Y-%m-%dT%H:%M",
        "%Y-%m-%dT%H:%M:%S",
    ];
    FORMS
        .iter()
        .find_map(|f| NaiveDateTime::parse_from_str(text, f).ok())
        .map(Stamp::Local)
}

fn parse_volts(raw: &str) -> Option<f64> {
    let text = raw.trim();
    let text = text.strip_suffix(['V', 'v']).map_or(text, |s| s.trim_end());
    parse_decimal(text, "volts").ok()
}

/// Split one line into trimmed fields, honouring CSV quotes.
fn split_line(line: &str, delimiter: u8) -> Result<csv::StringRecord, csv::Error> {
    let mut rdr = csv::ReaderBuilder::new()
        .delimiter(delimiter)
        .has_headers(false)
        .flexible(true)
        .trim(csv::Trim::All)
        .from_reader(line.as_bytes());
    let mut record = csv::StringRecord::new();
    rdr.read_record(&mut record)?;
    Ok(record)
}

/// The delimiter of the first line that is neither blank nor a comment.
fn sniff_delimiter(text: &str) -> u8 {
    let header = text
        .lines()
        .map(str::trim)
        .find(|l| !l.is_empty() && !l.starts_with('#'))
        .unwrap_or("");
    crate::units::detect_delimiter(header.as_bytes())
}

/// Read a rest series CSV (see the module documentation for the columns).
///
/// `source_name` names the input in messages (`file:line: column …`);
/// `event_end` is when the charge or discharge ended, needed only for
/// `taken_at` timestamps. With `now`, a timestamp more than
/// [`FUTURE_ALLOWANCE_HOURS`] after it is refused; local timestamps are
/// compared with `now`'s wall-clock time, RFC 3339 ones in absolute time.
/// `None` skips that check (for stored series read later).
pub fn read_rest_csv<R: Read>(
    mut reader: R,
    source_name: &str,
    event_end: Option<NaiveDateTime>,
    now: Option<DateTime<FixedOffset>>,
) -> Result<Vec<RestReading>, SettleError> {
    let src = source_name.to_string();
    let mut bytes = Vec::new();
    reader
        .read_to_end(&mut bytes)
        .map_err(|e| SettleError::Io {
            source_name: src.clone(),
            message: e.to_string(),
        })?;
    let text = crate::units::utf8_text(&bytes).map_err(|e| SettleError::Line {
        source_name: src.clone(),
        line: e.line,
        message: format!("{e}; re-save the file as UTF-8 (in a spreadsheet: CSV UTF-8)"),
    })?;
    let delimiter = sniff_delimiter(text);
    // One reading per line. Lines are split one by one (rather than handing
    // the whole text to the CSV reader) so that blank and `#` comment lines
    // still count and every message names the line a spreadsheet shows.
    let mut lines = text
        .lines()
        .enumerate()
        .map(|(i, l)| (i as u64 + 1, l))
        .filter(|(_, l)| !l.trim().is_empty() && !l.trim_start().starts_with('#'))
        .map(|(line, l)| {
            split_line(l, delimiter)
                .map(|r| (line, r))
                .map_err(|e| SettleError::Line {
                    source_name: src.clone(),
                    line,
                    message: format!("not readable as CSV: {e}"),
                })
        });
    let (header_line, header) = match lines.next() {
        Some(h) => h?,
        None => {
            return Err(SettleError::Header {
                source_name: src,
                line: 1,
                message: "the file is empty: expected a header such as minutes,volts".into(),
            })
        }
    };
    let header_error = |message: String| SettleError::Header {
        source_name: src.clone(),
        line: header_line,
        message,
    };
    let names: Vec<String> = header
        .iter()
        .map(|h| h.trim().to_ascii_lowercase())
        .collect();
    let find = |name: &str| names.iter().position(|n| n == name);

    let time_columns: Vec<TimeColumn> = [
        find("minutes").map(TimeColumn::Minutes),
        find("hours").map(TimeColumn::Hours),
        find("taken_at").map(TimeColumn::TakenAt),
    ]
    .into_iter()
    .flatten()
    .collect();
    let time = match time_columns.as_slice() {
        [one] => *one,
        [] => {
            return Err(header_error(format!(
                "no time column in header '{}': expected one of minutes, hours or taken_at",
                names.join(",")
            )))
        }
        _ => {
            return Err(header_error(
                "more than one time column (minutes, hours, taken_at): keep exactly one so the elapsed time is not ambiguous"
                    .into(),
            ))
        }
    };
    let volts_col = find("volts").ok_or_else(|| {
        header_error(format!(
            "no volts column in header '{}': expected a column named volts",
            names.join(",")
        ))
    })?;
    let temp_col = match (find("temp_c"), find("temp_f")) {
        (Some(_), Some(_)) => {
            return Err(header_error(
                "both temp_c and temp_f: keep one temperature column".into(),
            ))
        }
        (Some(c), None) => Some((c, false)),
        (None, Some(f)) => Some((f, true)),
        (None, None) => None,
    };
    if matches!(time, TimeColumn::TakenAt(_)) && event_end.is_none() {
        return Err(SettleError::NeedEventEnd { source_name: src });
    }

    let mut out = Vec::new();
    let mut previous: Option<(u64, f64)> = None;
    let mut first_offset: Option<FixedOffset> = None;
    let mut saw_local = false;
    for item in lines {
        let (line, record) = item?;
        if record.iter().all(str::is_empty) {
            continue;
        }
        if record.len() != names.len() {
            return Err(SettleError::Line {
                source_name: src.clone(),
                line,
                message: format!(
                    "{} fields, but the header has {}: expected one value per column",
                    record.len(),
                    names.len()
                ),
            });
        }
        let field = |col: usize| record.get(col).unwrap_or("");
        let field_error = |col: usize, expected: &str| SettleError::Field {
            source_name: src.clone(),
            line,
            column: clip(header.get(col).unwrap_or("")),
            value: clip(field(col)),
            expected: expected.to_string(),
        };

        let elapsed_hours = match time {
            TimeColumn::Minutes(c) | TimeColumn::Hours(c) => {
                let per_hour = if matches!(time, TimeColumn::Minutes(_)) {
                    60.0
                } else {
                    1.0
                };
                let expected =
                    "a positive number of minutes or hours since the end of the charge or discharge";
                let x = parse_decimal(field(c), expected).map_err(|_| field_error(c, expected))?;
                if x <= 0.0 {
                    return Err(field_error(c, expected));
                }
                if x / per_hour > MAX_ELAPSED_HOURS {
                    return Err(field_error(c, "a rest time within 10 years"));
                }
                x / per_hour
            }
            TimeColumn::TakenAt(c) => {
                let expected_form =
                    "a timestamp, RFC 3339 (2024-03-05T14:30:00+01:00) or YYYY-MM-DD HH:MM";
                let stamp = parse_stamp(field(c)).ok_or_else(|| field_error(c, expected_form))?;
                if let Some(now) = now {
                    let latest = now + chrono::Duration::hours(FUTURE_ALLOWANCE_HOURS);
                    let future = match stamp {
                        Stamp::Local(t) => t > latest.naive_local(),
                        Stamp::Offset(t) => t > latest,
                    };
                    if future {
                        return Err(field_error(
                            c,
                            &format!(
                                "a past time: expected at most a day after now ({}), as a reading cannot be taken in the future; check the year and the meter's clock",
                                now.format("%Y-%m-%d %H:%M %:z")
                            ),
                        ));
                    }
                }
                let Some(end) = event_end else {
                    return Err(SettleError::NeedEventEnd { source_name: src });
                };
                let seconds = match stamp {
                    Stamp::Local(t) => {
                        if first_offset.is_some() {
                            return Err(field_error(
                                c,
                                "a timestamp with a UTC offset like the earlier readings",
                            ));
                        }
                        saw_local = true;
                        (t - end).num_seconds()
                    }
                    Stamp::Offset(t) => {
                        if saw_local {
                            return Err(field_error(
                                c,
                                "a local timestamp without offset like the earlier readings",
                            ));
                        }
                        let offset = *first_offset.get_or_insert(*t.offset());
                        let end_abs =
                            offset.from_local_datetime(&end).single().ok_or_else(|| {
                                field_error(c, "a timestamp in a zone where the end time exists")
                            })?;
                        (t - end_abs).num_seconds()
                    }
                };
                if seconds <= 0 {
                    return Err(field_error(
                        c,
                        &format!("a time after the end of the charge or discharge ({end})"),
                    ));
                }
                if seconds as f64 / 3600.0 > MAX_ELAPSED_HOURS {
                    return Err(field_error(
                        c,
                        &format!(
                            "a time within 10 years of the end of the charge or discharge ({end})"
                        ),
                    ));
                }
                seconds as f64 / 3600.0
            }
        };
        let time_col = match time {
            TimeColumn::Minutes(c) | TimeColumn::Hours(c) | TimeColumn::TakenAt(c) => c,
        };
        // Checked here rather than left to the fit so that the message names the line.
        if let Some((prev_line, prev_hours)) = previous {
            if elapsed_hours <= prev_hours {
                return Err(field_error(
                    time_col,
                    &format!(
                        "later than line {prev_line} ({} after the end): give the readings in time order, each at a distinct time",
                        super::elapsed_text(prev_hours)
                    ),
                ));
            }
        }
        previous = Some((line, elapsed_hours));

        let volts_expected = "a positive rest voltage in volts, like 12.65 or 12,65 (a negative reading means the leads are reversed)";
        let volts = parse_volts(field(volts_col))
            .filter(|v| *v > 0.0)
            .ok_or_else(|| field_error(volts_col, volts_expected))?;
        if volts > MAX_VOLTS {
            return Err(field_error(
                volts_col,
                "a battery rest voltage (at most 1000 V, like 12.65)",
            ));
        }

        let temperature = match temp_col {
            Some((c, _)) if field(c).is_empty() => None,
            Some((c, fahrenheit)) => {
                let expected = if fahrenheit {
                    "a temperature in °F, or empty"
                } else {
                    "a temperature in °C, or empty"
                };
                let x = parse_decimal(field(c), expected).map_err(|_| field_error(c, expected))?;
                let t = if fahrenheit {
                    Celsius::from_fahrenheit(x)
                } else {
                    Celsius(x)
                };
                if !(TEMPERATURE_MIN_C..=TEMPERATURE_MAX_C).contains(&t.0) {
                    return Err(field_error(c, &implausible_temperature(x, fahrenheit)));
                }
                Some(t)
            }
            None => None,
        };
        out.push(RestReading {
            point: RestPoint {
                elapsed: Hours(elapsed_hours),
                volts: Volts(volts),
            },
            temperature,
        });
    }
    if out.is_empty() {
        return Err(header_error(
            "no readings below the header: expected one row per reading".into(),
        ));
    }
    Ok(out)
}

/// Read a hand-typed reading `ELAPSED=VOLTS`, like `30m=12.93`, `1h30m=12,88`
/// or `2h=12.81V`. The elapsed time uses [`parse_duration`] and must be
/// positive; the voltage accepts a decimal comma.
pub fn parse_reading_arg(s: &str) -> Result<RestPoint, SettleError> {
    let err = |message: &str| SettleError::ReadingArg {
        arg: s.trim().to_string(),
        message: message.to_string(),
    };
    let (time, volts) = s
        .split_once('=')
        .ok_or_else(|| err("no '=' between time and voltage"))?;
    let elapsed = match parse_duration(time) {
        Ok(Some(h)) if h.0 > 0.0 => h,
        Ok(Some(_)) => {
            return Err(err(
                "the elapsed time must be after the end of the charge or discharge",
            ))
        }
        Ok(None) => return Err(err("the elapsed time must be known for a settling fit")),
        Err(e) => return Err(err(&e.to_string())),
    };
    let v =
        parse_volts(volts).ok_or_else(|| err(&format!("'{}' is not a voltage", volts.trim())))?;
    if v <= 0.0 {
        return Err(err(
            "the voltage must be positive (a negative reading means the leads are reversed)",
        ));
    }
    if v > MAX_VOLTS {
        return Err(err(&format!(
            "{} V is not a battery rest voltage (at most {MAX_VOLTS} V)",
            crate::units::Shown(v)
        )));
    }
    if elapsed.0 > MAX_ELAPSED_HOURS {
        return Err(err("the elapsed time must be within 10 years"));
    }
    Ok(RestPoint {
        elapsed,
        volts: Volts(v),
    })
}
