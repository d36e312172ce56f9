//! A catalogue of bad inputs: each must end with the documented exit status
//! (0 ok, 1 failure, 2 usage, 3 fleet rows rejected) and a message saying
//! where (file:line and column, or the option) and what was expected, and none
//! may panic (common::run_in checks every run). Inputs that look odd but are
//! valid (BOM, CRLF, decimal commas, `;` exports, readings out of time order)
//! must be accepted, and read exactly like their plain form.
// Helpers outside #[test] fns: clippy's allow-*-in-tests does not reach them.
#![allow(clippy::unwrap_used, clippy::expect_used)]

mod common;
use common::{fixture, json, num, repo, run_in, tmp};
use serde_json::Value;
use std::path::Path;

/// One bad input. In `args`, `@name` stands for tests/fixtures/name and
/// `%name` for a file [`generated`] into the run's temporary directory (binary
/// or large inputs that are better not committed).
struct Case {
    args: &'static [&'static str],
    code: i32,
    /// Every one of these must appear in stderr; for an accepted input (0) or a
    /// fleet run with rejected rows (3), in the report instead.
    says: &'static [&'static str],
}

const fn case(args: &'static [&'static str], code: i32, says: &'static [&'static str]) -> Case {
    Case { args, code, says }
}

/// Ten million bytes: one field of that size must not exhaust memory or flood stderr.
const TEN_MB: usize = 10_000_000;

/// UTF-16 little-endian with its byte-order mark, as some spreadsheets export "Unicode text".
fn utf16le(text: &str) -> Vec<u8> {
    let mut out = vec![0xFF, 0xFE];
    for u in text.encode_utf16() {
        out.extend_from_slice(&u.to_le_bytes());
    }
    out
}

/// The `%name` inputs. 0xB0 is the degree sign in Latin-1 (ISO/IEC 8859-1),
/// 0xE9 an é: neither is a character on its own in UTF-8.
fn generated(name: &str) -> Vec<u8> {
    let big = "1".repeat(TEN_MB);
    match name {
        "fleet-latin1.csv" => b"unit_id,taken_at,profile,volts,note\nA1,2026-03-02 09:00,agm,12.80,ok\nA2,2026-03-02 09:05,agm,12.75,18\xb0C\n".to_vec(),
        "fleet-utf16.csv" => utf16le("unit_id,taken_at,profile,volts\nA1,2026-03-02 09:00,agm,12.80\n"),
        "fleet-10mb-field.csv" => format!(
            "unit_id,taken_at,profile,volts,note\nA1,2026-03-02 09:00,agm,12.80,{big}\nA2,2026-03-02 09:05,agm,12.75,ok\n"
        )
        .into_bytes(),
        "fleet-huge-numbers.csv" => b"unit_id,taken_at,profile,volts,temp_c,ohmic_mohm\nA1,2026-03-02 09:00,agm,12.80,20,4.1\nA2,2026-03-02 09:05,agm,1e300,1e300,1e300\n".to_vec(),
        "settle-latin1.csv" => b"minutes,volts,note\n10,12.979,ok\n20,12.962,18\xb0C\n30,12.939,ok\n".to_vec(),
        "settle-utf16.csv" => utf16le("minutes,volts\n10,12.979\n20,12.962\n30,12.939\n"),
        "settle-10mb-field.csv" => format!("minutes,volts\n10,12.979\n20,{big}\n30,12.939\n").into_bytes(),
        "calibrate-latin1.csv" => b"soc_percent,volts,temp_c,note\n20,12.06,25,ok\n50,12.25,25,caf\xe9\n".to_vec(),
        "calibrate-huge.csv" => b"soc_percent,volts,temp_c\n20,12.06,25\n50,1e300,25\n".to_vec(),
        "calibrate-utf16.csv" => utf16le("soc_percent,volts,temp_c\n20,12.06,25\n50,12.25,25\n"),
        "calibrate-10mb-field.csv" => format!("soc_percent,volts,temp_c\n20,12.06,25\n50,{big},25\n").into_bytes(),
        "calibrate-copy.csv" => std::fs::read(fixture("calibrate-points.csv")).expect("fixture"),
        "profile-latin1.toml" => {
            let text = std::fs::read_to_string(fixture("valid-profile.toml")).expect("fixture");
            let mut bytes = text.replacen("name = \"", "name = \"Caf\u{e9} ", 1).into_bytes();
            let at = bytes.windows(2).position(|w| w == "é".as_bytes()).expect("é");
            bytes.splice(at..at + 2, [0xE9]);
            bytes
        }
        "profile-utf16.toml" => utf16le(&std::fs::read_to_string(fixture("valid-profile.toml")).expect("fixture")),
        "profile-10mb-id.toml" => std::fs::read_to_string(fixture("valid-profile.toml"))
            .expect("fixture")
            .replacen("id = \"site-agm\"", &format!("id = \"{}\"", "a".repeat(TEN_MB)), 1)
            .into_bytes(),
        other => panic!("no generated input {other}"),
    }
}

