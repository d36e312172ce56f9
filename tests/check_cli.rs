//! `restvolt check` driven through the real binary.

mod common;
use common::{assert_fits_80_columns, flags, json, num, run};

/// The `restvolt check ...` example lines of `check --help`, split into arguments.
fn help_examples() -> Vec<Vec<String>> {
    let r = run(&["check", "--help"]);
    assert_eq!(r.code, Some(0), "{}", r.stderr);
    r.stdout
        .lines()
        .map(str::trim)
        .filter(|l| l.starts_with("restvolt check "))
        .map(|l| l.split_whitespace().skip(1).map(String::from).collect())
        .collect()
}

#[test]
fn every_help_example_runs() {
    let examples = help_examples();
    assert!(
        examples.len() >= 4,
        "expected the four examples of check --help, got {examples:?}"
    );
    for ex in examples
        .iter()
        .filter(|e| !e.iter().any(|a| a == "--float"))
    {
        let args: Vec<&str> = ex.iter().map(String::as_str).collect();
        let r = run(&args);
        assert_eq!(
            r.code,
            Some(0),
            "help example {args:?} failed:\n{}",
            r.stderr
        );
        assert!(
            r.stdout.contains("ACTION"),
            "help example {args:?}: no action in\n{}",
            r.stdout
        );
    }
}

/// The fourth help example uses `--float`, which this build answers with
/// "this build does not have" the float checks (src/cli/tools.rs `check_float`).
#[test]
fn help_float_example_runs() {
    let ex = help_examples()
        .into_iter()
        .find(|e| e.iter().any(|a| a == "--float"))
        .expect("a --float example in check --help");
    let args: Vec<&str> = ex.iter().map(String::as_str).collect();
    let r = run(&args);
    assert_eq!(
        r.code,
        Some(0),
        "help example {args:?} failed:\n{}",
        r.stderr
    );
}

#[test]
fn trade_table_75_and_50_percent() {
    // Common practice: the 12 V flooded trade table, 12.45 V = 75 %, 12.24 V = 50 %
    // at 25 °C, rested (REFERENCES §1.5); ±3 % for the table's rounding.
    for (volts, table_soc) in [("12.45", 75.0), ("12.24", 50.0)] {
        let v = json(&[
            "check", "--volts", volts, "--temp", "25C", "--rest", "24h", "--format", "json",
        ]);
        let soc = num(&v, "soc_percent");
        assert!(
            (soc - table_soc).abs() <= 3.0,
            "{volts} V → {soc} %, table {table_soc} %"
        );
        let iv = v["soc_interval_percent"].as_array().expect("interval");
        let (lo, hi) = (iv[0].as_f64().unwrap(), iv[1].as_f64().unwrap());
        assert!(
            lo <= table_soc && table_soc <= hi,
            "{volts} V: [{lo}, {hi}] misses {table_soc}"
        );
        // A settled reading at 25 °C needs no temperature correction.
        assert_eq!(num(&v, "temperature_correction_mv"), 0.0);
        assert_eq!(v["rest"]["status"], "settled");
    }
}

#[test]
fn json_has_the_documented_fields() {
    let v = json(&[
        "check", "--volts", "12.45", "--temp", "25C", "--rest", "24h", "--format", "json",
    ]);
    for key in [
        "schema",
        "soc_percent",
        "soc_interval_percent",
        "ocv_25c_volts",
        "ocv_per_cell_25c_volts",
        "temperature_correction_mv",
        "rest",
        "flags",
        "action",
        "reasons",
        "freezing_point_celsius",
        "cautions",
    ] {
        assert!(v.get(key).is_some(), "check JSON lacks '{key}': {v}");
    }
    assert_eq!(v["schema"], "restvolt.check/1");
    let iv = v["soc_interval_percent"].as_array().expect("[low, high]");
    assert_eq!(iv.len(), 2);
    let (lo, hi) = (iv[0].as_f64().unwrap(), iv[1].as_f64().unwrap());
    let soc = num(&v, "soc_percent");
    assert!(
        0.0 <= lo && lo <= soc && soc <= hi && hi <= 100.0,
        "[{lo}, {hi}] around {soc}"
    );
    // Derived: per-cell OCV is the unit OCV over 6 cells.
    assert!((num(&v, "ocv_25c_volts") / 6.0 - num(&v, "ocv_per_cell_25c_volts")).abs() < 1e-9);
    assert!(v["flags"].is_array() && v["reasons"].is_array() && v["cautions"].is_array());
    // Published: US Army TM 5-1185 Table III, SG 1.200 → −27 °C and 1.250 → −52 °C;
    // 75 % is SG 1.225 (REFERENCES §1.5), so the freezing point lies between (±3 °C).
    let fp = num(&v, "freezing_point_celsius");
    assert!(
        (-55.0..=-24.0).contains(&fp),
        "freezing point {fp} °C at 75 %"
    );
}

