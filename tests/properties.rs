//! Property tests: laws that must hold for every input, not just the examples.
//!
//! - state of charge never falls as the rest voltage rises, and stays in 0–100 %,
//!   for every shipped profile at −30 to 50 °C;
//! - every 95 % interval contains its estimate;
//! - SG 25/25 ↔ mass fraction ↔ molality round-trip;
//! - fleet summaries merge associatively and in any order, to the one-pass result;
//! - arbitrary bytes never make a reader or the profile loader panic.
//!
//! Case counts are kept modest (64–256) so the file runs in seconds in debug.
// Helpers outside #[test] fns: clippy's allow-*-in-tests does not reach them.
#![allow(clippy::unwrap_used, clippy::expect_used)]

use proptest::prelude::*;
use restvolt::correct::{assess, After, Reading, Setup};
use restvolt::electrolyte::{
    mass_fraction_from_molality, mass_fraction_from_sg25, molality_from_mass_fraction,
    molality_from_sg25, sg25_from_mass_fraction,
};
use restvolt::fleet::analysis::{finish, FleetSettings, FleetState};
use restvolt::fleet::generate::{generate, GenerateOptions};
use restvolt::fleet::ingest::{ingest, IngestOptions};
use restvolt::profile::store::ProfileStore;
use restvolt::profile::Profile;
use restvolt::rules::Rules;
use restvolt::units::{Celsius, Hours, MassFraction, SpecificGravity, Volts};
use std::sync::OnceLock;

fn store() -> &'static ProfileStore {
    static STORE: OnceLock<ProfileStore> = OnceLock::new();
    STORE.get_or_init(|| ProfileStore::builtin().expect("built-in profiles"))
}

fn profiles() -> Vec<&'static Profile> {
    store().iter().collect()
}

fn after() -> impl Strategy<Value = After> {
    prop::sample::select(vec![
        After::Charge,
        After::Discharge,
        After::Idle,
        After::Unknown,
    ])
}

fn rest() -> impl Strategy<Value = Option<Hours>> {
    prop::option::of((0.0f64..200.0).prop_map(Hours))
}