const CASES: &[Case] = &[
    // ---- check: voltages
    case(
        &["check", "--volts", "NaN"],
        2,
        &["--volts", "'NaN' is not a number", "12.45"],
    ),
    case(
        &["check", "--volts", "inf"],
        2,
        &["--volts", "'inf' is not a number"],
    ),
    case(
        &["check", "--volts", "1e9"],
        2,
        &["--volts", "not a battery rest voltage", "at most 1000 V"],
    ),
    // Absurdly large numbers are echoed in scientific notation, not as
    // hundreds of digits.
    case(
        &["check", "--volts", "1e308"],
        2,
        &["--volts: 1e308 V is not a battery rest voltage"],
    ),
    case(
        &["check", "--volts", "12.6", "--temp=1e300C"],
        2,
        &["--temp: temperature 1e300 °C is outside the accepted range"],
    ),
    case(
        &["check", "--volts", "12.6", "--sg", "1e300"],
        2,
        &["--sg: reading 1 is 1e300:"],
    ),
    case(
        &[
            "ventilation",
            "--cells",
            "24",
            "--capacity-ah",
            "1e300",
            "--type",
            "vented",
            "--mode",
            "float",
        ],
        2,
        &["rated capacity 1e300 Ah per cell is more than the 50000 Ah accepted"],
    ),
    case(
        &["check", "--volts", "abc"],
        2,
        &["--volts", "'abc'", "a voltage like 12.45"],
    ),
    case(
        &["check", "--volts", ""],
        2,
        &["--volts", "expected a voltage"],
    ),
    // Decimal comma, as typed on a European phone: accepted.
    case(
        &[
            "check", "--volts", "12,41", "--temp", "25C", "--rest", "24h",
        ],
        0,
        &["Charge"],
    ),
    // Reversed leads read negative: accepted, and flagged.
    case(
        &[
            "check", "--volts", "-12.4", "--temp", "25C", "--rest", "24h",
        ],
        0,
        &["check-connection", "polarity"],
    ),
    case(&["check"], 2, &["nothing to assess", "--volts", "--sg"]),
    // ---- check: rest, meter, resolution, temperature
    case(
        &["check", "--volts", "12.4", "--rest", "-2h"],
        2,
        &["--rest", "'-2h' is negative"],
    ),
    case(
        &["check", "--volts", "12.4", "--rest", "3weeks"],
        2,
        &["--rest", "'3weeks'", "40m, 6h, 2d"],
    ),
    case(
        &["check", "--volts", "12.4", "--meter", "0.5"],
        2,
        &["--meter", "'0.5'", "PERCENT%+COUNTS", "0.5%+2"],
    ),
    case(
        &["check", "--volts", "12.4", "--meter", "50%+2"],
        2,
        &["--meter", "'50%+2'", "PERCENT%+COUNTS"],
    ),
    case(
        &["check", "--volts", "12.4", "--resolution", "0"],
        2,
        &["--resolution", "0.0001–1"],
    ),
    case(
        &["check", "--volts", "12.4", "--resolution", "5"],
        2,
        &["--resolution", "5 V", "0.0001–1"],
    ),
    case(
        &["check", "--volts", "12.4", "--temp", "25"],
        2,
        &["--temp", "no unit", "25F"],
    ),
    case(
        &["check", "--volts", "12.4", "--temp", "25K"],
        2,
        &["--temp", "'25K'", "C or F"],
    ),
    case(
        &["check", "--volts", "12.4", "--temp", "500C"],
        2,
        &["500 °C", "-40 to 70 °C"],
    ),
    case(
        &["check", "--volts", "12.4", "--temp-uncertainty", "50"],
        2,
        &["--temp-uncertainty", "50 K", "0–30 K"],
    ),
    case(
        &["check", "--volts", "12.4", "--min-temp", "cold"],
        2,
        &["--min-temp", "'cold'", "-4C or 25F"],
    ),
    case(
        &["check", "--volts", "12.4", "--cells", "0"],
        2,
        &["--cells", "0 is not a number of cells", "1–400"],
    ),
    // ---- check: hydrometer and profile
    case(
        &["check", "--sg", "1.5"],
        2,
        &["--sg", "reading 1 is 1.5", "1.000–1.400"],
    ),
    case(
        &["check", "--sg", "1.265,abc"],
        2,
        &["--sg", "'abc'", "specific gravity like 1.265"],
    ),
    case(
        &["check", "--sg", "1.2,1.2"],
        2,
        &["2 SG readings for 6 cells", "one reading per cell"],
    ),
    case(
        &["check", "--sg", "1.25", "--profile", "agm"],
        2,
        &["'agm'", "valve-regulated", "SG readings do not apply"],
    ),
    case(
        &["check", "--volts", "12.4", "--profile", "flooded-automotve"],
        2,
        &[
            "unknown profile 'flooded-automotve'",
            "did you mean 'flooded-automotive'",
            "profiles list",
        ],
    ),
    case(
        &[
            "check",
            "--volts",
            "12.4",
            "--rules",
            "@rules-unknown-id.toml",
        ],
        2,
        &[
            "rules-unknown-id.toml",
            "'sg-sprad'",
            "did you mean 'sg-spread'",
        ],
    ),
    // ---- settle: CSV files
    case(
        &["settle", "@settle-decreasing.csv", "--after", "charge"],
        2,
        &[
            "settle-decreasing.csv:4",
            "column 'minutes'",
            "not later than line 3 (30 min",
            "time order",
        ],
    ),
    case(
        &["settle", "@settle-equal-times.csv", "--after", "charge"],
        2,
        &["settle-equal-times.csv:4", "'20'", "distinct time"],
    ),
    case(
        &["settle", "@settle-nan.csv", "--after", "charge"],
        2,
        &["settle-nan.csv:3", "column 'volts'", "'NaN'", "like 12.65"],
    ),
    case(
        &["settle", "@settle-spike.csv", "--after", "charge"],
        1,
        &["reading 5 is off by", "re-take that reading"],
    ),
    case(
        &["settle", "@settle-truncated.csv", "--after", "charge"],
        2,
        &["settle-truncated.csv:10", "1 fields, but the header has 2"],
    ),
    case(
        &["settle", "@settle-extra-field.csv", "--after", "charge"],
        2,
        &[
            "settle-extra-field.csv:2",
            "3 fields",
            "one value per column",
        ],
    ),
    case(
        &["settle", "@settle-bom.csv", "--after", "charge"],
        0,
        &["Rested voltage"],
    ),
    case(
        &["settle", "@settle-crlf.csv", "--after", "charge"],
        0,
        &["Rested voltage"],
    ),
    case(
        &["settle", "@settle-empty.csv"],
        2,
        &["settle-empty.csv:1", "empty", "minutes,volts"],
    ),
    case(
        &["settle", "@settle-no-header.csv"],
        2,
        &[
            "settle-no-header.csv:1",
            "no time column",
            "minutes, hours or taken_at",
        ],
    ),
    case(
        &["settle", "@settle-negative-time.csv"],
        2,
        &[
            "settle-negative-time.csv:2",
            "column 'minutes'",
            "'-10'",
            "positive",
        ],
    ),
    case(
        &["settle", "@settle-two-time-columns.csv"],
        2,
        &["settle-two-time-columns.csv:1", "more than one time column"],
    ),
    case(
        &["settle", "@settle-timestamps.csv"],
        2,
        &["taken_at", "--ended-at"],
    ),
    case(
        &[
            "settle",
            "@settle-timestamps.csv",
            "--ended-at",
            "yesterday",
        ],
        2,
        &["--ended-at", "'yesterday'", "YYYY-MM-DD HH:MM"],
    ),
    case(
        &[
            "settle",
            "@settle-rising-after-charge.csv",
            "--after",
            "charge",
        ],
        1,
        &["after a charge", "the readings rise"],
    ),
    case(
        &["settle", "@no-such-file.csv"],
        1,
        &["no-such-file.csv", "No such file"],
    ),
    // ---- settle: typed readings
    case(&["settle"], 2, &["CSV file or --reading"]),
    case(
        &[
            "settle",
            "--reading",
            "20m=abc",
            "--reading",
            "1h=12.8",
            "--reading",
            "2h=12.7",
        ],
        2,
        &["--reading", "'abc' is not a voltage", "ELAPSED=VOLTS"],
    ),
    case(
        &[
            "settle",
            "--reading",
            "20m",
            "--reading",
            "1h=12.8",
            "--reading",
            "2h=12.7",
        ],
        2,
        &["--reading", "no '='", "30m=12.93"],
    ),
    // ---- profiles check
    case(
        &["profiles", "check", "@profile-unknown-key.toml"],
        1,
        &[
            "profile-unknown-key.toml:23",
            "unknown field `soak_hours`",
            "minimum_hours",
        ],
    ),
    case(
        &["profiles", "check", "@profile-non-monotone.toml"],
        1,
        &[
            "profile-non-monotone.toml",
            "key `curve`",
            "must increase strictly",
            "1.975 then 1.9",
        ],
    ),
    case(
        &["profiles", "check", "@profile-inverted-sg.toml"],
        1,
        &[
            "profile-inverted-sg.toml",
            "key `electrolyte`",
            "SG range inverted",
            "must be below full charge",
        ],
    ),
    case(
        &["profiles", "check", "@no-such-profile.toml"],
        1,
        &["no-such-profile.toml", "No such file"],
    ),
    case(
        &["profiles", "show", "agn"],
        2,
        &["unknown profile 'agn'", "did you mean 'agm'"],
    ),
    // ---- rules
    case(
        &["rules", "--rules", "@rules-unknown-id.toml"],
        2,
        &[
            "rules-unknown-id.toml",
            "unknown rule 'sg-sprad'",
            "did you mean 'sg-spread'",
        ],
    ),
    case(
        &["rules", "--rules", "@rules-negative.toml"],
        2,
        &["rules-negative.toml", "rule 'sg-spread'", "-0.03", "≥ 0"],
    ),
    case(
        &["rules", "--rules", "@no-such-rules.toml"],
        1,
        &["no-such-rules.toml", "No such file"],
    ),
    // ---- check: more options
    case(
        &["check", "--volts", "12.4", "--temp", "77C"],
        2,
        &["--temp", "77 °C is outside", "-40 to 70 °C", "if that was °F, write 77F (25.0 °C)"],
    ),
    case(
        &["check", "--volts", "12.4", "--rest", "99999999d"],
        2,
        &["--rest", "'99999999d'", "more than 10 years", "40m, 6h or 2d"],
    ),
    case(
        &["check", "--volts", "12,41,5"],
        2,
        &["--volts", "'12,41,5' is not a number", "a voltage like 12.45"],
    ),
    case(
        &["check", "--sg", "1265"],
        2,
        &["--sg", "reading 1 is 1265", "1.000–1.400"],
    ),
    case(
        &["check", "--sg", "1.265,1.262,1.268", "--cells", "6", "--temp", "20C"],
        2,
        &["3 SG readings for 6 cells", "one reading per cell, or one mean value"],
    ),
    case(
        &["check", "--volts", "12.4", "--float", "--profile", "agm", "--ambient", "500C"],
        2,
        &["--ambient", "500 °C", "-40 to 70 °C"],
    ),
    // ---- settle: more files
    case(
        &["settle", "@settle-semicolon.csv", "--after", "charge"],
        0,
        &["9 readings over 4.0 h", "Rested voltage"],
    ),
    case(
        &["settle", "@settle-inf.csv"],
        2,
        &["settle-inf.csv:4", "column 'volts'", "'inf'", "like 12.65"],
    ),
    case(
        &["settle", "@settle-negative-volts.csv"],
        2,
        &["settle-negative-volts.csv:2", "'-12.979'", "leads are reversed"],
    ),
    case(
        &["settle", "@settle-absurd-volts.csv"],
        2,
        &["settle-absurd-volts.csv:5", "column 'volts'", "'1e9'", "at most 1000 V"],
    ),
    case(
        &["settle", "@settle-fahrenheit-in-celsius.csv"],
        2,
        &[
            "settle-fahrenheit-in-celsius.csv:4",
            "column 'temp_c'",
            "'77'",
            "-40 to 70 °C",
            "as °F it would be 25.0 °C",
        ],
    ),
    case(
        &["settle", "@settle-absurd-time.csv"],
        2,
        &["settle-absurd-time.csv:4", "column 'hours'", "'100000'", "within 10 years"],
    ),
    case(
        &["settle", "@settle-before-end.csv", "--ended-at", "2026-11-30 14:05"],
        2,
        &[
            "settle-before-end.csv:2",
            "column 'taken_at'",
            "'2026-11-30 13:55'",
            "after the end of the charge",
        ],
    ),
    // Two 12 V blocks in series read on a 6-cell profile: no state of charge for it.
    // A reading dated 2099: the year or the meter's clock is wrong.
    case(
        &["settle", "@settle-future.csv", "--ended-at", "2026-11-30 14:05"],
        2,
        &[
            "settle-future.csv:3",
            "column 'taken_at'",
            "'2099-11-30 14:25'",
            "at most a day after now",
            "cannot be taken in the future",
        ],
    ),
    case(
        &["settle", "@settle-24v.csv", "--after", "charge"],
        1,
        &["over 6 cells", "fits 12 cells, not 6", "wrong-cell-count", "no state of charge"],
    ),
    case(
        &["settle", "%settle-latin1.csv"],
        2,
        &["settle-latin1.csv:3", "not valid UTF-8", "0xB0", "Latin-1", "re-save the file as UTF-8"],
    ),
    case(
        &["settle", "%settle-utf16.csv"],
        2,
        &["settle-utf16.csv:1", "UTF-16", "re-save the file as UTF-8"],
    ),
    case(
        &["settle", "%settle-10mb-field.csv"],
        2,
        &["settle-10mb-field.csv:3", "column 'volts'", "(10000000 bytes)", "like 12.65"],
    ),
    // ---- settle: options
    case(
        &["settle", "@settle-crlf.csv", "--temp", "77C"],
        2,
        &["--temp", "77 °C is outside", "write 77F"],
    ),
    case(
        &["settle", "@settle-crlf.csv", "--cells", "0"],
        2,
        &["--cells", "expected 1–400"],
    ),
    case(
        &["settle", "@settle-crlf.csv", "--profile", "agn"],
        2,
        &["--profile", "unknown profile 'agn'", "did you mean 'agm'"],
    ),
    case(
        &["settle", "--reading", "20m=12.9", "--reading", "40m=2000", "--reading", "1h=12.8"],
        2,
        &["--reading", "'40m=2000'", "at most 1000 V"],
    ),
    case(
        &["settle", "--reading", "20m=12.9", "--reading", "-40m=12.85", "--reading", "1h=12.8"],
        2,
        &["--reading", "'-40m=12.85'", "negative"],
    ),
    case(
        &["settle", "--reading", "40m=12.9", "--reading", "20m=12.85", "--reading", "1h=12.8"],
        2,
        &["reading 2 at 20 min is not later than reading 1 at 40 min", "time order"],
    ),
    // ---- fleet (run with --format json; see the runner)
    case(
        &["fleet", "%fleet-huge-numbers.csv"],
        3,
        &[
            "fleet-huge-numbers.csv:3: column `volts`: 1e300 V is absurd",
            "column `temp_c`: 1e300 °C is outside",
            "column `ohmic_mohm`: 1e300 mΩ is not a plausible",
        ],
    ),
    case(&["fleet", "@fleet-bom.csv"], 0, &["A1 serviceable", "A3"]),
    case(&["fleet", "@fleet-crlf.csv"], 0, &["A1 serviceable", "A3"]),
    case(&["fleet", "@fleet-semicolon.csv"], 0, &["V1 ", "V2 serviceable"]),
    case(&["fleet", "@fleet-out-of-order.csv"], 0, &["A1 "]),
    case(&["fleet", "@fleet-duplicates.csv"], 0, &["A1 ", "duplicate readings 1"]),
    // Reversed leads: kept, and diagnosed rather than rejected.
    case(
        &["fleet", "@fleet-negative-volts.csv"],
        0,
        &["A2 remeasure", "check-connection"],
    ),
    case(
        &["fleet", "@fleet-empty.csv"],
        2,
        &["fleet-empty.csv", "the file is empty", "header line such as unit_id,taken_at,volts,profile"],
    ),
    case(
        &["fleet", "@fleet-no-header.csv"],
        2,
        &["fleet-no-header.csv:1", "the first line is not a header", "expected column names"],
    ),
    case(
        &["fleet", "@fleet-missing-column.csv"],
        2,
        &["fleet-missing-column.csv:1", "missing required column `taken_at`", "did you mean `taken_at`"],
    ),
    case(
        &["fleet", "@fleet-duplicate-column.csv"],
        2,
        &["fleet-duplicate-column.csv:1", "column `volts` appears twice", "fields 3 and 5"],
    ),
    case(
        &["fleet", "@fleet-truncated.csv"],
        3,
        &["fleet-truncated.csv:3: found 4 fields where the header has 6", "truncated line"],
    ),
    case(
        &["fleet", "@fleet-nan-inf.csv"],
        3,
        &[
            "fleet-nan-inf.csv:3: column `volts`: 'NaN' is not a number (expected volts)",
            "fleet-nan-inf.csv:4: column `volts`: 'inf' is not a number",
        ],
    ),
    case(
        &["fleet", "@fleet-absurd-volts.csv"],
        3,
        &["fleet-absurd-volts.csv:3: column `volts`", "expected at most 1000 V"],
    ),
    case(
        &["fleet", "@fleet-fahrenheit-in-celsius.csv"],
        3,
        &["fleet-fahrenheit-in-celsius.csv:3: column `temp_c`: 77", "was it °F?", "-40 to 70 °C"],
    ),
    case(
        &["fleet", "@fleet-rest-times.csv"],
        3,
        &[
            "fleet-rest-times.csv:3: column `rest_h`: -3 h is negative",
            "fleet-rest-times.csv:4: column `rest_h`: 100000 h is more than 10 years",
        ],
    ),
    case(
        &["fleet", "@fleet-unknown-profile.csv"],
        3,
        &[
            "fleet-unknown-profile.csv:3: column `profile`: unknown profile 'flooded-automotve'",
            "did you mean 'flooded-automotive'",
        ],
    ),
    case(
        &["fleet", "@fleet-future.csv"],
        3,
        &[
            "fleet-future.csv:3: column `taken_at`: 2099-03-02 09:05:00 is in the future: expected at most 20",
            "check the year and the meter's clock",
        ],
    ),
    case(
        &["fleet", "@fleet-sg-count.csv"],
        3,
        &[
            "fleet-sg-count.csv:3: column `sg`: 3 values for 6 cells",
            "fleet-sg-count.csv:4: column `sg`: 3 values for 6 cells (profile 'flooded-automotive')",
            "give one per cell, or one mean value",
            "F1 ",
        ],
    ),
    case(
        &["fleet", "@fleet-sg-on-agm.csv"],
        3,
        &["fleet-sg-on-agm.csv:3: column `sg`: profile 'agm' is valve-regulated", "F1 "],
    ),
    case(
        &["fleet", "%fleet-latin1.csv"],
        2,
        &["fleet-latin1.csv:3", "byte 0xB0 in column `note`", "Latin-1", "re-save the file as UTF-8"],
    ),
    case(
        &["fleet", "%fleet-utf16.csv"],
        2,
        &["fleet-utf16.csv:1", "UTF-16 (little-endian byte-order mark)", "re-save the file as UTF-8"],
    ),
    case(
        &["fleet", "%fleet-10mb-field.csv"],
        3,
        &["fleet-10mb-field.csv:2: column `note`: field is 10000000 bytes, over the 64 KiB limit", "A2 "],
    ),
    case(
        &["fleet", "@fleet-bom.csv", "--delimiter", "pipe"],
        2,
        &["--delimiter", "'pipe'", "one of , ; tab"],
    ),
    case(
        &["fleet", "@fleet-bom.csv", "--min-temp", "cold"],
        2,
        &["--min-temp", "'cold'", "-4C or 25F"],
    ),
    case(
        &["fleet", "@fleet-bom.csv", "--profile", "agn"],
        2,
        &["--profile: unknown profile 'agn'", "did you mean 'agm'"],
    ),
    case(
        &["fleet", "@fleet-bom.csv", "--profile", "no-such-kind"],
        2,
        &["--profile: unknown profile 'no-such-kind'", "`restvolt profiles list` shows the ids"],
    ),
    case(&["fleet", "@no-such-fleet.csv"], 1, &["no-such-fleet.csv", "No such file"]),
    // ---- calibrate
    case(
        &["calibrate", "@calibrate-points.csv", "--id", "site-x", "-o", "site-x.toml"],
        0,
        &["wrote site-x.toml"],
    ),
    case(
        &["calibrate", "@calibrate-bom.csv", "--id", "site-x", "-o", "bom.toml"],
        0,
        &["wrote bom.toml"],
    ),
    case(
        &["calibrate", "@calibrate-crlf.csv", "--id", "site-x", "-o", "crlf.toml"],
        0,
        &["wrote crlf.toml"],
    ),
    case(
        &["calibrate", "@calibrate-semicolon.csv", "--id", "site-x", "-o", "semi.toml"],
        0,
        &["wrote semi.toml"],
    ),
    case(
        &["calibrate", "@calibrate-empty.csv", "--id", "x", "-o", "x.toml"],
        2,
        &["calibrate-empty.csv:1", "the file is empty", "soc_percent,volts,temp_c"],
    ),
    case(
        &["calibrate", "@calibrate-no-soc.csv", "--id", "x", "-o", "x.toml"],
        2,
        &["calibrate-no-soc.csv:1", "no `soc_percent` column (found: soc, volts, temp_c)"],
    ),
    case(
        &["calibrate", "@calibrate-no-temperature.csv", "--id", "x", "-o", "x.toml"],
        2,
        &["calibrate-no-temperature.csv:1", "no `temp_c` or `temp_f` column"],
    ),
    case(
        &["calibrate", "@calibrate-duplicate-column.csv", "--id", "x", "-o", "x.toml"],
        2,
        &["calibrate-duplicate-column.csv:1", "column `volts` appears more than once"],
    ),
    case(
        &["calibrate", "@calibrate-nan.csv", "--id", "x", "-o", "x.toml"],
        2,
        &["calibrate-nan.csv:4: column `volts`: 'NaN' is not a number", "a voltage in volts"],
    ),
    case(
        &["calibrate", "@calibrate-inf.csv", "--id", "x", "-o", "x.toml"],
        2,
        &["calibrate-inf.csv:4: column `volts`: 'inf' is not a number"],
    ),
    case(
        &["calibrate", "@calibrate-negative-volts.csv", "--id", "x", "-o", "x.toml"],
        2,
        &["calibrate-negative-volts.csv:5: column `volts`", "outside the 1.7–2.4 V", "cells count"],
    ),
    case(
        &["calibrate", "@calibrate-absurd-volts.csv", "--id", "x", "-o", "x.toml"],
        2,
        &["calibrate-absurd-volts.csv:6: column `volts`", "outside the 1.7–2.4 V"],
    ),
    case(
        &["calibrate", "@calibrate-fahrenheit-in-celsius.csv", "--id", "x", "-o", "x.toml"],
        2,
        &[
            "calibrate-fahrenheit-in-celsius.csv:3: column `temp_c`",
            "outside -40–70 °C",
            "as °F it would be 25.0 °C",
        ],
    ),
    case(
        &["calibrate", "@calibrate-soc-range.csv", "--id", "x", "-o", "x.toml"],
        2,
        &["calibrate-soc-range.csv:2: column `soc_percent`: -5 % is outside 0–100 %"],
    ),
    case(
        &["calibrate", "@calibrate-truncated.csv", "--id", "x", "-o", "x.toml"],
        2,
        &["calibrate-truncated.csv:9: 2 fields, but the header has 3", "one value per column"],
    ),
    case(
        &["calibrate", "@calibrate-duplicate-point.csv", "--id", "x", "-o", "x.toml"],
        2,
        &["calibrate-duplicate-point.csv", "lines 4 and 10 are the same point", "remove the copy"],
    ),
    case(
        &["calibrate", "@calibrate-sg-count.csv", "--id", "x", "-o", "x.toml"],
        2,
        &["calibrate-sg-count.csv:2: column `sg`: 3 values for 6 cells", "one per cell, or one mean value"],
    ),
    case(
        &["calibrate", "@calibrate-sg-unquoted.csv", "--id", "x", "-o", "x.toml"],
        2,
        &["calibrate-sg-unquoted.csv:2: 4 fields, but the header has 3", "quote a per-cell SG list"],
    ),
    case(
        &["calibrate", "@calibrate-sg-on-agm.csv", "--from", "agm", "--id", "x", "-o", "x.toml"],
        2,
        &["calibrate-sg-on-agm.csv:2: column `sg`", "'agm' is valve-regulated"],
    ),
    case(
        &["calibrate", "%calibrate-huge.csv", "--id", "x", "-o", "x.toml"],
        2,
        &["calibrate-huge.csv:3: column `volts`: 1e300 V over 6 cells is 1.667e299 V per cell"],
    ),
    case(
        &["calibrate", "%calibrate-latin1.csv", "--id", "x", "-o", "x.toml"],
        2,
        &["calibrate-latin1.csv:3", "not valid UTF-8", "0xE9", "re-save the file as UTF-8"],
    ),
    case(
        &["calibrate", "%calibrate-utf16.csv", "--id", "x", "-o", "x.toml"],
        2,
        &["calibrate-utf16.csv:1", "UTF-16", "re-save the file as UTF-8"],
    ),
    case(
        &["calibrate", "%calibrate-10mb-field.csv", "--id", "x", "-o", "x.toml"],
        2,
        &["calibrate-10mb-field.csv:3: column `volts`", "(10000000 bytes)", "a voltage in volts"],
    ),
    case(
        &["calibrate", "@calibrate-points.csv", "--id", "Site X", "-o", "x.toml"],
        2,
        &["--id", "'Site X'", "lower-case letters, digits and single hyphens"],
    ),
    case(
        &["calibrate", "@calibrate-points.csv", "--from", "flooded-automotve", "--id", "x", "-o", "x.toml"],
        2,
        &["--from", "unknown profile 'flooded-automotve'", "did you mean 'flooded-automotive'"],
    ),
    case(
        &["calibrate", "%calibrate-copy.csv", "--id", "x", "-o", "%calibrate-copy.csv"],
        2,
        &["refusing to write", "over the input file", "calibrate-copy.csv"],
    ),
    // ---- profiles check: more files
    case(&["profiles", "check", "@profile-bom.toml"], 0, &["profile 'site-agm' is valid"]),
    case(&["profiles", "check", "@profile-crlf.toml"], 0, &["profile 'site-agm' is valid"]),
    case(
        &["profiles", "check", "@profile-empty.toml"],
        1,
        &["profile-empty.toml:1", "the file is empty", "id, name, family, cells"],
    ),
    case(
        &["profiles", "check", "@profile-nan.toml"],
        1,
        &["profile-nan.toml", "key `tolerance.curve_mv_per_cell.value`", "not a finite number"],
    ),
    case(
        &["profiles", "check", "@profile-zero-cells.toml"],
        1,
        &["profile-zero-cells.toml", "key `cells.value`", "0 cells: expected 1–400"],
    ),
    case(
        &["profiles", "check", "@profile-truncated.toml"],
        1,
        &["profile-truncated.toml:23", "expected `.`, `=`"],
    ),
    case(
        &["profiles", "check", "%profile-latin1.toml"],
        1,
        &["profile-latin1.toml:2", "not valid UTF-8", "0xE9", "re-save the file as UTF-8"],
    ),
    case(
        &["profiles", "check", "%profile-utf16.toml"],
        1,
        &["profile-utf16.toml:1", "UTF-16", "re-save the file as UTF-8"],
    ),
    case(
        &["profiles", "check", "%profile-10mb-id.toml"],
        1,
        &["profile-10mb-id.toml", "key `id`", "(10000000 bytes)", "1–64 lower-case letters"],
    ),
];

