#![allow(clippy::unwrap_used)]
//! The fleet command on a fixture fleet with known injected faults
//! (demo-data/fleet.csv; its README lists the faults).

mod common;
use common::{repo, restvolt, tmp};
use serde_json::Value;

fn fleet_json() -> (Value, i32) {
    let out = restvolt()
        .args(["fleet", "--format", "json"])
        .arg(repo("demo-data/fleet.csv"))
        .output()
        .unwrap();
    assert!(!String::from_utf8_lossy(&out.stderr).contains("panicked"));
    (
        serde_json::from_slice(&out.stdout).unwrap(),
        out.status.code().unwrap(),
    )
}

fn unit<'a>(v: &'a Value, id: &str) -> &'a Value {
    v["units"]
        .as_array()
        .unwrap()
        .iter()
        .find(|u| u["unit_id"] == id)
        .unwrap()
}

fn flags(u: &Value) -> Vec<String> {
    u["flags"]
        .as_array()
        .unwrap()
        .iter()
        .map(|f| f.as_str().unwrap().to_string())
        .collect()
}

#[test]
fn injected_faults_are_flagged_with_the_expected_action() {
    let (v, code) = fleet_json();
    assert_eq!(code, 3, "two rows are bad on purpose: exit 3");
    for (id, flag, action) in [
        ("TD-V07", "suspect-shorted-cell", "replace"),
        ("TD-V03", "sulfation-risk", "recharge-now"),
        ("TD-V05", "short-rest", "remeasure"),
        ("CH-B3", "check-connection", "remeasure"),
        // Six rested readings falling about 17 % per 30 days, against the
        // profile's 3 % self-discharge: faster than twice that with 95 %
        // confidence (Student's t on the least-squares slope).
        ("TD-V03", "fast-decline", "recharge-now"),
        ("FM-C07", "low-cell-sg", "recharge-now"),
        ("TD-V09", "post-charge-shortfall", "recharge-now"),
        ("CH-A2", "peer-outlier", "recharge-now"),
        ("TD-V03", "freeze-risk", "recharge-now"),
        ("CH-A4", "ohmic-rise", "capacity-test"),
        // On float: below the AGM window and 0.070 V per cell under its
        // string (FIST 3-6 §1.2C, 0.04 V, published); AGM is not equalized.
        ("HL-B3", "float-low", "capacity-test"),
        ("HL-B3", "float-deviation", "capacity-test"),
    ] {
        let u = unit(&v, id);
        assert!(flags(u).contains(&flag.to_string()), "{id}: {:?}", flags(u));
        assert_eq!(u["action"], action, "{id}");
        if id == "TD-V03" {
            // Deeply discharged: the estimate is well below the profile's urgent threshold.
            assert!(u["soc_percent"].as_f64().unwrap() < 20.0);
        }
        if id == "TD-V07" {
            // One cell short: the reading gives no charge of the whole block,
            // so none is shown (a 0 % would read as a flat battery); the
            // flag's detail gives the five good cells' charge.
            assert!(u["soc_percent"].is_null(), "{id}");
            assert!(u["soc_interval_percent"].is_null(), "{id}");
            let detail = u["reasons"][0]["detail"].as_str().unwrap();
            assert!(detail.contains("fits 5 cells at"), "{detail}");
        }
        if id == "CH-B3" {
            // 0.31 V across a 12 V block: the probe, not the battery; no
            // charge is shown for it either.
            assert!(u["soc_percent"].is_null(), "{id}");
        }
        for r in u["reasons"].as_array().unwrap() {
            assert!(
                !r["source"].as_str().unwrap().is_empty(),
                "{id}: a reason without a source"
            );
        }
    }
}

#[test]
fn healthy_units_raise_nothing() {
    let (v, _) = fleet_json();
    for id in ["TD-V01", "TD-V02", "CH-A1", "CH-B1", "FM-C01", "FM-C03"] {
        let u = unit(&v, id);
        assert_eq!(u["action"], "serviceable", "{id}");
        assert!(flags(u).is_empty(), "{id}: {:?}", flags(u));
    }
}

#[test]
fn the_float_string_counts_its_units_by_their_float_action() {
    let (v, _) = fleet_json();
    // demo-data/README.md: HL-B3 sinks on float, its three neighbours are
    // within the window, and the current holds steady.
    for id in ["HL-B1", "HL-B2", "HL-B4"] {
        let u = unit(&v, id);
        assert_eq!(u["action"], "serviceable", "{id}");
        assert_eq!(flags(u), ["on-float"], "{id}");
    }
    for id in ["HL-B1", "HL-B2", "HL-B3", "HL-B4"] {
        assert!(unit(&v, id)["soc_percent"].is_null(), "{id}");
    }
    assert_eq!(
        v["summary"]["by_site"]["Hollin Lane exchange"],
        serde_json::json!({"capacity-test": 1, "serviceable": 3})
    );
}