/// The state of charge of a rest-voltage reading, with its 95 % interval.
fn soc_at(p: &Profile, volts: f64, t: f64, rest: Option<Hours>, after: After) -> (f64, [f64; 2]) {
    let reading = Reading {
        volts: Some(Volts(volts)),
        temperature: Some(Celsius(t)),
        rest,
        after,
        ..Reading::default()
    };
    let a = assess(p, &reading, &Setup::default(), &Rules::default())
        .unwrap_or_else(|e| panic!("{} at {volts} V, {t} °C: {e}", p.id()));
    (a.soc_percent, a.soc_interval_percent)
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(256))]

    /// More volts never means less charge, on any shipped profile and at any
    /// field temperature, across the whole range from a flat unit to an
    /// over-full one (1.7–2.4 V per cell, beyond both ends of every curve).
    #[test]
    fn soc_never_falls_as_the_rest_voltage_rises(
        which in 0usize..64,
        t in -30.0f64..50.0,
        a in 1.7f64..2.4,
        b in 1.7f64..2.4,
        rest in rest(),
        after in after(),
    ) {
        let ps = profiles();
        let p = ps[which % ps.len()];
        let n = f64::from(p.cells());
        let (lo, hi) = if a <= b { (a, b) } else { (b, a) };
        let (soc_lo, _) = soc_at(p, lo * n, t, rest, after);
        let (soc_hi, _) = soc_at(p, hi * n, t, rest, after);
        for soc in [soc_lo, soc_hi] {
            prop_assert!((0.0..=100.0).contains(&soc), "{}: {soc} %", p.id());
        }
        prop_assert!(
            soc_lo <= soc_hi + 1e-9,
            "{} at {t:.1} °C: {:.4} V/cell → {soc_lo} %, {:.4} V/cell → {soc_hi} %",
            p.id(), lo, hi
        );
    }

    /// Every reported 95 % interval contains its estimate and lies in 0–100 %,
    /// for voltage, hydrometer (one mean or one value per cell) and combined readings.
    #[test]
    fn every_interval_contains_its_estimate(
        which in 0usize..64,
        t in -30.0f64..50.0,
        volts_per_cell in 1.7f64..2.4,
        sg in prop::collection::vec(1.05f64..1.33, 24),
        kind in 0u8..5,
        rest in rest(),
        after in after(),
    ) {
        let ps = profiles();
        let p = ps[which % ps.len()];
        let n = p.cells() as usize;
        let hydrometer = p.hydrometer_usable();
        let (with_volts, sg_values) = match kind {
            0 => (true, 0),
            1 if hydrometer => (false, 1),
            2 if hydrometer => (true, 1),
            3 if hydrometer => (false, n),
            4 if hydrometer => (true, n),
            _ => (true, 0),
        };
        let reading = Reading {
            volts: with_volts.then_some(Volts(volts_per_cell * n as f64)),
            sg: sg.into_iter().take(sg_values).map(SpecificGravity).collect(),
            temperature: Some(Celsius(t)),
            rest,
            after,
            ..Reading::default()
        };
        let a = assess(p, &reading, &Setup::default(), &Rules::default());
        let a = a.map_err(|e| TestCaseError::fail(format!("{}: {reading:?}: {e}", p.id())))?;
        let [lo, hi] = a.soc_interval_percent;
        prop_assert!(0.0 <= lo && lo <= a.soc_percent && a.soc_percent <= hi && hi <= 100.0,
            "{}: {} % not in [{lo}, {hi}] ({:?})", p.id(), a.soc_percent, a.soc_basis);
    }

    /// SG 25/25 → mass fraction → SG 25/25, and mass fraction → molality →
    /// mass fraction, return what went in, and both paths to molality agree.
    #[test]
    fn sg_mass_fraction_and_molality_round_trip(sg in 1.0f64..=1.4, w in 0.0f64..=0.78) {
        let to_w = mass_fraction_from_sg25(SpecificGravity(sg)).unwrap();
        let back = sg25_from_mass_fraction(to_w).unwrap();
        // The bisection stops at 1e-12 in mass fraction; dSG/dw is below 1.
        prop_assert!((back.0 - sg).abs() < 1e-9, "{sg} → {} → {}", to_w.0, back.0);
        let m = molality_from_mass_fraction(MassFraction(w)).unwrap();
        let w_back = mass_fraction_from_molality(m).unwrap();
        prop_assert!((w_back.0 - w).abs() < 1e-12, "{w} → {} → {}", m.0, w_back.0);
        let m_direct = molality_from_sg25(SpecificGravity(sg)).unwrap();
        let m_chain = molality_from_mass_fraction(to_w).unwrap();
        prop_assert!((m_direct.0 - m_chain.0).abs() < 1e-12);
        // Stronger acid is denser and more concentrated: the maps keep order.
        let w2 = mass_fraction_from_sg25(SpecificGravity((sg + 0.001).min(1.4))).unwrap();
        prop_assert!(w2.0 >= to_w.0);
    }
}

// ---------------------------------------------------------------- fleet merge

/// A generated fleet file with extra records: exact copies, same unit and time
/// with another voltage, and a few broken rows (rejects).
fn fleet_text(seed: u64, units: u32, days: u32, extra: &[(usize, u8)]) -> String {
    let opts = GenerateOptions {
        units,
        days,
        seed,
        readings_per_unit: None,
    };
    let mut out = Vec::new();
    generate(&opts, &mut out).unwrap();
    let text = String::from_utf8(out).unwrap();
    let mut lines: Vec<String> = text.lines().map(str::to_string).collect();
    let data = lines.len() - 1;
    for &(i, kind) in extra {
        let src = lines[1 + i % data].clone();
        let mut fields: Vec<String> = src.split(',').map(str::to_string).collect();
        match kind % 3 {
            0 => {}
            1 => {
                // volts is field 8 of the generator's header.
                if let Ok(v) = fields[7].parse::<f64>() {
                    fields[7] = format!("{:.3}", v + 0.01);
                }
            }
            _ => fields[7] = "not-a-voltage".into(),
        }
        lines.push(fields.join(","));
    }
    lines.join("\n") + "\n"
}

/// The lines of `text` whose data records `part` selects by `assign`,
/// others left empty so that every record keeps its line number.
fn partition(text: &str, assign: &[u8], part: u8) -> String {
    let mut out = String::new();
    for (i, line) in text.lines().enumerate() {
        if i == 0 || assign[(i - 1) % assign.len()] % 3 == part {
            out.push_str(line);
        }
        out.push('\n');
    }
    out
}