/// What a fleet run reported, as text the cases can quote: each rejected row
/// as `file:line: reason`, each unit as `id action flags…`, and the counts;
/// and check the one thing every fleet run must satisfy: rows read =
/// accepted + rejected (no row lost).
fn fleet_text(args: &[&str], stdout: &str) -> Result<String, String> {
    let v: Value = serde_json::from_str(stdout).map_err(|e| format!("{args:?}: not JSON ({e})"))?;
    let s = &v["summary"];
    let count = |k: &str| s[k].as_u64().unwrap_or(u64::MAX);
    if count("rows_read") != count("rows_accepted") + count("rows_rejected") {
        return Err(format!("{args:?}: rows read ≠ accepted + rejected: {s}"));
    }
    let rejected = v["rejected"].as_array().map(Vec::as_slice).unwrap_or(&[]);
    if rejected.len() as u64 != count("rows_rejected") {
        return Err(format!(
            "{args:?}: {} rejected rows listed, {} counted",
            rejected.len(),
            count("rows_rejected")
        ));
    }
    let mut text = format!("duplicate readings {}\n", s["duplicate_readings"]);
    for r in rejected {
        text += &format!(
            "{}:{}: {}\n",
            r["file"].as_str().unwrap_or("?"),
            r["line"],
            r["reason"].as_str().unwrap_or("?")
        );
    }
    for u in v["units"].as_array().map(Vec::as_slice).unwrap_or(&[]) {
        let flags: Vec<&str> = u["flags"]
            .as_array()
            .map(Vec::as_slice)
            .unwrap_or(&[])
            .iter()
            .filter_map(Value::as_str)
            .collect();
        text += &format!(
            "{} {} {}\n",
            u["unit_id"].as_str().unwrap_or("?"),
            u["action"].as_str().unwrap_or("?"),
            flags.join(" ")
        );
    }
    Ok(text)
}

