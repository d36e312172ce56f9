#![allow(clippy::unwrap_used)]
//! Standby strings on float through the whole fleet command: the invented
//! fixture tests/fixtures/float-string.csv (readings invented; the limits they
//! are judged by are the published or labelled values named beside each check).
//!
//! - `Fixture UPS room / UPS-1`: twelve 2 V VRLA (AGM) cells on float at two
//!   visits, the charger holding 27.24 V (2.270 V per cell) both times. At the
//!   second visit cell U1-C05 floats at 2.200 V (low), cell U1-C09 is at 35 °C
//!   in a 23 °C room (hot), and the string current has risen from 0.20 A to
//!   0.45 A at the same string voltage.
//! - `Fixture battery room / VLA-1`: six vented lead-calcium cells read once on
//!   float at 25 °C; cell V1-C04 floats at 2.120 V, below the 2.13 V minimum.

mod common;
use common::{fixture, repo, run};
use serde_json::Value;
use std::collections::BTreeSet;

fn fleet_json(path: &std::path::Path) -> Value {
    let p = path.to_str().unwrap();
    let r = run(&["fleet", "--format", "json", p]);
    assert_eq!(r.code, Some(0), "every row is valid:\n{}", r.stderr);
    serde_json::from_str(&r.stdout).unwrap()
}

fn float_fixture() -> Value {
    fleet_json(&fixture("float-string.csv"))
}

fn string<'a>(v: &'a Value, name: &str) -> &'a Value {
    v["float_strings"]
        .as_array()
        .unwrap()
        .iter()
        .find(|s| s["string"] == name)
        .unwrap_or_else(|| panic!("no float string {name}"))
}

/// (code, rule id) of every flag in a list.
fn flags(list: &Value) -> BTreeSet<(String, String)> {
    list.as_array()
        .unwrap()
        .iter()
        .map(|f| {
            (
                f["code"].as_str().unwrap().to_string(),
                f["rule"].as_str().unwrap().to_string(),
            )
        })
        .collect()
}

fn set(items: &[(&str, &str)]) -> BTreeSet<(String, String)> {
    items
        .iter()
        .map(|(a, b)| (a.to_string(), b.to_string()))
        .collect()
}

/// Every unit of a string with a flag: unit id → its (code, rule) set.
fn flagged_units(s: &Value) -> Vec<(String, BTreeSet<(String, String)>)> {
    s["per_unit"]
        .as_array()
        .unwrap()
        .iter()
        .map(|c| {
            (
                c["unit_id"].as_str().unwrap().to_string(),
                flags(&c["flags"]),
            )
        })
        .filter(|(_, f)| !f.is_empty())
        .collect()
}

fn source_of<'a>(list: &'a Value, code: &str) -> &'a str {
    list.as_array()
        .unwrap()
        .iter()
        .find(|f| f["code"] == code)
        .unwrap_or_else(|| panic!("no {code}"))["source"]
        .as_str()
        .unwrap()
}

fn per_unit<'a>(s: &'a Value, id: &str) -> &'a Value {
    s["per_unit"]
        .as_array()
        .unwrap()
        .iter()
        .find(|c| c["unit_id"] == id)
        .unwrap()
}

#[test]
fn the_fixture_strings_are_grouped_with_average_and_spread() {
    let v = float_fixture();
    let names: Vec<&str> = v["float_strings"]
        .as_array()
        .unwrap()
        .iter()
        .map(|s| s["string"].as_str().unwrap())
        .collect();
    // Grouped by (site, string, profile), in byte order of the names.
    assert_eq!(
        names,
        ["Fixture UPS room / UPS-1", "Fixture battery room / VLA-1"]
    );
    let ups = string(&v, "Fixture UPS room / UPS-1");
    assert_eq!(ups["units"], 12);
    // Arithmetic on the fixture: 27.24 V over 12 cells = 2.270 V per cell;
    // 2.279 − 2.200 = 0.079 V spread; 35.0 − 24.0 = 11.0 K.
    assert!((ups["average_volts_per_cell"].as_f64().unwrap() - 2.270).abs() < 1e-9);
    assert!((ups["spread_volts_per_cell"].as_f64().unwrap() - 0.079).abs() < 1e-9);
    assert!((ups["temperature_spread_c"].as_f64().unwrap() - 11.0).abs() < 1e-9);
    assert_eq!(ups["float_current_amperes"], 0.45);
    let vla = string(&v, "Fixture battery room / VLA-1");
    assert_eq!(vla["units"], 6);
}