fn state_of(text: &str) -> FleetState {
    let opts = IngestOptions::default();
    let mut s = FleetState::default();
    s.ingest(
        "fleet.csv",
        text.as_bytes(),
        &opts,
        store(),
        &FleetSettings::default(),
    )
    .unwrap();
    s
}

fn report(s: &FleetState) -> serde_json::Value {
    serde_json::to_value(finish(s, store(), &FleetSettings::default())).unwrap()
}

fn merged(mut a: FleetState, b: FleetState) -> FleetState {
    a.merge(b);
    a
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(64))]

    /// (a·b)·c = a·(b·c) = (c·a)·b, and all equal reading the file in one pass.
    #[test]
    fn fleet_merge_is_associative_order_free_and_equals_one_pass(
        seed in any::<u64>(),
        units in 2u32..9,
        days in 7u32..120,
        extra in prop::collection::vec((any::<usize>(), any::<u8>()), 0..6),
        assign in prop::collection::vec(any::<u8>(), 1..40),
    ) {
        let text = fleet_text(seed, units, days, &extra);
        let parts: Vec<String> = (0..3).map(|k| partition(&text, &assign, k)).collect();
        let s = |k: usize| state_of(&parts[k]);
        let left = merged(merged(s(0), s(1)), s(2));
        let right = merged(s(0), merged(s(1), s(2)));
        let shuffled = merged(merged(s(2), s(0)), s(1));
        let one = report(&left);
        prop_assert_eq!(&one, &report(&right));
        prop_assert_eq!(&one, &report(&shuffled));
        let mut single = report(&state_of(&text));
        let mut parted = one;
        // An empty partition says so in a notice; that is all notices may differ by.
        single["notices"] = serde_json::Value::Null;
        parted["notices"] = serde_json::Value::Null;
        prop_assert_eq!(single, parted);
    }
}

// ------------------------------------------------------------ never panic

/// Bytes drawn mostly from what CSV and TOML files are made of, so that the
/// readers get past their first checks, with any byte now and then.
fn texty_bytes(max: usize) -> impl Strategy<Value = Vec<u8>> {
    let alphabet: Vec<u8> = b"0123456789.,;-+eE\n\r\t\"# :TZnaNfiv=[]{}_ abcdmhs".to_vec();
    prop::collection::vec(
        prop_oneof![
            9 => prop::sample::select(alphabet),
            1 => any::<u8>(),
        ],
        0..max,
    )
}

const FLEET_HEADERS: [&str; 3] = [
    "unit_id,taken_at,profile,volts,sg,cells,temp_c,rest_h,after,ohmic_mohm,baseline_mohm\n",
    "unit_id;taken_at;volts;sg;temp_f;position;string;site;float_current_a;ambient_c;note\n",
    "\u{feff}UNIT_ID\ttaken_at\tvolts\tprofile\r\n",
];
const SETTLE_HEADERS: [&str; 3] = [
    "minutes,volts,temp_c\n",
    "hours;volts;temp_f\n",
    "taken_at,volts\n",
];
const CALIBRATE_HEADERS: [&str; 3] = [
    "soc_percent,volts,temp_c,cells\n",
    "soc_percent;sg;temp_f\n",
    "# c\nsoc_percent,sg,volts,temp_c\n",
];

