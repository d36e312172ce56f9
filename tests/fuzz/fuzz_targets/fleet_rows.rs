//! The fleet CSV reader on arbitrary bytes: it must answer with rows, rejects
//! or an error, never panic, and account for every record it reads.
#![no_main]

use libfuzzer_sys::fuzz_target;
use restvolt::fleet::analysis::{finish, FleetSettings, FleetState};
use restvolt::fleet::ingest::{ingest, IngestOptions};
use restvolt::profile::store::ProfileStore;
use std::sync::OnceLock;

/// Headers put before the input (chosen by its first byte) so that most runs
/// reach the row parser rather than stopping at the header checks.
const HEADERS: [&[u8]; 4] = [
    b"",
    b"unit_id,taken_at,profile,volts,sg,cells,temp_c,rest_h,after,ohmic_mohm,baseline_mohm,site,string,position\n",
    b"unit_id;taken_at;volts;sg;temp_f;float_current_a;ambient_c;note;profile\n",
    b"\xef\xbb\xbfunit_id\ttaken_at\tvolts\tprofile\tcells\tsg\r\n",
];

fn store() -> &'static ProfileStore {
    static STORE: OnceLock<ProfileStore> = OnceLock::new();
    STORE.get_or_init(|| ProfileStore::builtin().expect("built-in profiles"))
}

fuzz_target!(|data: &[u8]| {
    let (pick, body) = match data.split_first() {
        Some((first, rest)) => (usize::from(*first) % HEADERS.len(), rest),
        None => (0, data),
    };
    let bytes = [HEADERS[pick], body].concat();
    let opts = IngestOptions {
        default_profile: Some("agm".into()),
        known_profiles: Some(store().iter().map(|p| p.id().to_string()).collect()),
        now: chrono::NaiveDate::from_ymd_opt(2030, 1, 1).and_then(|d| d.and_hms_opt(0, 0, 0)),
        ..IngestOptions::default()
    };
    let (mut rows, mut rejects) = (0u64, 0u64);
    if let Ok(stats) = ingest(
        "fuzz.csv",
        bytes.as_slice(),
        &opts,
        &mut |_| rows += 1,
        &mut |_| rejects += 1,
    ) {
        assert_eq!(stats.rows_read, stats.rows_accepted + stats.rows_rejected);
        assert_eq!((rows, rejects), (stats.rows_accepted, stats.rows_rejected));
    }
    // And the diagnosis of whatever was accepted.
    let settings = FleetSettings::default();
    let mut state = FleetState::default();
    if state
        .ingest("fuzz.csv", bytes.as_slice(), &opts, store(), &settings)
        .is_ok()
    {
        let report = finish(&state, store(), &settings);
        let s = &report.summary;
        assert_eq!(s.rows_read, s.rows_accepted + s.rows_rejected);
    }
});