#[test]
fn the_low_cell_the_hot_cell_and_the_rising_current_raise_exactly_their_flags() {
    let v = float_fixture();
    let ups = string(&v, "Fixture UPS room / UPS-1");

    // Only the low cell and the hot cell carry unit flags; the ten healthy
    // cells (2.278–2.279 V per cell at 24–25 °C) carry none.
    let units = flagged_units(ups);
    assert_eq!(
        units,
        [
            (
                "U1-C05".to_string(),
                // 2.200 V per cell: below the AGM profile's float window, which
                // is 2.25–2.30 V per cell at 25 °C (profile, "from memory"),
                // compensated −3 mV/K/cell to 24.4 °C (common practice): 2.252 V;
                // and 0.070 V below the string average 2.270 V, more than the
                // 0.04 V per cell of US Bureau of Reclamation FIST 3-6 §1.2C (published).
                set(&[
                    ("float-deviation", "float-deviation"),
                    ("float-low", "float-window")
                ])
            ),
            (
                "U1-C09".to_string(),
                // 35.0 °C in a 23.0 °C room is 12 K above ambient, more than the
                // rules table's vrla-over-ambient 10 °C (source in the table:
                // "published: VRLA makers' manuals (REFERENCES §5)").
                set(&[("thermal-runaway-risk", "vrla-over-ambient")])
            ),
        ]
    );
    let c05 = per_unit(ups, "U1-C05");
    assert!(source_of(&c05["flags"], "float-deviation").contains("FIST 3-6"));
    let c09 = per_unit(ups, "U1-C09");
    assert!(source_of(&c09["flags"], "thermal-runaway-risk").contains("VRLA makers' manuals"));
    // The hot cell is replaced, with the thermal-runaway caution.
    assert_eq!(c09["action"], "replace");
    assert!(c09["cautions"]
        .as_array()
        .unwrap()
        .contains(&Value::from("thermal-runaway")));

    // String level: 0.20 A → 0.45 A is a 125 % rise at the same string voltage
    // (27.24 V both visits), above the rules table's float-current-rise 50 %
    // (source in the table: VRLA makers' manuals, REFERENCES §5, published; the
    // percentage common practice). The hot cell's 11 K also spreads the string's
    // temperatures past FIST 3-6 §1.5's 3 °C (published): a hot cell cannot sit
    // 12 K above the room without standing more than 3 K above its neighbours,
    // so temp-spread is part of that one fault, not a further one.
    assert_eq!(
        flags(&ups["flags"]),
        set(&[
            ("temp-spread", "temp-spread"),
            ("thermal-runaway-risk", "float-current-rise")
        ])
    );
    assert!(source_of(&ups["flags"], "temp-spread").contains("FIST 3-6"));
    assert!(source_of(&ups["flags"], "thermal-runaway-risk").contains("VRLA makers' manuals"));
    assert!(ups["cautions"]
        .as_array()
        .unwrap()
        .contains(&Value::from("thermal-runaway")));

    // The vented lead-calcium string: 2.120 V per cell at 25 °C is below the
    // 2.13 V per cell minimum float of IEEE Std 450-1987 (published), and
    // 0.092 V below its string average 2.212 V (FIST 3-6 §1.2C, 0.04 V).
    // Nothing else: the temperatures are equal (no spread), the type is vented
    // (no over-ambient rule) and one visit gives no rise.
    let vla = string(&v, "Fixture battery room / VLA-1");
    assert_eq!(
        flagged_units(vla),
        [(
            "V1-C04".to_string(),
            set(&[
                ("float-deviation", "float-deviation"),
                ("float-low", "float-minimum")
            ])
        )]
    );
    assert!(source_of(&per_unit(vla, "V1-C04")["flags"], "float-low").contains("IEEE Std 450"));
    assert!(flags(&vla["flags"]).is_empty());
}