fn with_header(headers: &[&str], pick: usize, body: Vec<u8>) -> Vec<u8> {
    match headers.get(pick) {
        Some(h) => [h.as_bytes(), &body].concat(),
        None => body,
    }
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(256))]

    /// Any bytes: the fleet reader answers with rows, rejects or an error, and
    /// every record read is accepted or rejected.
    #[test]
    fn the_fleet_reader_never_panics(pick in 0usize..4, body in texty_bytes(600)) {
        let bytes = with_header(&FLEET_HEADERS, pick, body);
        let opts = IngestOptions {
            default_profile: Some("agm".into()),
            known_profiles: Some(store().iter().map(|p| p.id().to_string()).collect()),
            ..IngestOptions::default()
        };
        let (mut rows, mut rejects) = (0u64, 0u64);
        if let Ok(stats) = ingest("x.csv", bytes.as_slice(), &opts, &mut |_| rows += 1, &mut |_| rejects += 1) {
            prop_assert_eq!(stats.rows_read, stats.rows_accepted + stats.rows_rejected);
            prop_assert_eq!((rows, rejects), (stats.rows_accepted, stats.rows_rejected));
        }
        // And the analysis of whatever was accepted.
        let mut s = FleetState::default();
        if let Ok(stats) = s.ingest("x.csv", bytes.as_slice(), &opts, store(), &FleetSettings::default()) {
            prop_assert_eq!(stats.rows_read, stats.rows_accepted + stats.rows_rejected);
            let r = finish(&s, store(), &FleetSettings::default());
            prop_assert_eq!(r.summary.rows_read, r.summary.rows_accepted + r.summary.rows_rejected);
        }
    }

    /// Any bytes: reading on several threads in small chunks gives the
    /// one-thread report, or the same error (src/fleet/ingest/parallel.rs).
    #[test]
    fn the_parallel_reader_is_the_one_thread_reader(
        pick in 0usize..4,
        body in texty_bytes(600),
        chunk_bytes in 64usize..400,
    ) {
        let bytes = with_header(&FLEET_HEADERS, pick, body);
        let opts = IngestOptions {
            default_profile: Some("agm".into()),
            known_profiles: Some(store().iter().map(|p| p.id().to_string()).collect()),
            ..IngestOptions::default()
        };
        let settings = FleetSettings::default();
        let report = |s: &FleetState| serde_json::to_string(&finish(s, store(), &settings)).unwrap();
        let mut one = FleetState::default();
        let one_result = one.ingest("x.csv", bytes.as_slice(), &opts, store(), &settings);
        let mut many = FleetState::default();
        let how = restvolt::fleet::ingest::Parallelism { threads: 2, chunk_bytes };
        let many_result =
            many.ingest_parallel("x.csv", bytes.as_slice(), &opts, store(), &settings, how, &mut |_| {});
        match (one_result, many_result) {
            (Ok(a), Ok(b)) => {
                prop_assert_eq!(a, b);
                prop_assert_eq!(report(&one), report(&many));
            }
            (Err(a), Err(b)) => prop_assert_eq!(a.to_string(), b.to_string()),
            (a, b) => prop_assert!(false, "one thread {:?}, several {:?}", a, b),
        }
    }

    /// Any bytes: the settle reader reads or refuses, and a series it reads is
    /// fitted or refused.
    #[test]
    fn the_settle_reader_never_panics(pick in 0usize..4, body in texty_bytes(400), end in any::<bool>()) {
        let bytes = with_header(&SETTLE_HEADERS, pick, body);
        let end = end.then(|| chrono::NaiveDate::from_ymd_opt(2026, 1, 1).unwrap().and_hms_opt(0, 0, 0).unwrap());
        if let Ok(readings) = restvolt::settle::read_rest_csv(bytes.as_slice(), "x.csv", end, None) {
            let _ = restvolt::settle::analyse(&restvolt::settle::points(&readings), &Default::default());
        }
    }

    /// Any bytes: the calibration reader reads or refuses, and points it reads
    /// are calibrated or refused.
    #[test]
    fn the_calibrate_reader_never_panics(pick in 0usize..4, which in 0usize..64, body in texty_bytes(400)) {
        let bytes = with_header(&CALIBRATE_HEADERS, pick, body);
        let ps = profiles();
        let base = ps[which % ps.len()];
        if let Ok(points) = restvolt::calibrate::read_points("x.csv", bytes.as_slice(), base) {
            let opts = restvolt::calibrate::CalibrateOptions {
                new_id: "site-x".into(),
                input_name: "x.csv".into(),
                input_sha256: restvolt::calibrate::sha256_hex(&bytes),
                today: chrono::NaiveDate::from_ymd_opt(2026, 1, 1).unwrap(),
            };
            let _ = restvolt::calibrate::calibrate(&points, base, &opts);
        }
    }

    /// Any text, and any few edits of a valid profile: loaded or refused.
    #[test]
    fn the_profile_loader_never_panics(
        body in texty_bytes(300),
        edits in prop::collection::vec((any::<usize>(), any::<u8>(), 0u8..3), 1..6),
    ) {
        let _ = Profile::from_toml(&String::from_utf8_lossy(&body), "x.toml");
        let mut bytes = include_bytes!("fixtures/valid-profile.toml").to_vec();
        for (at, byte, op) in edits {
            let at = at % (bytes.len() + 1);
            match op {
                0 if at < bytes.len() => bytes[at] = byte,
                1 if at < bytes.len() => { bytes.remove(at); }
                _ => bytes.insert(at, byte),
            }
        }
        let _ = Profile::from_toml(&String::from_utf8_lossy(&bytes), "x.toml");
    }
}