#[test]
fn rows_read_equal_accepted_plus_rejected_with_line_numbers() {
    let (v, _) = fleet_json();
    let s = &v["summary"];
    assert_eq!(
        s["rows_read"].as_u64().unwrap(),
        s["rows_accepted"].as_u64().unwrap() + s["rows_rejected"].as_u64().unwrap()
    );
    assert_eq!(s["rows_rejected"], 2);
    let rej = v["rejected"].as_array().unwrap();
    let lines: Vec<u64> = rej.iter().map(|r| r["line"].as_u64().unwrap()).collect();
    assert_eq!(lines, vec![182, 183]);
    assert!(rej[0]["reason"].as_str().unwrap().contains("taken_at"));
    assert!(rej[1]["reason"].as_str().unwrap().contains("volts"));
    assert_eq!(v["schema"], "restvolt.fleet/1");
}

#[test]
fn every_format_renders_and_the_output_file_is_written_whole() {
    let dir = tmp();
    for fmt in ["table", "csv", "json", "markdown", "html"] {
        let path = dir.path().join(format!("report.{fmt}"));
        let out = restvolt()
            .args(["fleet", "--format", fmt, "-o"])
            .arg(&path)
            .arg(repo("demo-data/fleet.csv"))
            .output()
            .unwrap();
        assert_eq!(out.status.code(), Some(3), "{fmt}");
        let text = std::fs::read_to_string(&path).unwrap();
        assert!(text.contains("TD-V07"), "{fmt}");
        // TD-V07's shorted cell leaves its state of charge unknown: each
        // format shows it empty, not as 0 %.
        let line = text
            .lines()
            .find(|l| l.contains("TD-V07"))
            .unwrap()
            .to_string();
        match fmt {
            "table" => assert!(line.contains(" replace       -  "), "{line}"),
            "csv" => assert!(line.contains(",replace,,,,"), "{line}"),
            "markdown" => assert!(line.contains("| **replace** | - |"), "{line}"),
            "html" => assert!(
                text.contains("<p class=\"where\">Tarrow depot / #7 · profile flooded-automotive · state of charge unknown</p>"),
                "{fmt}"
            ),
            // JSON: null, checked in injected_faults_are_flagged_with_the_expected_action.
            _ => {}
        }
        assert!(!line.contains("0.0 [0.0"), "{fmt}: {line}");
    }
    // Refuses to write over its own input.
    let input = dir.path().join("in.csv");
    std::fs::copy(repo("demo-data/fleet.csv"), &input).unwrap();
    let out = restvolt()
        .args(["fleet", "-o"])
        .arg(&input)
        .arg(&input)
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&out.stderr).contains("input file"));
}

#[test]
fn demo_runs_with_no_arguments() {
    let out = restvolt().arg("demo").output().unwrap();
    assert_eq!(out.status.code(), Some(0));
    assert!(String::from_utf8_lossy(&out.stdout).contains("TD-V07"));
}

#[test]
fn generated_fleet_round_trips_through_the_analysis() {
    let dir = tmp();
    let path = dir.path().join("gen.csv");
    let truth = dir.path().join("truth.json");
    let made = restvolt()
        .args([
            "generate", "--units", "300", "--days", "60", "--seed", "5", "-o",
        ])
        .arg(&path)
        .arg("--truth")
        .arg(&truth)
        .output()
        .unwrap();
    assert_eq!(made.status.code(), Some(0));
    // stderr gives the counts; the unit-by-unit key goes to --truth only.
    let note = String::from_utf8_lossy(&made.stderr);
    assert!(
        note.contains("\"units\":300")
            && !note.contains("faulty_units")
            && !note.contains("past today"),
        "{note}"
    );
    let key: Value = serde_json::from_slice(&std::fs::read(&truth).unwrap()).unwrap();
    let out = restvolt()
        .args(["fleet", "--format", "json"])
        .arg(&path)
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(0));
    let v: Value = serde_json::from_slice(&out.stdout).unwrap();
    assert_eq!(v["summary"]["units"], 300);
    assert_eq!(v["summary"]["rows_rejected"], 0);
    // The faults the generator wrote are the ones the analysis finds, for
    // the two that decide alone (a shorted cell, a probe off the post).
    let action = |id: &str| {
        v["units"]
            .as_array()
            .unwrap()
            .iter()
            .find(|u| u["unit_id"] == id)
            .map(|u| u["action"].as_str().unwrap().to_string())
    };
    let faults = key["faulty_units"].as_object().unwrap();
    // No healthy unit, and no unit whose only fault is one low last reading
    // (a post-charge shortfall), is called a fast decline: one point is a
    // step, not a trend.
    for u in v["units"].as_array().unwrap() {
        let id = u["unit_id"].as_str().unwrap();
        let fault = faults.get(id).and_then(Value::as_str).unwrap_or("healthy");
        if matches!(fault, "healthy" | "post-charge-shortfall") {
            assert!(
                !flags(u).contains(&"fast-decline".to_string()),
                "{id} ({fault})"
            );
        }
    }
    let mut checked = 0;
    for (id, fault) in faults {
        let want = match fault.as_str().unwrap() {
            "shorted-cell" => "replace",
            "bad-connection" => "remeasure",
            _ => continue,
        };
        assert_eq!(action(id).as_deref(), Some(want), "{id}: {fault}");
        if want == "replace" {
            // A shorted cell's block has no whole-unit charge to show.
            let u = v["units"]
                .as_array()
                .unwrap()
                .iter()
                .find(|u| u["unit_id"] == id.as_str())
                .unwrap();
            assert!(u["soc_percent"].is_null(), "{id}: {u}");
        }
        checked += 1;
    }
    assert!(checked >= 5, "only {checked} units checked");
}