#[test]
fn cold_reading_reads_higher_soc_with_positive_correction() {
    // Derived: the cell OCV rises with temperature, dE/dT ≈ +0.22 ± 0.1 mV/K per cell
    // over 2–5 mol/kg (REFERENCES §1.3), so a cold unit reads low and the correction
    // to 25 °C is positive: 6 cells × 25 K × (0.12…0.32) mV/K = 18…48 mV.
    let at = |t: &str| {
        json(&[
            "check", "--volts", "12.40", "--temp", t, "--rest", "24h", "--format", "json",
        ])
    };
    let (cold, warm) = (at("0C"), at("25C"));
    assert!(
        num(&cold, "soc_percent") > num(&warm, "soc_percent"),
        "0 °C {} % should exceed 25 °C {} %",
        num(&cold, "soc_percent"),
        num(&warm, "soc_percent")
    );
    let corr = num(&cold, "temperature_correction_mv");
    assert!(
        (18.0..=48.0).contains(&corr),
        "correction at 0 °C: {corr} mV"
    );
    // The correction is added to the reading (doc of temperature_correction_mv).
    assert!((num(&cold, "ocv_25c_volts") - (12.40 + corr / 1000.0)).abs() < 1e-6);
}

#[test]
fn one_cell_low_is_a_suspect_shorted_cell() {
    // Published (several service manuals, REFERENCES §5): a 12 V block about one cell
    // (≈ 2.1 V) low reads like five cells; 10.55 V is 2.11 V per cell on five.
    let v = json(&[
        "check", "--volts", "10.55", "--temp", "25C", "--rest", "24h", "--format", "json",
    ]);
    assert!(
        flags(&v).contains(&"suspect-shorted-cell".to_string()),
        "{:?}",
        flags(&v)
    );
    assert_eq!(v["action"], "replace");
}

#[test]
fn a_fraction_of_a_volt_is_a_connection_fault() {
    // Common practice: 0.3 V on a 12 V block (0.05 V per cell) is no lead-acid
    // rest voltage at all: a lead is off or the probe has no contact.
    let v = json(&[
        "check", "--volts", "0.3", "--temp", "25C", "--rest", "24h", "--format", "json",
    ]);
    assert!(
        flags(&v).contains(&"check-connection".to_string()),
        "{:?}",
        flags(&v)
    );
    assert_eq!(v["action"], "remeasure");
}