fn expand(a: &str, dir: &Path) -> String {
    if let Some(name) = a.strip_prefix('@') {
        fixture(name).display().to_string()
    } else if let Some(name) = a.strip_prefix('%') {
        dir.join(name).display().to_string()
    } else {
        a.to_string()
    }
}

#[test]
fn catalogue_of_bad_inputs() {
    let d = tmp();
    let mut failures = Vec::new();
    for c in CASES {
        for a in c.args {
            if let Some(name) = a.strip_prefix('%') {
                std::fs::write(d.path().join(name), generated(name)).unwrap();
            }
        }
        let mut args: Vec<String> = c.args.iter().map(|a| expand(a, d.path())).collect();
        let fleet = c.args[0] == "fleet";
        if fleet {
            args.extend(["--format".into(), "json".into()]);
        }
        let argv: Vec<&str> = args.iter().map(String::as_str).collect();
        let r = run_in(d.path(), &argv);
        if r.code != Some(c.code) {
            failures.push(format!(
                "{:?}: exit {:?}, expected {}\n  {}",
                c.args,
                r.code,
                c.code,
                r.stderr.trim()
            ));
            continue;
        }
        let reported = matches!(c.code, 0 | 3);
        let text = match (fleet, reported) {
            (true, true) => match fleet_text(c.args, &r.stdout) {
                Ok(t) => t,
                Err(e) => {
                    failures.push(e);
                    continue;
                }
            },
            (false, true) => r.stdout.clone(),
            (_, false) => r.stderr.clone(),
        };
        if !reported && !r.stderr.starts_with("restvolt: ") {
            failures.push(format!(
                "{:?}: stderr does not start with 'restvolt: ': {}",
                c.args, r.stderr
            ));
        }
        if r.stderr.len() > 4000 {
            failures.push(format!("{:?}: {} bytes on stderr", c.args, r.stderr.len()));
        }
        for s in c.says {
            if !text.contains(s) {
                failures.push(format!(
                    "{:?}: message lacks '{s}':\n  {}",
                    c.args,
                    text.trim()
                ));
            }
        }
        if !reported && !r.stdout.is_empty() {
            failures.push(format!(
                "{:?}: a refused input still printed a report",
                c.args
            ));
        }
    }
    // Spread over every reader: at least six cases for each command.
    for cmd in ["check", "settle", "fleet", "profiles", "calibrate"] {
        let n = CASES.iter().filter(|c| c.args[0] == cmd).count();
        assert!(n >= 6, "only {n} cases for {cmd}");
    }
    assert!(CASES.len() >= 120, "{} cases", CASES.len());
    assert!(
        failures.is_empty(),
        "{} of {} cases failed:\n{}",
        failures.len(),
        CASES.len(),
        failures.join("\n")
    );
}

