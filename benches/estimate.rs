//! Cost of one reading through `correct::estimate` (what `restvolt fleet`
//! folds every reading through) and through `correct::assess` (what
//! `restvolt check` prints), in nanoseconds per reading.
//!
//! ```text
//! cargo bench --bench estimate                      # both, 5 rounds
//! cargo bench --bench estimate -- --only estimate   # estimate alone (for perf stat)
//! cargo bench --bench estimate -- --rounds 20
//! ```
//!
//! The readings are a fixed, seeded set drawn across every bundled profile:
//! voltages on the curve at the reading's temperature (as `restvolt generate`
//! makes them, plus meter noise), a tenth of them off the curve (a cell short,
//! a probe off, surface charge), temperatures from −30 to 55 °C, rest times
//! from a quarter of an hour to two days or unknown, and on flooded profiles
//! every other reading with one hydrometer value per cell. Each set is timed
//! with and without its SG. The machine may be shared, so each figure is the
//! fastest of the rounds. For a count of work that contention does not move,
//! run `--only estimate` (or `--only assess`, or `--only none` for the set-up
//! alone) under `perf stat -e instructions:u`, or under
//! `valgrind --tool=cachegrind --cache-sim=no` where the machine has no
//! hardware counters; with `--rounds 1`, subtract the set-up and divide by
//! twice the readings (both sets are run once).

use rand::{Rng, SeedableRng};
use restvolt::correct::{assess, estimate, After, Reading, Setup};
use restvolt::profile::store::ProfileStore;
use restvolt::profile::Profile;
use restvolt::rules::Rules;
use restvolt::units::{Celsius, Hours, SocPercent, SpecificGravity, Volts};
use std::hint::black_box;
use std::time::Instant;

/// Readings per profile.
const PER_PROFILE: usize = 4_000;

fn main() {
    let args: Vec<String> = std::env::args().skip(1).collect();
    let arg = |name: &str| {
        args.iter()
            .position(|a| a == name)
            .and_then(|i| args.get(i + 1))
            .cloned()
    };
    let rounds: usize = arg("--rounds").and_then(|r| r.parse().ok()).unwrap_or(5);
    let only = arg("--only");
    let store = match ProfileStore::builtin() {
        Ok(s) => s,
        Err(e) => {
            eprintln!("estimate bench: {e}");
            std::process::exit(1);
        }
    };
    let profiles: Vec<&Profile> = store.iter().collect();
    let with_sg = readings(&profiles, true);
    let without_sg: Vec<(&Profile, Reading)> = with_sg
        .iter()
        .map(|(p, r)| {
            (
                *p,
                Reading {
                    sg: Vec::new(),
                    ..r.clone()
                },
            )
        })
        .collect();
    let (setup, rules) = (Setup::default(), Rules::default());
    let sg_count = with_sg.iter().filter(|(_, r)| !r.sg.is_empty()).count();
    println!(
        "estimate bench: {} readings over {} profiles ({sg_count} with SG), best of {rounds} rounds",
        with_sg.len(),
        profiles.len()
    );
    for (label, set) in [("volts only", &without_sg), ("volts and SG", &with_sg)] {
        if only.as_deref().map_or(true, |o| o == "estimate") {
            let ns = time(set, rounds, |p, r| {
                estimate(p, r, &setup, &rules).map(|e| e.soc_percent).ok()
            });
            println!("  estimate  {label:<13} {ns:8.1} ns/reading");
        }
        if only.as_deref().map_or(true, |o| o == "assess") {
            let ns = time(set, rounds, |p, r| {
                assess(p, r, &setup, &rules).map(|a| a.soc_percent).ok()
            });
            println!("  assess    {label:<13} {ns:8.1} ns/reading");
        }
    }
}

/// Fastest round's nanoseconds per reading.
fn time(
    set: &[(&Profile, Reading)],
    rounds: usize,
    f: impl Fn(&Profile, &Reading) -> Option<f64>,
) -> f64 {
    let mut best = f64::INFINITY;
    for _ in 0..rounds.max(1) {
        let start = Instant::now();
        let mut sum = 0.0;
        for (p, r) in set {
            sum += black_box(f(black_box(p), black_box(r))).unwrap_or(0.0);
        }
        black_box(sum);
        best = best.min(start.elapsed().as_nanos() as f64 / set.len() as f64);
    }
    best
}

/// The seeded set (see the module comment).
fn readings<'a>(profiles: &[&'a Profile], sg: bool) -> Vec<(&'a Profile, Reading)> {
    let mut rng = rand::rngs::StdRng::seed_from_u64(2024);
    let afters = [After::Idle, After::Charge, After::Discharge, After::Unknown];
    let mut out = Vec::with_capacity(profiles.len() * PER_PROFILE);
    for p in profiles {
        let n = p.cells();
        for i in 0..PER_PROFILE {
            let t = rng.gen_range(-30.0..55.0);
            let soc = rng.gen_range(0.0..100.0);
            let per_cell = p.ocv_per_cell_at(SocPercent(soc), Celsius(t)).0;
            let noise = 0.003 * f64::from(n).sqrt() * rng.gen_range(-1.0..1.0);
            let volts = match i % 20 {
                // A shorted cell, a probe off the post, surface charge.
                0 => f64::from(n - 1) * per_cell + 0.05,
                1 => rng.gen_range(0.0..0.6),
                2 => f64::from(n) * (per_cell + 0.08),
                _ => f64::from(n) * per_cell + noise,
            };
            let after = afters[i % afters.len()];
            let rest = match i % 9 {
                0 => None,
                1 => Some(rng.gen_range(0.25..2.0)),
                _ => Some(rng.gen_range(2.0..48.0)),
            };
            let sg_values = if sg && p.hydrometer_usable() && i % 2 == 0 {
                let base = p.sg_at(SocPercent(soc)).0;
                (0..n)
                    .map(|_| {
                        let sg25 = base + 0.002 * rng.gen_range(-1.0..1.0);
                        // As read at temperature: 0.001 per 1.67 °C (REFERENCES §2).
                        SpecificGravity((sg25 - (t - 25.0) * 0.0006).clamp(1.0, 1.4))
                    })
                    .collect()
            } else {
                Vec::new()
            };
            out.push((
                *p,
                Reading {
                    volts: Some(Volts((volts * 100.0).round() / 100.0)),
                    sg: sg_values,
                    cells: None,
                    temperature: Some(Celsius((t * 10.0).round() / 10.0)),
                    rest: rest.map(Hours),
                    after,
                },
            ));
        }
    }
    out
}