/// A reading that says nothing of the charge (a shorted cell, a voltage no
/// cell count explains) shows no percentage that would read as a flat
/// battery, as the fleet report shows none; the freezing point is the flat
/// battery's, the safe assumption (common practice).
#[test]
fn a_reading_that_says_nothing_of_the_charge_shows_no_percentage() {
    let line = |text: &str, start: &str| {
        text.lines()
            .find(|l| l.starts_with(start))
            .unwrap_or("")
            .to_string()
    };
    // A shorted cell, a probe off the post, reversed leads, and a charger
    // still on (far above any rest voltage, which the curve clamps to full).
    let mut freezing = Vec::new();
    for volts in ["10.55", "0.3", "-12.6", "13.2"] {
        let r = run(&["check", "--volts", volts, "--temp", "25C", "--rest", "24h"]);
        assert_eq!(
            line(&r.stdout, "Charge "),
            "Charge  not known: this reading says nothing of it",
            "{volts} V:\n{}",
            r.stdout
        );
        freezing.push(line(&r.stdout, "Freezes near"));
    }
    // The freezing point given is the flat battery's, the same for all.
    assert!(
        freezing
            .iter()
            .all(|f| f.ends_with("°C if flat") && *f == freezing[0]),
        "{freezing:?}"
    );
    let r = run(&[
        "check", "--volts", "12.45", "--temp", "25C", "--rest", "24h",
    ]);
    assert!(
        line(&r.stdout, "Charge ").contains(" %  (95 %: ")
            && line(&r.stdout, "Freezes near").ends_with("at this charge"),
        "{}",
        r.stdout
    );
}

#[test]
fn short_rest_after_charge_asks_to_measure_again() {
    // Common practice: rest at least 4–6 h before an OCV reading (REFERENCES §4);
    // 40 min off the charger is too short and the surface charge reads high.
    let args = [
        "check", "--volts", "13.05", "--temp", "25C", "--rest", "40m", "--after", "charge",
    ];
    let mut j = args.to_vec();
    j.extend(["--format", "json"]);
    let v = json(&j);
    assert!(
        flags(&v).contains(&"short-rest".to_string()),
        "{:?}",
        flags(&v)
    );
    assert_eq!(v["action"], "remeasure");
    // The profile asks 4 h (REFERENCES §4): 3 h 20 min still to wait.
    let wait = v["rest"]["wait_hours"].as_f64().expect("wait_hours");
    assert!((wait - (4.0 - 40.0 / 60.0)).abs() < 1e-9, "wait {wait} h");
    // After a charge the true rested voltage can only be lower than the reading.
    assert!(v["rest"]["allowance_below_mv_per_cell"].as_f64().unwrap() > 0.0);
    assert_eq!(
        v["rest"]["allowance_above_mv_per_cell"].as_f64().unwrap(),
        0.0
    );
    let at = v["remeasure_at"].as_str().expect("remeasure_at");
    assert!(
        at.len() == 5 && at.as_bytes()[2] == b':',
        "remeasure_at '{at}' is not HH:MM"
    );

    let r = run(&args);
    assert_eq!(r.code, Some(0), "{}", r.stderr);
    assert!(r.stdout.contains("measure again at"), "{}", r.stdout);
}

#[test]
fn hydrometer_finds_the_low_cell() {
    // Published: IEEE Std 450-1987 §4.4, a cell more than 0.010 below the average is
    // low (REFERENCES §5); cell 4 reads 1.200 against about 1.265 for the others.
    let v = json(&[
        "check",
        "--sg",
        "1.265,1.262,1.268,1.200,1.264,1.266",
        "--temp",
        "50F",
        "--rest",
        "24h",
        "--format",
        "json",
    ]);
    assert!(
        flags(&v).contains(&"low-cell-sg".to_string()),
        "{:?}",
        flags(&v)
    );
    assert_eq!(v["sg"]["low_cells"], serde_json::json!([4]));
    // IEEE Std 450 practice (REFERENCES §2): −0.001 per 1.67 °C below 25 °C; 50 °F is
    // 10 °C, 15 K below, so 1.265 as read is about 1.256 at 25 °C.
    assert!((num(&v, "temperature_celsius") - 10.0).abs() < 1e-9);
    let first = v["sg"]["per_cell_25c"][0].as_f64().expect("per-cell SG");
    assert!((first - 1.256).abs() <= 0.001, "1.265 at 10 °C → {first}");
}

