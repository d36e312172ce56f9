//! The fleet analysis gives one answer however its input is divided: on
//! several threads, or in partitions analysed apart and merged in any order.
//! The reference is always the plain one-pass, one-thread analysis of the
//! same readings.

use super::analysis::{
    finish, finish_owned, finish_owned_on, ChunkFold, FleetSettings, FleetState, FoldScratch,
    UnitMap, PARALLEL_JUDGING_UNITS,
};
use super::generate::{generate, GenerateOptions};
use super::ingest::{ingest, FleetRow, IngestOptions, IngestStats, Parallelism};
use super::shards::SharedUnits;
use crate::profile::store::ProfileStore;
use rand::seq::SliceRandom;
use rand::{Rng, SeedableRng};

fn generated(units: u32, seed: u64) -> Vec<u8> {
    let mut out = Vec::new();
    generate(
        &GenerateOptions {
            units,
            days: 120,
            seed,
            readings_per_unit: None,
        },
        &mut out,
    )
    .unwrap();
    out
}

/// The rows of a CSV text that is read without a reject.
pub(super) fn rows_of(text: &[u8]) -> Vec<FleetRow> {
    let mut rows = Vec::new();
    ingest(
        "f.csv",
        text,
        &IngestOptions::default(),
        &mut |r| rows.push(r),
        &mut |r| panic!("{r}"),
    )
    .unwrap();
    rows
}

fn report_json(state: &FleetState, store: &ProfileStore) -> String {
    serde_json::to_string_pretty(&finish(state, store, &FleetSettings::default())).unwrap()
}

/// Equal reports, or a panic naming the first line where they part.
fn assert_same(got: &str, want: &str, what: &str) {
    if got != want {
        let at = got
            .lines()
            .zip(want.lines())
            .position(|(a, b)| a != b)
            .unwrap_or(got.lines().count().min(want.lines().count()));
        panic!(
            "{what}: reports differ at line {}: got {:?}, want {:?}",
            at + 1,
            got.lines().nth(at),
            want.lines().nth(at)
        );
    }
}

fn one_pass(name: &str, text: &[u8], store: &ProfileStore) -> (FleetState, IngestStats) {
    let mut state = FleetState::default();
    let stats = state
        .ingest(
            name,
            text,
            &IngestOptions::default(),
            store,
            &FleetSettings::default(),
        )
        .unwrap();
    (state, stats)
}

fn on_threads(
    name: &str,
    text: &[u8],
    store: &ProfileStore,
    how: Parallelism,
) -> Result<(FleetState, IngestStats), String> {
    let mut state = FleetState::default();
    let stats = read_on_threads(&mut state, name, text, store, how)?;
    Ok((state, stats))
}

/// Read one more input into `state` on the reading threads.
fn read_on_threads(
    state: &mut FleetState,
    name: &str,
    text: &[u8],
    store: &ProfileStore,
    how: Parallelism,
) -> Result<IngestStats, String> {
    let mut seen = 0;
    let stats = state
        .ingest_parallel(
            name,
            text,
            &IngestOptions::default(),
            store,
            &FleetSettings::default(),
            how,
            &mut |b| seen = b,
        )
        .map_err(|e| e.to_string())?;
    // The progress count ends at every byte after the header.
    assert!(seen <= text.len() as u64 && seen + 4096 >= text.len() as u64);
    Ok(stats)
}

/// Awkward but valid input: byte-order mark, CRLF, quoted fields with the
/// delimiter and line ends inside, blank records, and rejected rows.
const AWKWARD: &str = "\u{feff}unit_id,taken_at,volts,profile,note\r\n\
B1,2024-03-01 08:00,12.61,flooded-automotive,\"fine, clean\"\r\n\
B1,2024-03-08 08:00,12.40,flooded-automotive,\"two\r\nlines\"\r\n\
,,,,\r\n\
B2,2024-03-01 08:00,12.2x,flooded-automotive,typo\r\n\
B2,2024-03-02 09:00,12.05,flooded-automotive,\"quote \"\"inside\"\"\"\r\n\
B3,2024-03-02 09:00,11.80,flooded-automotive,\r\n\
B3,not a time,11.80,flooded-automotive,\r\n\
B4,2024-03-05 10:00,12.72,flooded-automotive,last\r\n";

