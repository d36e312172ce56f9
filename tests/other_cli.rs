//! `profiles`, `rules`, `ventilation`, `settle` and `completions` through the real binary.

mod common;
use common::{assert_fits_80_columns, fixture, json, num, repo, restvolt, run, run_in, tmp};

const SHIPPED_IDS: [&str; 7] = [
    "agm",
    "efb",
    "flooded-automotive",
    "flooded-deep-cycle",
    "flooded-stationary",
    "flooded-tropical",
    "gel",
];

#[test]
fn profiles_list_shows_every_shipped_profile() {
    let r = run(&["profiles", "list"]);
    assert_eq!(r.code, Some(0), "{}", r.stderr);
    let ids: Vec<&str> = r
        .stdout
        .lines()
        .skip(1)
        .filter_map(|l| l.split_whitespace().next())
        .collect();
    for id in SHIPPED_IDS {
        assert!(ids.contains(&id), "'{id}' missing from\n{}", r.stdout);
    }
    // One file in profiles/ per listed id.
    assert_eq!(ids.len(), SHIPPED_IDS.len(), "{}", r.stdout);
    for id in SHIPPED_IDS {
        assert!(repo(&format!("profiles/{id}.toml")).exists(), "{id}");
    }
}

#[test]
fn user_profile_directory_adds_a_profile() {
    let d = tmp();
    std::fs::copy(
        fixture("valid-profile.toml"),
        d.path().join("site-agm.toml"),
    )
    .unwrap();
    let dir = d.path().to_str().unwrap();
    let r = run(&["profiles", "list", "--profiles", dir]);
    assert_eq!(r.code, Some(0), "{}", r.stderr);
    assert!(r.stdout.contains("site-agm"), "{}", r.stdout);
    // The environment variable names the same directory (RESTVOLT_PROFILES).
    let out = restvolt()
        .env("RESTVOLT_PROFILES", dir)
        .args(["profiles", "list"])
        .output()
        .unwrap();
    assert!(out.status.success());
    assert!(String::from_utf8_lossy(&out.stdout).contains("site-agm"));
}

#[test]
fn profiles_show_agm_json_has_eleven_curve_points() {
    let v = json(&["profiles", "show", "agm", "--format", "json"]);
    let s = v["curve_samples"].as_array().expect("curve_samples");
    assert_eq!(s.len(), 11, "0, 10, …, 100 %");
    for (i, p) in s.iter().enumerate() {
        assert_eq!(num(p, "soc_percent"), i as f64 * 10.0);
        assert!((num(p, "unit_volts_25c") - 6.0 * num(p, "volts_per_cell_25c")).abs() < 1e-9);
    }
    for w in s.windows(2) {
        assert!(
            num(&w[1], "unit_volts_25c") > num(&w[0], "unit_volts_25c"),
            "curve must rise"
        );
    }
    // Published: US Army TM 9-6115-730-24, a fully charged AGM block reads 12.8–13.0 V
    // at rest (REFERENCES §4).
    let full = num(&s[10], "unit_volts_25c");
    assert!((12.8..=13.0).contains(&full), "AGM full {full} V");
}

#[test]
fn profiles_show_flooded_automotive_cold() {
    let r = run(&["profiles", "show", "flooded-automotive", "--temp", "-10C"]);
    assert_eq!(r.code, Some(0), "{}", r.stderr);
    assert!(r.stdout.contains("-10.0°C"), "{}", r.stdout);
    let v = json(&[
        "profiles",
        "show",
        "flooded-automotive",
        "--temp",
        "-10C",
        "--format",
        "json",
    ]);
    assert_eq!(num(&v, "temperature_celsius"), -10.0);
    let full = &v["curve_samples"][10];
    // Common practice: the 12 V flooded table reads 12.65 V at 100 % and 25 °C; a derived
    // profile must reproduce it within ±0.03 V (REFERENCES §1.5).
    let at25 = num(full, "unit_volts_25c");
    assert!(
        (at25 - 12.65).abs() <= 0.03,
        "full charge at 25 °C: {at25} V"
    );
    // Derived: dE/dT ≈ +0.22 ± 0.1 mV/K per cell (REFERENCES §1.3): at −10 °C the
    // full block reads 6 × 35 K × (0.12…0.32) mV/K = 25…67 mV lower.
    let drop_mv = (at25 - num(full, "unit_volts_at_temperature")) * 1000.0;
    assert!(
        (25.0..=67.0).contains(&drop_mv),
        "drop {drop_mv} mV from 25 to −10 °C"
    );
}