#[test]
fn temperature_needs_a_unit() {
    let r = run(&["check", "--volts", "12.40", "--temp", "25", "--rest", "24h"]);
    assert_eq!(r.code, Some(2), "bare --temp 25 must be a usage error");
    assert!(r.stderr.contains("--temp"), "{}", r.stderr);
    assert!(r.stderr.contains("no unit"), "{}", r.stderr);
    assert!(
        r.stderr.contains("25F") || r.stderr.contains("C or F"),
        "{}",
        r.stderr
    );

    // −4 °C as typed; 25 °F = (25 − 32) × 5/9 = −3.889 °C (definition of the scales).
    for (t, celsius) in [("-4C", -4.0), ("25F", -35.0 / 9.0)] {
        let v = json(&[
            "check", "--volts", "12.40", "--temp", t, "--rest", "24h", "--format", "json",
        ]);
        let got = num(&v, "temperature_celsius");
        assert!((got - celsius).abs() < 1e-9, "--temp {t} → {got} °C");
    }
}

#[test]
fn text_output_is_phone_sized_at_the_top() {
    let r = run(&[
        "check", "--volts", "12.45", "--temp", "25C", "--rest", "24h",
    ]);
    assert_eq!(r.code, Some(0), "{}", r.stderr);
    let widths: Vec<usize> = r.stdout.lines().map(|l| l.chars().count()).collect();
    let max = widths.iter().copied().max().unwrap_or(0);
    // The head fits a phone (60 columns); the free text below it (sources,
    // cautions, up to 265 characters as written) wraps at 80 off a terminal.
    assert!(max <= 80, "widest line {max} characters:\n{}", r.stdout);
    assert!(widths.len() >= 8, "{}", r.stdout);
    for (i, (line, w)) in r.stdout.lines().zip(&widths).take(8).enumerate() {
        assert!(*w <= 60, "line {} is {w} characters: '{line}'", i + 1);
    }
    // The head carries the answer: state of charge and its interval.
    assert!(
        r.stdout.lines().take(3).any(|l| l.starts_with("Charge ")),
        "{}",
        r.stdout
    );
}

/// The texts a `check` report must print, in print order, from its JSON: each
/// flag's detail, each reason's rule, detail and source, each caution's text.
fn report_phrases(v: &serde_json::Value) -> Vec<String> {
    let list = |key: &str| v[key].as_array().cloned().unwrap_or_default();
    let text = |x: &serde_json::Value| x.as_str().unwrap_or("").to_string();
    let mut out = Vec::new();
    for f in list("flags") {
        out.push(format!("{}: {}", text(&f["code"]), text(&f["detail"])));
    }
    for r in list("reasons") {
        out.push(format!(
            "{} ({}): {}",
            text(&r["rule"]),
            text(&r["action"]),
            text(&r["detail"])
        ));
        out.push(format!("source: {}", text(&r["source"])));
    }
    for c in list("cautions") {
        let id = text(&c);
        for k in restvolt::safety::Caution::ALL {
            if serde_json::to_value(k)
                .ok()
                .and_then(|x| x.as_str().map(String::from))
                == Some(id.clone())
            {
                let t = restvolt::safety::caution_text(k);
                out.push(format!("{}: {}", t.title, t.text));
            }
        }
    }
    out
}

/// Whether the words of every phrase appear in `text`, each phrase's words
/// together and the phrases in order, whatever the line breaks between them.
fn words_in_order(text: &str, phrases: &[String]) -> Result<(), String> {
    let words: Vec<&str> = text.split_whitespace().collect();
    let mut from = 0;
    for p in phrases {
        let want: Vec<&str> = p.split_whitespace().collect();
        let at = (from..=words.len().saturating_sub(want.len()))
            .find(|&i| words[i..].starts_with(&want))
            .ok_or_else(|| format!("'{p}' is not in the text (in order) after word {from}"))?;
        from = at + want.len();
    }
    Ok(())
}

/// The argument lists of a long-source `check` (sources of 104 and 159
/// characters, a 265-character caution) and of a long `check --float`.
const LONG_CASES: [&[&str]; 2] = [
    &["check", "--volts", "12.2", "--temp", "-5C", "--rest", "40m"],
    &[
        "check",
        "--volts",
        "14.2",
        "--float",
        "--profile",
        "agm",
        "--temp",
        "40C",
    ],
];