#[test]
fn threads_and_chunks_give_the_one_thread_report() {
    let store = ProfileStore::builtin().unwrap();
    let inputs: Vec<(&str, Vec<u8>)> = vec![
        ("generated.csv", generated(300, 3)),
        (
            "demo-data/fleet.csv",
            include_bytes!("../../demo-data/fleet.csv").to_vec(),
        ),
        ("awkward.csv", AWKWARD.as_bytes().to_vec()),
        // Rows of many units in every chunk: not folded by unit on the
        // reading threads (see the test below).
        ("shuffled.csv", shuffled(&generated(300, 3), 11)),
    ];
    for (name, text) in &inputs {
        let (state, stats) = one_pass(name, text, &store);
        let want = report_json(&state, &store);
        for threads in [1, 2, 3] {
            for chunk_bytes in [64, 700, 1 << 20] {
                let how = Parallelism {
                    threads,
                    chunk_bytes,
                };
                let (got, got_stats) = on_threads(name, text, &store, how).unwrap();
                assert_eq!(got_stats, stats, "{name} {how:?}");
                assert_same(
                    &report_json(&got, &store),
                    &want,
                    &format!("{name} {how:?}"),
                );
            }
        }
    }
}

/// The records of a CSV text in a seeded random order, after its header.
fn shuffled(text: &[u8], seed: u64) -> Vec<u8> {
    let mut rng = rand::rngs::StdRng::seed_from_u64(seed);
    split(text, 1, &mut rng).remove(0)
}

#[test]
fn a_chunk_is_folded_by_unit_only_when_its_rows_come_in_runs() {
    let store = ProfileStore::builtin().unwrap();
    let settings = FleetSettings::default();
    let grouped = generated(40, 5);
    let mut scratch = FoldScratch::default();
    for (rows, by_unit) in [
        (rows_of(&grouped), true),
        (rows_of(&shuffled(&grouped, 2)), false),
    ] {
        let mut rows = rows;
        let n = rows.len();
        let units = SharedUnits::new(UnitMap::default());
        let part = ChunkFold::of(&mut rows, &mut scratch, &store, &settings, &units);
        // The rows are left to be filled again, not removed.
        assert_eq!(rows.len(), n);
        assert!(part.late.is_empty());
        assert_eq!(part.by_unit, by_unit);
        // Either way every row is folded into its unit's summary.
        let units = units.into_map();
        assert_eq!(units.len(), 40);
        let folded: u64 = units.values().map(|s| s.readings).sum();
        assert_eq!(folded, n as u64);
    }
}

/// Rows the reader accepts but their profile cannot use (an SG on a
/// valve-regulated unit) are rejects however the chunk is folded, on any
/// number of threads: rows read = accepted + rejected, and the report is the
/// one-thread report.
#[test]
fn rows_a_profile_cannot_use_are_rejected_in_folded_chunks_too() {
    let store = ProfileStore::builtin().unwrap();
    let mut csv = String::from("unit_id,taken_at,profile,site,string,volts,sg,temp_c,rest_h\n");
    for u in 0..40 {
        for d in 1..=9 {
            // Every ninth reading of every fifth unit has an SG on an AGM unit.
            let sg = if u % 5 == 0 && d == 9 { "1.250" } else { "" };
            csv.push_str(&format!(
                "U{u:02},2026-03-{d:02} 10:00,agm,north,S{},12.7{},{sg},20,30\n",
                u / 10,
                u % 10
            ));
        }
    }
    let text = csv.into_bytes();
    let (state, stats) = one_pass("vrla.csv", &text, &store);
    assert_eq!((stats.rows_read, stats.rows_rejected), (360, 8));
    assert_eq!(stats.rows_read, stats.rows_accepted + stats.rows_rejected);
    let want = report_json(&state, &store);
    assert!(want.contains("is valve-regulated"), "{want}");
    for threads in [2, 3] {
        for chunk_bytes in [64, 900, 1 << 20] {
            let how = Parallelism {
                threads,
                chunk_bytes,
            };
            let (got, got_stats) = on_threads("vrla.csv", &text, &store, how).unwrap();
            assert_eq!(got_stats, stats, "{how:?}");
            assert_same(&report_json(&got, &store), &want, &format!("{how:?}"));
        }
    }
}

#[test]
fn an_input_error_is_the_one_thread_error() {
    let store = ProfileStore::builtin().unwrap();
    let two_threads = |chunk_bytes| Parallelism {
        threads: 2,
        chunk_bytes,
    };
    let mut text = generated(60, 4);
    // A Latin-1 degree sign in a record about two thirds of the way in.
    let at = text.len() * 2 / 3;
    let line_start = at + text[at..].iter().position(|&b| b == b'\n').unwrap() + 1;
    text.insert(line_start + 3, 0xB0);
    let want = one_pass_error(&text, &store);
    assert!(want.contains("not valid UTF-8"), "{want}");
    for chunk_bytes in [200, 5000] {
        let got = on_threads("f.csv", &text, &store, two_threads(chunk_bytes));
        assert_eq!(got.map(|_| ()).unwrap_err(), want);
    }

    // A line longer than the reader's limit, after some good records.
    let mut text = generated(20, 4);
    text.extend(std::iter::repeat_n(
        b'x',
        super::ingest::MAX_LINE_BYTES as usize + 10,
    ));
    let want = one_pass_error(&text, &store);
    assert!(want.contains("longer than"), "{want}");
    let got = on_threads("f.csv", &text, &store, two_threads(4096));
    assert_eq!(got.map(|_| ()).unwrap_err(), want);
}

