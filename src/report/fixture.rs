//! A small fleet with a few faults, run through the real library, for the
//! format tests.

use crate::fleet::analysis::{finish, FleetReport, FleetSettings, FleetState};
use crate::fleet::ingest::IngestOptions;
use crate::profile::store::ProfileStore;

/// Invented demo fleet (names invented): a flooded stationary string of six
/// cells with one low cell, AGM blocks at a second site (one deeply
/// discharged, one cold, one read too soon after charge), and rows that the
/// reader must reject.
pub const CSV: &str = "\
unit_id,taken_at,profile,volts,site,string,position,temp_c,rest_h,after
C1,2024-01-05 09:00,flooded-stationary,2.05,North <Depot>,A,1,20,48,idle
C2,2024-01-05 09:00,flooded-stationary,2.052,North <Depot>,A,2,20,48,idle
C3,2024-01-05 09:00,flooded-stationary,2.049,North <Depot>,A,3,20,48,idle
C4,2024-01-05 09:00,flooded-stationary,2.01,North <Depot>,A,4,20,48,idle
C5,2024-01-05 09:00,flooded-stationary,2.051,North <Depot>,A,5,20,48,idle
C6,2024-01-05 09:00,flooded-stationary,2.048,North <Depot>,A,6,20,48,idle
C1,2024-02-05 09:00,flooded-stationary,2.049,North <Depot>,A,1,20,48,idle
C2,2024-02-05 09:00,flooded-stationary,2.051,North <Depot>,A,2,20,48,idle
C3,2024-02-05 09:00,flooded-stationary,2.048,North <Depot>,A,3,20,48,idle
C4,2024-02-05 09:00,flooded-stationary,2.0,North <Depot>,A,4,20,48,idle
C5,2024-02-05 09:00,flooded-stationary,2.05,North <Depot>,A,5,20,48,idle
C6,2024-02-05 09:00,flooded-stationary,2.047,North <Depot>,A,6,20,48,idle
C6,2024-02-05 09:00,flooded-stationary,2.047,North <Depot>,A,6,20,48,idle
B-01,2024-01-10 08:00,agm,12.80,Harbour Yard,,,15,24,idle
B-01,2024-02-10 08:00,agm,12.78,Harbour Yard,,,15,24,idle
B-02,2024-01-10 08:00,agm,12.10,Harbour Yard,,,15,24,idle
B-02,2024-02-10 08:00,agm,11.90,Harbour Yard,,,15,24,idle
B-03,2024-02-10 08:00,agm,12.05,Harbour Yard,,,-22,24,idle
B-04,2024-02-10 08:00,agm,12.95,Harbour Yard,,,20,0.5,charge
B-05,2024-02-10 08:00,agm,twelve,Harbour Yard,,,20,24,idle
B-06,2024-02-30 08:00,agm,12.7,Harbour Yard,,,20,24,idle
";

/// The report of a CSV text named `name`, read on one thread and analysed
/// with the default settings and the built-in profiles.
pub fn report_of(name: &str, text: &[u8]) -> (FleetReport, ProfileStore) {
    let store = ProfileStore::builtin().unwrap();
    let settings = FleetSettings::default();
    let mut state = FleetState::default();
    state
        .ingest(name, text, &IngestOptions::default(), &store, &settings)
        .unwrap();
    let report = finish(&state, &store, &settings);
    (report, store)
}

/// The fixture's report, analysed with the default settings and built-in profiles.
pub fn report() -> (FleetReport, ProfileStore) {
    report_of("demo.csv", CSV.as_bytes())
}

/// Invented float round (names invented): a 48 V string of four AGM monoblocs
/// read on float at two visits, the charger holding 54.24 V. Block 2 floats
/// low (so the others float higher), block 4 runs 13 K above the room, and the
/// string current more than doubles at the same voltage. The
/// site and string names carry characters every format must escape.
pub const FLOAT_CSV: &str = "\
unit_id,taken_at,profile,volts,cells,site,string,position,temp_c,after,float_current_a,ambient_c
E1,2024-01-08 10:00,agm,13.56,6,East <UPS> room,U|1,1,23.0,float,0.10,22.0
E2,2024-01-08 10:00,agm,13.56,6,East <UPS> room,U|1,2,23.2,float,0.10,22.0
E3,2024-01-08 10:00,agm,13.56,6,East <UPS> room,U|1,3,23.1,float,0.10,22.0
E4,2024-01-08 10:00,agm,13.56,6,East <UPS> room,U|1,4,24.0,float,0.10,22.0
E1,2024-02-08 10:00,agm,13.74,6,East <UPS> room,U|1,1,23.0,float,0.25,22.0
E2,2024-02-08 10:00,agm,13.26,6,East <UPS> room,U|1,2,23.3,float,0.25,22.0
E3,2024-02-08 10:00,agm,13.74,6,East <UPS> room,U|1,3,23.1,float,0.25,22.0
E4,2024-02-08 10:00,agm,13.50,6,East <UPS> room,U|1,4,35.0,float,0.25,22.0
";

/// The float fixture's report, analysed like [`report`].
pub fn float_report() -> (FleetReport, ProfileStore) {
    report_of("float.csv", FLOAT_CSV.as_bytes())
}

/// The context every format test uses: fixed time, colour off.
pub fn ctx(store: &ProfileStore) -> super::ReportContext<'_> {
    super::ReportContext {
        store,
        generated_at: "2024-02-11 07:30".into(),
        fleet_name: "Demo fleet <north & harbour>".into(),
        colour: false,
        threads: 1,
    }
}