#[test]
fn profiles_check_accepts_a_shipped_copy_and_names_the_broken_key() {
    let ok = fixture("valid-profile.toml");
    let r = run(&["profiles", "check", ok.to_str().unwrap()]);
    assert_eq!(r.code, Some(0), "{}", r.stderr);
    assert!(
        r.stdout.contains("is valid") && r.stdout.contains("site-agm"),
        "{}",
        r.stdout
    );

    let bad = fixture("profile-unknown-key.toml");
    let r = run(&["profiles", "check", bad.to_str().unwrap()]);
    assert_eq!(r.code, Some(1), "{}", r.stderr);
    // The file, the line (23: the added key under [rest]) and the key.
    assert!(
        r.stderr.contains("profile-unknown-key.toml:23"),
        "{}",
        r.stderr
    );
    assert!(r.stderr.contains("soak_hours"), "{}", r.stderr);
    assert!(
        r.stderr.contains("minimum_hours"),
        "should list the expected keys: {}",
        r.stderr
    );
}

#[test]
fn unknown_profile_id_suggests_the_nearest() {
    for args in [
        vec!["profiles", "show", "agn"],
        vec!["check", "--volts", "12.4", "--profile", "flooded-automotve"],
    ] {
        let r = run(&args);
        assert_eq!(r.code, Some(2), "{args:?}: {}", r.stderr);
        assert!(r.stderr.contains("did you mean"), "{}", r.stderr);
    }
    let r = run(&["profiles", "show", "agn"]);
    assert!(r.stderr.contains("'agm'"), "{}", r.stderr);
}

#[test]
fn rules_text_and_json_agree() {
    let v = json(&["rules", "--format", "json"]);
    assert_eq!(v["schema"], "restvolt.rules/1");
    let rows = v["rules"].as_array().expect("rules");
    assert!(!rows.is_empty());
    let text = run(&["rules"]);
    assert_eq!(text.code, Some(0), "{}", text.stderr);
    for row in rows {
        let id = row["id"].as_str().unwrap();
        assert!(
            text.stdout.contains(&format!("{id} = ")),
            "{id} missing from the text"
        );
        assert!(
            !row["source"].as_str().unwrap().is_empty(),
            "{id} has no source"
        );
        assert_eq!(row["overridden"], false);
    }
    let get = |id: &str| {
        rows.iter()
            .find(|r| r["id"] == id)
            .unwrap_or_else(|| panic!("rule {id}"))
            .clone()
    };
    // Published: US Army TM 9-6140-200-14 §4-7, spread over 0.025 (REFERENCES §5).
    assert_eq!(num(&get("sg-spread"), "value"), 0.025);
    // Published: IEEE Std 450-1987 §4.4, more than 0.010 below average (REFERENCES §5).
    assert_eq!(num(&get("sg-cell-below-mean"), "value"), 0.010);
}

#[test]
fn rules_override_changes_the_value_and_the_verdict() {
    let f = fixture("rules-override.toml");
    let f = f.to_str().unwrap();
    let v = json(&["rules", "--rules", f, "--format", "json"]);
    let row = v["rules"]
        .as_array()
        .unwrap()
        .iter()
        .find(|r| r["id"] == "sg-spread")
        .unwrap()
        .clone();
    assert_eq!(num(&row, "value"), 0.030);
    assert_eq!(num(&row, "default"), 0.025);
    assert_eq!(row["overridden"], true);

    // A spread of 0.028 (1.268 − 1.240) is too wide by the default 0.025 and
    // acceptable by the site's 0.030 (the 0.030–0.050 of other manuals, REFERENCES §5).
    let sg = "1.265,1.262,1.268,1.240,1.264,1.266";
    let base = [
        "check", "--sg", sg, "--temp", "25C", "--rest", "24h", "--format", "json",
    ];
    let has_spread = |v: &serde_json::Value| common::flags(v).contains(&"sg-spread".to_string());
    assert!(has_spread(&json(&base)));
    let mut with = base.to_vec();
    with.extend(["--rules", f]);
    assert!(!has_spread(&json(&with)));
}