fn one_pass_error(text: &[u8], store: &ProfileStore) -> String {
    FleetState::default()
        .ingest(
            "f.csv",
            text,
            &IngestOptions::default(),
            store,
            &FleetSettings::default(),
        )
        .unwrap_err()
        .to_string()
}

/// Split the records of a CSV text among `k` parts at random (each part keeps
/// the header, and its records in a shuffled order).
fn split(text: &[u8], k: usize, rng: &mut impl Rng) -> Vec<Vec<u8>> {
    let text = std::str::from_utf8(text).unwrap();
    let mut lines = text.lines();
    let header = lines.next().unwrap();
    let mut parts: Vec<Vec<&str>> = vec![Vec::new(); k];
    for line in lines {
        parts[rng.gen_range(0..k)].push(line);
    }
    parts
        .into_iter()
        .map(|mut p| {
            p.shuffle(rng);
            let mut out = format!("{header}\n");
            for l in p {
                out.push_str(l);
                out.push('\n');
            }
            out.into_bytes()
        })
        .collect()
}

/// Several inputs read in turn into one state on the reading threads (the
/// shared summaries then start from the units already read), each split at
/// random so that units recur from input to input, give the one-pass report.
#[test]
fn inputs_read_in_turn_on_threads_give_the_one_pass_report() {
    let store = ProfileStore::builtin().unwrap();
    let text = generated(300, 5);
    let (whole, _) = one_pass("whole.csv", &text, &store);
    let want = report_json(&whole, &store);
    let mut rng = rand::rngs::StdRng::seed_from_u64(21);
    for k in [2, 3] {
        let mut state = FleetState::default();
        for (i, part) in split(&text, k, &mut rng).iter().enumerate() {
            let how = Parallelism {
                threads: 2,
                chunk_bytes: 700,
            };
            read_on_threads(&mut state, &format!("part{i}.csv"), part, &store, how).unwrap();
        }
        assert_eq!(state.units.len(), whole.units.len());
        assert_same(&report_json(&state, &store), &want, &format!("{k} inputs"));
    }
}

#[test]
fn parts_analysed_apart_and_merged_in_any_order_give_the_one_pass_report() {
    let store = ProfileStore::builtin().unwrap();
    let text = generated(400, 9);
    let (whole, _) = one_pass("fleet.csv", &text, &store);
    let want = report_json(&whole, &store);
    let mut rng = rand::rngs::StdRng::seed_from_u64(2024);
    for k in [2, 3, 7] {
        let parts = split(&text, k, &mut rng);
        let mut states: Vec<FleetState> = parts
            .iter()
            .map(|p| one_pass("fleet.csv", p, &store).0)
            .collect();
        states.shuffle(&mut rng);
        // Left to right…
        let mut left = FleetState::default();
        for s in states.clone() {
            left.merge(s);
        }
        assert_same(
            &report_json(&left, &store),
            &want,
            &format!("k = {k}, left fold"),
        );
        // …and as a balanced tree, so the grouping differs too.
        while states.len() > 1 {
            let mut next = Vec::new();
            let mut it = states.into_iter();
            while let Some(mut a) = it.next() {
                if let Some(b) = it.next() {
                    a.merge(b);
                }
                next.push(a);
            }
            states = next;
        }
        let tree = states.pop().unwrap();
        assert_same(
            &report_json(&tree, &store),
            &want,
            &format!("k = {k}, tree"),
        );
        assert_eq!(tree.rows_read, whole.rows_read);
    }
}

#[test]
fn judging_while_taking_the_state_apart_gives_the_same_report() {
    let store = ProfileStore::builtin().unwrap();
    for (name, text) in [
        ("generated.csv", generated(250, 5)),
        (
            "demo-data/fleet.csv",
            include_bytes!("../../demo-data/fleet.csv").to_vec(),
        ),
    ] {
        let (state, _) = one_pass(name, &text, &store);
        let want = report_json(&state, &store);
        let got = finish_owned(state, &store, &FleetSettings::default());
        let got = serde_json::to_string_pretty(&got).unwrap();
        assert_same(&got, &want, name);
    }
}