#[test]
fn decimal_comma_reads_as_a_point() {
    let at = |v: &str| {
        json(&[
            "check", "--volts", v, "--temp", "25C", "--rest", "24h", "--format", "json",
        ])
    };
    assert_eq!(
        num(&at("12,41"), "soc_percent"),
        num(&at("12.41"), "soc_percent")
    );
    assert_eq!(num(&at("12,41"), "ocv_25c_volts"), 12.41);
}

#[test]
fn bom_and_crlf_files_read_like_the_plain_file() {
    // The fixtures are demo-data/rest-series.csv's readings without the temperature
    // column, with a UTF-8 byte-order mark or CRLF line ends; the plain copy is written here.
    let d = tmp();
    let plain = d.path().join("plain.csv");
    let bytes = std::fs::read(fixture("settle-crlf.csv")).unwrap();
    std::fs::write(
        &plain,
        String::from_utf8(bytes).unwrap().replace("\r\n", "\n"),
    )
    .unwrap();
    let rested = |p: &std::path::Path| {
        let v = json(&[
            "settle",
            p.to_str().unwrap(),
            "--after",
            "charge",
            "--temp",
            "18.5C",
            "--format",
            "json",
        ]);
        (num(&v, "rested_volts"), v["model"].clone())
    };
    let reference = rested(&plain);
    assert_eq!(rested(&fixture("settle-bom.csv")), reference);
    assert_eq!(rested(&fixture("settle-crlf.csv")), reference);
    // Semicolons and decimal commas (12,979; 18,5 °C), as a spreadsheet in a
    // decimal-comma locale exports them.
    assert_eq!(rested(&fixture("settle-semicolon.csv")), reference);
    // And the same as the demo file itself at its own 18.5 °C.
    assert_eq!(rested(&repo("demo-data/rest-series.csv")), reference);
}