#[test]
fn a_large_file_on_all_cores_gives_the_one_thread_report_and_no_stderr_when_piped() {
    // Above the 8 MiB at which the fleet command reads on every core.
    let dir = tmp();
    let path = dir.path().join("large.csv");
    restvolt()
        .args(["generate", "--units", "4000", "--readings-per-unit", "20"])
        .args(["--seed", "11", "-o"])
        .arg(&path)
        .assert()
        .success();
    assert!(std::fs::metadata(&path).unwrap().len() > 8 << 20);
    let run = |threads: &str| {
        let out = restvolt()
            .args(["fleet", "--format", "json", "--threads", threads])
            .arg(&path)
            .output()
            .unwrap();
        assert_eq!(out.status.code(), Some(0));
        // stderr is a pipe here, not a terminal: no progress bar, nothing at all.
        assert!(
            out.stderr.is_empty(),
            "{}",
            String::from_utf8_lossy(&out.stderr)
        );
        out.stdout
    };
    let one = run("1");
    assert_eq!(run("2"), one, "two threads and one give different reports");
    let v: Value = serde_json::from_slice(&one).unwrap();
    assert_eq!(v["summary"]["rows_read"], 80_000);
}

#[test]
fn a_large_file_shows_a_progress_bar_when_stderr_is_a_terminal() {
    // `script` (util-linux, essential on Debian) runs the command on a
    // pseudo-terminal and copies what it shows; stdout goes to /dev/null.
    let dir = tmp();
    let path = dir.path().join("large.csv");
    restvolt()
        .args(["generate", "--units", "4000", "--readings-per-unit", "20"])
        .args(["--seed", "12", "-o"])
        .arg(&path)
        .assert()
        .success();
    let cmd = format!(
        "{} fleet '{}' --format json > /dev/null",
        env!("CARGO_BIN_EXE_restvolt"),
        path.display()
    );
    let out = std::process::Command::new("script")
        .args(["-qec", &cmd, "/dev/null"])
        .output()
        .unwrap();
    assert!(out.status.success(), "{out:?}");
    let shown = String::from_utf8_lossy(&out.stdout);
    assert!(
        shown.contains("reading") && shown.contains("MiB"),
        "{shown}"
    );
}

#[test]
fn a_reader_that_leaves_early_ends_the_run_quietly() {
    // `restvolt fleet big.csv | head`: once head has its lines it closes the
    // pipe; restvolt must stop without a message and without failing.
    use std::io::Read;
    let dir = tmp();
    let path = dir.path().join("big.csv");
    restvolt()
        .args(["generate", "--units", "3000", "--seed", "3", "-o"])
        .arg(&path)
        .assert()
        .success();
    for (format, starts) in [
        ("csv", "rank,unit_id"),
        ("json", "{"),
        ("table", "Fleet report"),
    ] {
        let mut child = std::process::Command::new(env!("CARGO_BIN_EXE_restvolt"))
            .args(["fleet", "--format", format])
            .arg(&path)
            .stdout(std::process::Stdio::piped())
            .stderr(std::process::Stdio::piped())
            .spawn()
            .unwrap();
        let mut first = [0u8; 512];
        let mut stdout = child.stdout.take().unwrap();
        stdout.read_exact(&mut first).unwrap();
        drop(stdout);
        let out = child.wait_with_output().unwrap();
        assert!(
            String::from_utf8_lossy(&first).starts_with(starts),
            "{format}"
        );
        assert_eq!(out.status.code(), Some(0), "{format}: {out:?}");
        assert!(
            out.stderr.is_empty(),
            "{format}: {}",
            String::from_utf8_lossy(&out.stderr)
        );
    }
}