#[test]
fn ventilation_follows_iec_62485_2() {
    // Published: IEC 62485-2:2010 (REFERENCES §6): Q = 0.05 · n · I_gas · C_rt · 10⁻³ m³/h
    // with I_gas = 20 mA/Ah for vented cells on boost:
    // 0.05 × 24 × 20 × 200 × 10⁻³ = 4.8 m³/h; natural-ventilation opening A = 28 · Q
    // = 28 × 4.8 = 134.4 cm².
    let v = json(&[
        "ventilation",
        "--cells",
        "24",
        "--capacity-ah",
        "200",
        "--type",
        "vented",
        "--mode",
        "boost",
        "--format",
        "json",
    ]);
    assert!((num(&v, "airflow_m3_per_h") - 4.8).abs() < 1e-9, "{v}");
    assert!((num(&v, "opening_area_cm2") - 134.4).abs() < 1e-9, "{v}");
    assert_eq!(num(&v, "gas_current_ma_per_ah"), 20.0);
    // Same standard, VRLA on float: 1 mA/Ah → 0.05 × 240 × 1 × 100 × 10⁻³ = 1.2 m³/h.
    let v = json(&[
        "ventilation",
        "--cells",
        "240",
        "--capacity-ah",
        "100",
        "--type",
        "vrla",
        "--mode",
        "float",
        "--format",
        "json",
    ]);
    assert!((num(&v, "airflow_m3_per_h") - 1.2).abs() < 1e-9, "{v}");
}

#[test]
fn settle_demo_series() {
    let csv = repo("demo-data/rest-series.csv");
    let v = json(&[
        "settle",
        csv.to_str().unwrap(),
        "--after",
        "charge",
        "--format",
        "json",
    ]);
    for key in [
        "rested_volts",
        "rested_interval_volts",
        "model",
        "settling_rate_mv_per_h",
        "settled",
        "soc_percent",
        "soc_interval_percent",
    ] {
        assert!(v.get(key).is_some(), "settle JSON lacks '{key}': {v}");
    }
    let rested = num(&v, "rested_volts");
    let iv = &v["rested_interval_volts"];
    let (lo, hi) = (iv[0].as_f64().unwrap(), iv[1].as_f64().unwrap());
    assert!(lo < rested && rested < hi, "[{lo}, {hi}] around {rested}");
    // After a charge the voltage falls (REFERENCES §4): the rested value is below the
    // last reading, 12.733 V at 240 min.
    assert!(rested < 12.733, "rested {rested} V");
    assert!(["semi-log", "exponential"].contains(&v["model"].as_str().unwrap()));
    // Arithmetic on the data: the last two readings fall 35 mV in one hour
    // (12.768 → 12.733 V, 180 → 240 min), far above the 1 mV/h steady limit
    // (common practice, REFERENCES §4), so the rest is not over.
    assert!((num(&v, "finite_difference_rate_mv_per_h") + 35.0).abs() < 1e-6);
    assert_eq!(v["settled"], false);
    assert!(num(&v, "settling_rate_mv_per_h") < -1.0);
    let s = &v["soc_interval_percent"];
    let soc = num(&v, "soc_percent");
    assert!(s[0].as_f64().unwrap() <= soc && soc <= s[1].as_f64().unwrap());
    // The file's temperature column (18.5 °C) is used when --temp is absent.
    assert_eq!(num(&v, "temperature_celsius"), 18.5);
}

#[test]
fn settle_refuses_two_readings() {
    let r = run(&[
        "settle",
        "--reading",
        "20m=12.93",
        "--reading",
        "40m=12.85",
        "--after",
        "charge",
    ]);
    assert_ne!(r.code, Some(0));
    assert!(r.stderr.contains("at least three"), "{}", r.stderr);
    assert!(r.stdout.is_empty(), "no report on refusal: {}", r.stdout);
}