/// `fleet --format json` on a file, with the parts that name the input removed.
fn fleet_units(path: &Path) -> (Value, Value) {
    let r = common::run(&[
        "fleet",
        path.to_str().unwrap(),
        "--format",
        "json",
        "--name",
        "t",
    ]);
    assert_eq!(r.code, Some(0), "{}", r.stderr);
    let v: Value = serde_json::from_str(&r.stdout).unwrap();
    (v["units"].clone(), v["summary"].clone())
}

#[test]
fn fleet_bom_crlf_and_semicolon_files_read_like_the_plain_file() {
    let d = tmp();
    let plain = d.path().join("plain.csv");
    let crlf = std::fs::read_to_string(fixture("fleet-crlf.csv")).unwrap();
    assert!(crlf.contains("\r\n"), "the fixture keeps its CRLF bytes");
    std::fs::write(&plain, crlf.replace("\r\n", "\n")).unwrap();
    let reference = fleet_units(&plain);
    assert_eq!(reference.1["rows_accepted"], 3);
    assert_eq!(fleet_units(&fixture("fleet-bom.csv")), reference);
    assert_eq!(fleet_units(&fixture("fleet-crlf.csv")), reference);

    // The semicolon export with decimal commas and a quoted per-cell SG list,
    // rewritten here with points and commas, gives the same report.
    let semi = std::fs::read_to_string(fixture("fleet-semicolon.csv")).unwrap();
    let comma: String = semi
        .lines()
        .map(|l| {
            let fields: Vec<String> = l
                .split(';')
                .map(|f| f.replace(',', "."))
                .collect::<Vec<_>>();
            // Rejoin the SG list (split above) with ';' inside its field.
            let (head, tail) = fields.split_at(4);
            let sg_len = tail.len() - 3;
            format!(
                "{},{},{}\n",
                head.join(","),
                tail[..sg_len].join(";").replace('"', ""),
                tail[sg_len..].join(",")
            )
        })
        .collect();
    let comma_path = d.path().join("comma.csv");
    std::fs::write(&comma_path, &comma).unwrap();
    let (units, summary) = fleet_units(&fixture("fleet-semicolon.csv"));
    assert_eq!(
        (units.clone(), summary),
        fleet_units(&comma_path),
        "{comma}"
    );
    // 12,41 read as 12.41 V and six SG values as one reading per cell: the
    // hydrometer mean is there, and both units are assessed.
    let v1 = units
        .as_array()
        .unwrap()
        .iter()
        .find(|u| u["unit_id"] == "V1")
        .unwrap();
    assert!(v1["sg_mean_25c"].as_f64().is_some(), "{v1}");
    assert!(v1["soc_percent"].as_f64().is_some(), "{v1}");
}