#[test]
fn without_the_rising_current_the_string_raises_no_runaway_flag() {
    // The same fixture with the second visit's current back at the first's:
    // the string-level thermal-runaway flag must go, the hot cell's stay. So
    // the rise, and nothing else, raises the string flag.
    let text = std::fs::read_to_string(fixture("float-string.csv"))
        .unwrap()
        .replace(",float,0.45,", ",float,0.20,");
    let dir = common::tmp();
    let path = dir.path().join("steady.csv");
    std::fs::write(&path, text).unwrap();
    let v = fleet_json(&path);
    let ups = string(&v, "Fixture UPS room / UPS-1");
    assert_eq!(flags(&ups["flags"]), set(&[("temp-spread", "temp-spread")]));
    assert_eq!(
        flags(&per_unit(ups, "U1-C09")["flags"]),
        set(&[("thermal-runaway-risk", "vrla-over-ambient")])
    );
}

#[test]
fn no_float_reading_becomes_a_state_of_charge() {
    let v = float_fixture();
    let units = v["units"].as_array().unwrap();
    assert_eq!(units.len(), 18);
    for u in units {
        let id = u["unit_id"].as_str().unwrap();
        // A float voltage is held up by the charger, not by the electrolyte
        // (common practice): nothing derived from it is a state of charge.
        for key in [
            "soc_percent",
            "soc_interval_percent",
            "ocv_per_cell_25c_volts",
            "freezing_point_celsius",
            "trend_percent_per_30_days",
        ] {
            assert!(u[key].is_null(), "{id}: {key} = {}", u[key]);
        }
        assert_eq!(u["flags"], serde_json::json!(["on-float"]), "{id}");
    }
    for s in v["float_strings"].as_array().unwrap() {
        let note = s["state_of_charge_note"].as_str().unwrap();
        assert!(
            note.starts_with("State of charge cannot be read from float voltage"),
            "{note}"
        );
        // No capacity column in the fleet input, so "fully charged on float"
        // cannot be shown; the note names units to rest-test instead.
        assert!(s["fully_charged_on_float"].is_null());
        let rest: Vec<&str> = s["rest_test_units"]
            .as_array()
            .unwrap()
            .iter()
            .map(|u| u.as_str().unwrap())
            .collect();
        assert!(!rest.is_empty());
        for id in &rest {
            assert!(note.contains(id), "{id} not in: {note}");
        }
        for c in s["per_unit"].as_array().unwrap() {
            let keys: Vec<&String> = c.as_object().unwrap().keys().collect();
            assert!(
                !keys.iter().any(|k| k.contains("soc")),
                "a per-unit float check carries a state of charge: {keys:?}"
            );
        }
    }
    // The low cells are among those to rest-test; the hot one is replaced, not tested.
    let ups = string(&v, "Fixture UPS room / UPS-1");
    let rest = ups["rest_test_units"].as_array().unwrap();
    assert!(rest.contains(&Value::from("U1-C05")));
    assert!(!rest.contains(&Value::from("U1-C09")));
}

#[test]
fn every_human_format_shows_the_float_section() {
    let path = fixture("float-string.csv");
    let p = path.to_str().unwrap();
    for (fmt, heading) in [
        ("table", "STRINGS ON FLOAT"),
        ("markdown", "## Strings on float"),
        ("html", "<section id=\"float\">"),
    ] {
        let r = run(&["fleet", "--format", fmt, p]);
        assert_eq!(r.code, Some(0), "{fmt}");
        let at = r.stdout.find(heading).unwrap_or_else(|| panic!("{fmt}"));
        let section = &r.stdout[at..];
        for want in [
            "U1-C05",
            "U1-C09",
            "V1-C04",
            "float-low",
            "float-deviation",
            "thermal-runaway-risk",
            "temp-spread",
            "IEEE Std 450-1987",
            "FIST 3-6",
            "cannot be read from float voltage",
        ] {
            assert!(section.contains(want), "{fmt}: {want}");
        }
    }
}