/// With four readings AICc is undefined for both forms (n ≤ k + 1: Hurvich &
/// Tsai 1989's correction divides by n − k − 1), so the text must not claim a
/// choice by the lower AICc; the semi-log form, with fewer parameters, is taken.
/// The text also fits 80 columns (standard output is not a terminal here).
#[test]
fn settle_text_says_why_a_fit_was_chosen_and_fits_80_columns() {
    let r = run(&[
        "settle",
        "--reading",
        "5m=12.95",
        "--reading",
        "15m=12.90",
        "--reading",
        "30m=12.87",
        "--reading",
        "60m=12.85",
        "--after",
        "charge",
    ]);
    assert_eq!(r.code, Some(0), "{}", r.stderr);
    assert!(!r.stdout.contains("lower AICc"), "{}", r.stdout);
    assert!(
        r.stdout
            .contains("chosen for fewer parameters: AICc (-) is undefined with 4 readings"),
        "{}",
        r.stdout
    );
    let chosen: Vec<&str> = r
        .stdout
        .lines()
        .filter(|l| l.ends_with("  chosen"))
        .collect();
    assert!(
        chosen.len() == 1 && chosen[0].trim_start().starts_with("semi-log"),
        "{}",
        r.stdout
    );
    assert_fits_80_columns(&r.stdout);

    // The demo series has enough readings, and its exponential fit's AICc is lower.
    let csv = repo("demo-data/rest-series.csv");
    let r = run(&[
        "settle",
        csv.to_str().unwrap(),
        "--after",
        "charge",
        "--profile",
        "agm",
    ]);
    assert_eq!(r.code, Some(0), "{}", r.stderr);
    assert!(
        r.stdout.contains("chosen by the lower AICc"),
        "{}",
        r.stdout
    );
    assert_fits_80_columns(&r.stdout);
}

/// calibrate's text report keeps to 80 columns off a terminal: its long
/// sentences (the fit, the residual SD, the tolerance) wrap under their own
/// indent, and the tables of numbers are left as they are.
#[test]
fn calibrate_text_fits_80_columns() {
    let d = tmp();
    let input = fixture("calibrate-points.csv");
    let r = run_in(
        d.path(),
        &[
            "calibrate",
            input.to_str().unwrap(),
            "--id",
            "site-x",
            "--from",
            "agm",
            "-o",
            "site-x.toml",
        ],
    );
    assert_eq!(r.code, Some(0), "{}", r.stderr);
    assert!(r.stdout.contains("Tolerance written:"), "{}", r.stdout);
    assert_fits_80_columns(&r.stdout);
    // A residual row keeps its column spacing.
    assert!(r.stdout.contains("  line    2   20.00 %"), "{}", r.stdout);
}

#[test]
fn completions_and_man_page() {
    let r = run(&["completions", "bash"]);
    assert_eq!(r.code, Some(0), "{}", r.stderr);
    assert!(
        r.stdout.contains("restvolt") && r.stdout.contains("complete"),
        "bash completions"
    );
    assert!(r.stdout.contains("--volts"), "completions know the options");
    let r = run(&["completions", "man"]);
    assert_eq!(r.code, Some(0), "{}", r.stderr);
    assert!(r.stdout.contains(".TH restvolt 1"), "roff man page");
    for shell in ["zsh", "fish", "powershell", "elvish"] {
        let r = run(&["completions", shell]);
        assert_eq!(r.code, Some(0), "{shell}: {}", r.stderr);
        assert!(!r.stdout.is_empty(), "{shell}");
    }
}

#[test]
fn every_subcommand_help_has_an_example() {
    let d = tmp();
    for cmd in [
        vec!["check"],
        vec!["settle"],
        vec!["profiles"],
        vec!["profiles", "list"],
        vec!["profiles", "show"],
        vec!["profiles", "check"],
        vec!["rules"],
        vec!["ventilation"],
        vec!["completions"],
    ] {
        let mut args = cmd.clone();
        args.push("--help");
        let r = run_in(d.path(), &args);
        assert_eq!(r.code, Some(0), "{args:?}: {}", r.stderr);
        assert!(
            r.stdout.contains("Example"),
            "{cmd:?} --help has no example:\n{}",
            r.stdout
        );
    }
}