#[test]
fn fleet_readings_out_of_time_order_give_the_sorted_report() {
    let text = std::fs::read_to_string(fixture("fleet-out-of-order.csv")).unwrap();
    let mut lines: Vec<&str> = text.lines().collect();
    let header = lines.remove(0);
    let mut sorted = lines.clone();
    // taken_at is the second field; ISO dates sort as text.
    sorted.sort_by_key(|l| l.split(',').nth(1).unwrap().to_string());
    assert_ne!(sorted, lines, "the fixture is out of order");
    let d = tmp();
    let path = d.path().join("sorted.csv");
    std::fs::write(&path, format!("{header}\n{}\n", sorted.join("\n"))).unwrap();
    let (units, summary) = fleet_units(&fixture("fleet-out-of-order.csv"));
    assert_eq!((units.clone(), summary), fleet_units(&path));
    // The latest reading is the one latest in time (2026-03-16, 12.60 V), not
    // the last line of the file (2026-02-23).
    assert_eq!(units[0]["latest_at"], "2026-03-16 09:00");
    assert_eq!(units[0]["readings"], 4);
}

#[test]
fn fleet_duplicate_readings_are_counted_not_lost() {
    let (units, summary) = fleet_units(&fixture("fleet-duplicates.csv"));
    // Three lines, one an exact copy: all three read and accepted, one duplicate.
    assert_eq!(summary["rows_read"], 3);
    assert_eq!(summary["rows_accepted"], 3);
    assert_eq!(summary["duplicate_readings"], 1);
    assert_eq!(units[0]["readings"], 3);
    assert_eq!(units[0]["latest_at"], "2026-03-09 09:00");
}