#[test]
fn a_report_without_chart_history_is_the_chart_report_less_its_history() {
    // Without the charts' history no reading's interval is worked out
    // (`estimate_charge`); nothing else may change. The last unit's two
    // readings at the same time and voltage differ in that one has no
    // temperature (25 °C is assumed, with a wider interval), so their points
    // tie on all but the interval: the latest row must be the same one
    // either way (by content, the one with a temperature).
    let store = ProfileStore::builtin().unwrap();
    let mut text = generated(250, 9);
    text.extend_from_slice(
        b"TIE-1,2026-01-05 08:00,agm,,,,6,12.71,,,30,charge,,,,,\n\
          TIE-1,2026-01-05 08:00,agm,,,,6,12.71,,25.0,30,charge,,,,,\n",
    );
    let lean_settings = FleetSettings {
        without_chart_history: true,
        ..FleetSettings::default()
    };
    let ingest_with = |settings: &FleetSettings| {
        let mut state = FleetState::default();
        state
            .ingest(
                "t.csv",
                &text[..],
                &IngestOptions::default(),
                &store,
                settings,
            )
            .unwrap();
        state
    };
    let mut want = finish(
        &ingest_with(&FleetSettings::default()),
        &store,
        &FleetSettings::default(),
    );
    assert!(want.units.iter().any(|u| !u.history.is_empty()));
    let tie = want.units.iter().find(|u| u.unit_id == "TIE-1").unwrap();
    assert_eq!((tie.readings, tie.latest_temperature), (2, Some(25.0)));
    assert!(!tie.flags.iter().any(|f| f == "no-temperature"));
    for u in &mut want.units {
        u.history.clear();
    }
    let got = finish(&ingest_with(&lean_settings), &store, &lean_settings);
    assert_eq!(got, want);
    assert_same(
        &serde_json::to_string_pretty(&got).unwrap(),
        &serde_json::to_string_pretty(&want).unwrap(),
        "without chart history",
    );
}

#[test]
fn judging_on_several_threads_gives_the_same_report() {
    let store = ProfileStore::builtin().unwrap();
    // Enough units that the judging really is shared out.
    let units = PARALLEL_JUDGING_UNITS as u32 + 97;
    let mut text = Vec::new();
    generate(
        &GenerateOptions {
            units,
            days: 60,
            seed: 11,
            readings_per_unit: Some(3),
        },
        &mut text,
    )
    .unwrap();
    let (state, _) = one_pass("generated.csv", &text, &store);
    let want = report_json(&state, &store);
    for threads in [2, 3, 8] {
        let got = finish_owned_on(state.clone(), &store, &FleetSettings::default(), threads);
        assert_eq!(got.units.len(), units as usize);
        // The judging threads also pick out the units read on float.
        assert!(!got.float_strings.is_empty(), "no float strings to check");
        let got = serde_json::to_string_pretty(&got).unwrap();
        assert_same(&got, &want, &format!("{threads} threads"));
    }
}

#[test]
fn a_newer_row_is_kept_in_the_allocations_of_the_row_it_replaces() {
    // Memory, not output: each unit keeps the id and SG list it was first
    // seen with, holding the newest row's contents, so that a file sorted by
    // time leaves no live per-row allocation scattered among freed ones.
    let text = "unit_id,profile,taken_at,volts,sg,temp_c,rest_h,after\n\
                P-1,flooded-stationary,2026-01-01 08:00,2.10,1.250,20,30,idle\n\
                P-1,flooded-stationary,2026-02-01 08:00,2.09,1.240,20,30,idle\n\
                P-1,flooded-stationary,2026-03-01 08:00,2.08,1.230,20,30,idle\n";
    let mut rows = rows_of(text.as_bytes());
    assert_eq!(rows.len(), 3);
    // Each row with an id and an SG list of its own, as rows of a unit far
    // apart in a file come.
    for r in &mut rows {
        r.unit_id = std::sync::Arc::from(&*r.unit_id);
        r.sg = r.sg.clone();
    }
    let first_id = std::sync::Arc::clone(&rows[0].unit_id);
    let first_sg = rows[0].sg.as_ptr();
    let mut s = super::summary::UnitSummary::default();
    for r in rows {
        let facts = super::summary::RowFacts {
            soc: None,
            rested: true,
            short_rest: false,
            ageing: None,
        };
        s.add(r, facts);
    }
    let (_, kept) = s.latest().unwrap();
    assert_eq!(kept.taken_at.to_string(), "2026-03-01 08:00:00");
    assert_eq!(kept.sg, vec![crate::units::SpecificGravity(1.230)]);
    assert!(std::sync::Arc::ptr_eq(&kept.unit_id, &first_id));
    assert_eq!(kept.sg.as_ptr(), first_sg);
}