#[test]
fn long_sources_and_cautions_wrap_at_80_columns_under_their_bullet() {
    let args = LONG_CASES[0];
    let r = run(args);
    assert_eq!(r.code, Some(0), "{}", r.stderr);
    assert_fits_80_columns(&r.stdout);
    let mut json_args = args.to_vec();
    json_args.extend(["--format", "json"]);
    let v = json(&json_args);
    let phrases = report_phrases(&v);
    // The case is a long one: unwrapped, a source line would exceed 80 columns.
    assert!(
        phrases
            .iter()
            .any(|p| p.starts_with("source: ") && p.chars().count() + 4 > 80),
        "{phrases:?}"
    );
    assert!(
        phrases.iter().any(|p| p.chars().count() > 200),
        "{phrases:?}"
    );
    words_in_order(&r.stdout, &phrases).unwrap_or_else(|e| panic!("{e}:\n{}", r.stdout));
    // Continuation lines sit under their bullet's text: below "Cautions" every
    // line is a bullet "  ! " or indented four spaces, up to the meter line.
    let cautions: Vec<&str> = r
        .stdout
        .lines()
        .skip_while(|l| *l != "Cautions")
        .skip(1)
        .take_while(|l| !l.starts_with("Meter "))
        .collect();
    assert!(
        cautions.len() > v["cautions"].as_array().map_or(0, Vec::len),
        "{}",
        r.stdout
    );
    for l in &cautions {
        assert!(
            l.starts_with("  ! ") || l.starts_with("    ") && !l[4..].starts_with(' '),
            "'{l}'"
        );
    }
    // A wrapped source continues under "source:", two spaces in from it.
    let lines: Vec<&str> = r.stdout.lines().collect();
    let i = lines
        .iter()
        .position(|l| l.starts_with("    source: "))
        .expect("a source line");
    assert!(
        lines[i + 1].starts_with("      ") && !lines[i + 1][6..].starts_with(' '),
        "{}",
        r.stdout
    );
}

#[test]
fn float_check_text_wraps_at_80_columns_too() {
    let r = run(LONG_CASES[1]);
    assert_eq!(r.code, Some(0), "{}", r.stderr);
    assert_fits_80_columns(&r.stdout);
    let mut json_args = LONG_CASES[1].to_vec();
    json_args.extend(["--format", "json"]);
    let phrases = report_phrases(&json(&json_args));
    assert!(phrases.len() >= 4, "{phrases:?}");
    words_in_order(&r.stdout, &phrases).unwrap_or_else(|e| panic!("{e}:\n{}", r.stdout));
}

#[test]
fn on_a_terminal_the_text_wraps_to_its_width() {
    // `script` (util-linux, essential on Debian) runs the command on a
    // pseudo-terminal set to 50 columns; stdout is then a terminal.
    let args = LONG_CASES[0].join(" ");
    let cmd = format!(
        "stty cols 50 rows 40; {} {args}",
        env!("CARGO_BIN_EXE_restvolt")
    );
    let out = std::process::Command::new("script")
        .args(["-qec", &cmd, "/dev/null"])
        .env_remove("RESTVOLT_PROFILES")
        .env("NO_COLOR", "1")
        .output()
        .expect("script");
    assert!(out.status.success(), "{out:?}");
    // The terminal turns each \n into \r\n.
    let shown = String::from_utf8_lossy(&out.stdout).replace('\r', "");
    assert!(shown.contains("Cautions"), "{shown}");
    for l in shown.lines() {
        assert!(
            l.chars().count() <= 50,
            "{} characters: '{l}'",
            l.chars().count()
        );
    }
    // The same words as off the terminal, in the same order (the clock time
    // to measure again may have moved on by a minute between the two runs).
    let piped = run(LONG_CASES[0]);
    let words = |t: &str| -> Vec<String> {
        t.split_whitespace()
            .filter(|w| !(w.len() == 5 && w.as_bytes()[2] == b':'))
            .map(String::from)
            .collect()
    };
    assert_eq!(words(&shown), words(&piped.stdout), "{shown}");
}