#[test]
fn calibrate_bom_crlf_and_semicolon_files_fit_like_the_plain_file() {
    let d = tmp();
    let fit = |name: &str| {
        let r = run_in(
            d.path(),
            &[
                "calibrate",
                fixture(name).to_str().unwrap(),
                "--id",
                "site-x",
                "-o",
                "out.toml",
                "--format",
                "json",
            ],
        );
        assert_eq!(r.code, Some(0), "{name}: {}", r.stderr);
        let mut v: Value = serde_json::from_str(&r.stdout).unwrap();
        v.as_object_mut().unwrap().remove("input_name");
        v
    };
    let reference = fit("calibrate-points.csv");
    assert_eq!(reference["points"], 8);
    for name in [
        "calibrate-bom.csv",
        "calibrate-crlf.csv",
        "calibrate-semicolon.csv",
    ] {
        assert_eq!(fit(name), reference, "{name}");
    }
}

#[test]
fn profile_bom_and_crlf_files_load_like_the_plain_file() {
    let said = |name: &str| {
        let r = common::run(&["profiles", "check", fixture(name).to_str().unwrap()]);
        assert_eq!(r.code, Some(0), "{name}: {}", r.stderr);
        r.stdout
            .replace(&fixture(name).display().to_string(), "FILE")
    };
    let reference = said("valid-profile.toml");
    assert_eq!(said("profile-bom.toml"), reference);
    assert_eq!(said("profile-crlf.toml"), reference);
}