#[test]
fn an_output_that_is_a_pipe_or_device_is_written_through_not_replaced() {
    // `-o /dev/null` or `-o` a named pipe: writing a temporary file and
    // renaming it over the path would replace the device node itself. A FIFO
    // in a temporary folder stands in for the device (the test must not risk
    // the machine's /dev/null).
    use std::io::Read;
    use std::os::unix::fs::FileTypeExt;
    let dir = tmp();
    let fifo = dir.path().join("report.fifo");
    let made = std::process::Command::new("mkfifo")
        .arg(&fifo)
        .status()
        .unwrap();
    assert!(made.success());
    let reader = {
        let fifo = fifo.clone();
        std::thread::spawn(move || {
            let mut text = String::new();
            std::fs::File::open(&fifo)
                .unwrap()
                .read_to_string(&mut text)
                .unwrap();
            text
        })
    };
    let out = restvolt()
        .args(["fleet", "--format", "csv", "-o"])
        .arg(&fifo)
        .arg(repo("demo-data/fleet.csv"))
        .output()
        .unwrap();
    // The kind first: had the pipe been replaced, its reader would wait for
    // ever (the test fails, and the thread ends with the test process).
    let kind = std::fs::symlink_metadata(&fifo).unwrap().file_type();
    assert!(kind.is_fifo(), "the pipe was replaced by {kind:?}");
    assert_eq!(out.status.code(), Some(3), "{out:?}"); // the demo has two bad rows
    let text = reader.join().unwrap();
    assert!(text.starts_with("rank,unit_id"), "{text}");
}

/// The generator's readings start on a fixed day; a span that runs past
/// today is said, since `fleet` rejects readings dated ahead.
#[test]
fn a_generated_span_past_today_is_noted() {
    let made = restvolt()
        .args([
            "generate",
            "--units",
            "2",
            "--days",
            "20000",
            "--readings-per-unit",
            "3",
        ])
        .output()
        .unwrap();
    assert_eq!(made.status.code(), Some(0));
    let note = String::from_utf8_lossy(&made.stderr);
    assert!(
        note.contains("start on 2024-01-08")
            && note.contains("past today")
            && note.contains("--days "),
        "{note}"
    );
}

#[test]
fn a_cold_unit_whose_voltage_says_nothing_is_warned_of_freezing_as_if_flat() {
    // 15.9 V on a 6-cell block is above any rest voltage: the charge is not
    // known, so the fleet, like `check`, gives a flat battery's freezing
    // point and, in the cold, the freeze risk (a flat electrolyte, SG about
    // 1.100–1.150, freezes between about −7 and −15 °C: US Army TM 5-1185
    // Table III, published), without acting on a charge it does not know.
    let d = tmp();
    let file = d.path().join("cold.csv");
    std::fs::write(
        &file,
        "unit_id,profile,taken_at,volts,temp_c,rest_h,after\n\
         YARD-7,flooded-automotive,2026-01-10 07:30,12.71,-4,30,idle\n\
         YARD-7,flooded-automotive,2026-02-10 07:30,15.90,-20,30,idle\n\
         YARD-8,flooded-automotive,2026-02-10 07:40,12.65,-20,30,idle\n",
    )
    .unwrap();
    let out = restvolt()
        .args(["fleet", "--format", "json"])
        .arg(&file)
        .output()
        .unwrap();
    assert_eq!(
        out.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let v: Value = serde_json::from_slice(&out.stdout).unwrap();
    let u = unit(&v, "YARD-7");
    let f = flags(u);
    assert!(f.contains(&"check-connection".to_string()), "{f:?}");
    assert!(f.contains(&"freeze-risk".to_string()), "{f:?}");
    assert_eq!(u["action"], "remeasure");
    assert!(u["soc_percent"].is_null());
    let fleet_fp = u["freezing_point_celsius"].as_f64().unwrap();
    assert!((-18.0..=-4.0).contains(&fleet_fp), "{fleet_fp}");
    let check = common::json(&[
        "check",
        "--profile",
        "flooded-automotive",
        "--volts",
        "15.9",
        "--temp=-20C",
        "--rest",
        "30h",
        "--format",
        "json",
    ]);
    let check_fp = check["freezing_point_celsius"].as_f64().unwrap();
    assert!(
        (check_fp - fleet_fp).abs() < 0.051,
        "{check_fp} vs {fleet_fp}"
    );
    assert!(common::flags(&check).contains(&"freeze-risk".to_string()));
    // The HTML page cannot draw it on the freezing chart (no charge), but
    // names it under the chart.
    let html = restvolt()
        .args(["fleet", "--format", "html"])
        .arg(&file)
        .output()
        .unwrap();
    let page = String::from_utf8_lossy(&html.stdout);
    assert!(
        page.contains("at risk of freezing, charge not known (not drawn): YARD-7"),
        "{page}"
    );
}
