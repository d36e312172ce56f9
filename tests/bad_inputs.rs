//! A catalogue of bad inputs: each must end with the documented exit status
//! (0 ok, 1 failure, 2 usage) and a message saying where and what was expected,
//! and none may panic (common::run_in checks every run).

mod common;
use common::{fixture, json, num, repo, run_in, tmp};

/// One bad input. `@name` in `args` stands for tests/fixtures/name.
struct Case {
    args: &'static [&'static str],
    code: i32,
    /// Every one of these must appear in stderr (or in stdout for accepted inputs).
    says: &'static [&'static str],
}

const fn case(args: &'static [&'static str], code: i32, says: &'static [&'static str]) -> Case {
    Case { args, code, says }
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
];

#[test]
fn catalogue_of_bad_inputs() {
    let d = tmp();
    let mut failures = Vec::new();
    for c in CASES {
        let args: Vec<String> = c
            .args
            .iter()
            .map(|a| match a.strip_prefix('@') {
                Some(name) => fixture(name).display().to_string(),
                None => a.to_string(),
            })
            .collect();
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
        let text = if c.code == 0 { &r.stdout } else { &r.stderr };
        if c.code != 0 && !r.stderr.starts_with("restvolt: ") {
            failures.push(format!(
                "{:?}: stderr does not start with 'restvolt: ': {}",
                c.args, r.stderr
            ));
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
        if c.code != 0 && !r.stdout.is_empty() {
            failures.push(format!(
                "{:?}: a refused input still printed a report",
                c.args
            ));
        }
    }
    assert!(CASES.len() >= 25);
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
    // And the same as the demo file itself at its own 18.5 °C.
    assert_eq!(rested(&repo("demo-data/rest-series.csv")), reference);
}