#[test]
fn the_demo_fleet_has_a_float_string_with_one_low_block() {
    // demo-data/README.md: HL-B3 at Hollin Lane sinks on float (invented).
    let r = run(&[
        "fleet",
        "--format",
        "json",
        repo("demo-data/fleet.csv").to_str().unwrap(),
    ]);
    assert_eq!(r.code, Some(3), "two rows are bad on purpose");
    let v: Value = serde_json::from_str(&r.stdout).unwrap();
    let hl = string(&v, "Hollin Lane exchange / HL-1");
    // 13.20 V over 6 cells = 2.200 V per cell, 0.070 V below the 2.270 V
    // average: FIST 3-6 §1.2C's 0.04 V (published); below the AGM window at
    // 20.3 °C, 2.264 V per cell (profile, from memory, compensated −3 mV/K).
    assert_eq!(
        flagged_units(hl),
        [(
            "HL-B3".to_string(),
            set(&[
                ("float-deviation", "float-deviation"),
                ("float-low", "float-window")
            ])
        )]
    );
    // The current holds at 0.10 A: no rise, no string flag.
    assert!(flags(&hl["flags"]).is_empty());
    let r = run(&["demo"]);
    assert!(r.stdout.contains("STRINGS ON FLOAT") && r.stdout.contains("HL-B3"));
}

#[test]
fn the_float_section_of_a_profile_never_touches_a_rest_voltage() {
    // Three profiles identical but for [float]: the built-in agm, one whose
    // float compensation is −10 mV/K/cell with a wide window, and one with no
    // [float] at all. A rested reading at 5 °C must give the same state of
    // charge and the same temperature correction with each.
    let agm = std::fs::read_to_string(repo("profiles/agm.toml")).unwrap();
    let d = common::tmp();
    let wild = agm
        .replacen("id = \"agm\"", "id = \"agm-wild-float\"", 1)
        .replace(
            "compensation_mv_per_k_per_cell = { value = -3.0",
            "compensation_mv_per_k_per_cell = { value = -10.0",
        )
        .replace(
            "window_low_volts_per_cell = { value = 2.25",
            "window_low_volts_per_cell = { value = 2.0",
        );
    assert_ne!(
        wild,
        agm.replacen("id = \"agm\"", "id = \"agm-wild-float\"", 1)
    );
    let at = agm.find("[float]").unwrap();
    let end = agm[at + 1..]
        .find("\n[")
        .map_or(agm.len(), |i| at + 1 + i + 1);
    let none = format!("{}{}", &agm[..at], &agm[end..]).replacen(
        "id = \"agm\"",
        "id = \"agm-no-float\"",
        1,
    );
    assert!(!none.contains("[float]"));
    std::fs::write(d.path().join("agm-wild-float.toml"), wild).unwrap();
    std::fs::write(d.path().join("agm-no-float.toml"), none).unwrap();
    let dir = d.path().to_str().unwrap();
    let check = |id: &str| {
        common::json(&[
            "check",
            "--volts",
            "12.70",
            "--temp",
            "5C",
            "--rest",
            "24h",
            "--after",
            "charge",
            "--profile",
            id,
            "--profiles",
            dir,
            "--format",
            "json",
        ])
    };
    let base = check("agm");
    for id in ["agm-wild-float", "agm-no-float"] {
        let v = check(id);
        for key in [
            "soc_percent",
            "soc_interval_percent",
            "ocv_25c_volts",
            "temperature_correction_mv",
            "action",
        ] {
            assert_eq!(v[key], base[key], "{id}: {key}");
        }
    }
    // REFERENCES §1.3 (derived): the open-circuit coefficient is a few tenths
    // of a mV/K per cell, so 20 K on 6 cells corrects by well under 60 mV; the
    // −3 mV/K/cell float compensation would give 360 mV.
    let corr = common::num(&base, "temperature_correction_mv").abs();
    assert!(corr < 60.0, "{corr} mV");
}
