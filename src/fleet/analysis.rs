//! Fleet diagnosis: fold readings into per-unit summaries, then judge every
//! unit (latest reading, history, peers, hydrometer, ohmic, cold and heat) and
//! rank the fleet.

use super::ingest::{
    ingest, ingest_parallel, FleetRow, IngestError, IngestOptions, IngestStats, Parallelism,
    Rejected,
};
use super::shards::{add_lent_to, add_to, shard_of, warm, with_summary, SharedUnits, SHARDS};
use super::summary::{either, HistoryPoint, RowFacts, RowSoc, UnitSummary};
use crate::correct::{
    assess_without_budget, estimate, estimate_charge, Action, After, Reading, Reason, RestStatus,
    Setup,
};
use crate::profile::store::ProfileStore;
use crate::profile::Profile;
use crate::rules::{RuleId, Rules};
use crate::units::Celsius;
use serde::Serialize;
use std::collections::{BTreeMap, HashMap};
use std::sync::Arc;

/// Schema id of the fleet JSON report.
pub const FLEET_SCHEMA: &str = "restvolt.fleet/1";

/// Fleet-wide settings.
#[derive(Clone, Debug, Default)]
pub struct FleetSettings {
    /// Measurement setup for every reading.
    pub setup: Setup,
    /// Rules in effect.
    pub rules: Rules,
    /// Coldest temperature expected (for freeze risk), besides the coldest seen.
    pub min_temperature: Option<Celsius>,
    /// Leave out each unit's state-of-charge history ([`UnitReport::history`]),
    /// which only the HTML report's charts draw: a tenth of a large report's
    /// memory.
    pub without_chart_history: bool,
}

/// Per-unit summaries by unit id. A hash map, not an ordered one: every
/// row looks its unit up, and on 50,000 units a tree's string comparisons
/// were a tenth of the fold. Its order is arbitrary (it depends on the order
/// rows arrived in), so whatever the report takes from it in order goes
/// through [`FleetState::units_by_id`].
/// The summaries are boxed: the table then holds pointers, and growing it
/// moves and faults in 24 bytes an entry rather than a 300-byte summary.
pub type UnitMap = HashMap<Arc<str>, Box<UnitSummary>, rustc_hash::FxBuildHasher>;

/// The accumulating state of a fleet analysis: per-unit summaries by id.
#[derive(Clone, Debug, Default)]
pub struct FleetState {
    /// Per-unit summaries.
    pub units: UnitMap,
    /// Rejected rows: the [`REJECTED_CAP`] first by (file, line, reason) are
    /// kept, whatever order they arrived in (more may be held in between).
    pub rejected: Vec<Rejected>,
    /// Total rejected, including those beyond the cap.
    pub rejected_total: u64,
    /// Rows read.
    pub rows_read: u64,
    /// Rows accepted.
    pub rows_accepted: u64,
    /// Notices from ingestion.
    pub notices: Vec<String>,
}

/// Rejected rows kept for the report (the count is always exact).
pub const REJECTED_CAP: usize = 1000;

/// A row's profile from the store. A reader shares one copy of each profile
/// id between its rows, so the store (a sorted map of ids, compared as text)
/// is asked once for each run of rows that hold the same copy.
struct ProfileLookup<'s> {
    store: &'s ProfileStore,
    last: Option<(Arc<str>, Option<&'s Profile>)>,
}

impl<'s> ProfileLookup<'s> {
    fn new(store: &'s ProfileStore) -> Self {
        ProfileLookup { store, last: None }
    }

    /// The profile of that id, `None` when the store has none.
    fn get(&mut self, id: &Arc<str>) -> Option<&'s Profile> {
        match &self.last {
            Some((last, p)) if Arc::ptr_eq(last, id) => *p,
            _ => {
                let p = self.store.get(id).ok();
                self.last = Some((Arc::clone(id), p));
                p
            }
        }
    }
}

/// A row with what [`FleetState::prepare`] worked out for it.
#[derive(Clone, Debug)]
pub struct PreparedRow {
    row: FleetRow,
    facts: RowFacts,
}

impl FleetState {
    /// Fold one accepted row in (a row its profile cannot use is left out:
    /// [`FleetState::ingest`] rejects those).
    pub fn add_row(&mut self, row: FleetRow, store: &ProfileStore, settings: &FleetSettings) {
        if let Ok(p) = FleetState::prepare(row, store, settings) {
            self.add_prepared(p);
        }
    }

    /// The part of folding a row in that does not touch the state (its
    /// state of charge, above all), so that it can run on another thread.
    /// A row the reader accepted but its profile cannot use comes back as a
    /// reject.
    pub fn prepare(
        row: FleetRow,
        store: &ProfileStore,
        settings: &FleetSettings,
    ) -> Result<PreparedRow, Rejected> {
        FleetState::prepare_with(row, &mut ProfileLookup::new(store), settings)
    }

    /// [`FleetState::prepare`] with the profile found through `profiles`.
    fn prepare_with(
        row: FleetRow,
        profiles: &mut ProfileLookup<'_>,
        settings: &FleetSettings,
    ) -> Result<PreparedRow, Rejected> {
        let mut row = row;
        let profile = profiles.get(&row.profile);
        let facts = FleetState::facts(&mut row, profile, settings)?;
        Ok(PreparedRow { row, facts })
    }

    /// [`FleetState::prepare`] without moving the row (it is lent, and given
    /// back as it was), for the row's profile as found in the store (`None`
    /// when the store has no such profile).
    fn facts(
        row: &mut FleetRow,
        profile: Option<&Profile>,
        settings: &FleetSettings,
    ) -> Result<RowFacts, Rejected> {
        let (soc, rested, short_rest) = match profile {
            Some(p) => {
                if let Some(reason) = unusable(p, row) {
                    return Err(Rejected {
                        file: row.source.file.to_string(),
                        line: row.source.line,
                        reason,
                    });
                }
                row_soc(p, row, settings)
            }
            None => (None, false, false),
        };
        let ageing = row
            .temperature
            .map(|t| ageing_factor(t, settings.rules.get(RuleId::LifeHalving)));
        Ok(RowFacts {
            soc,
            rested,
            short_rest,
            ageing,
        })
    }

    /// Fold in a row made ready by [`FleetState::prepare`].
    pub fn add_prepared(&mut self, p: PreparedRow) {
        add_to(&mut self.units, p.row, p.facts);
    }

    /// Read one input into the state: rows are folded in as they stream by,
    /// rejects and counts recorded; returns the input's statistics.
    pub fn ingest<R: std::io::Read>(
        &mut self,
        name: &str,
        reader: R,
        opts: &IngestOptions,
        store: &ProfileStore,
        settings: &FleetSettings,
    ) -> Result<IngestStats, IngestError> {
        let mut rejects = RejectTally::default();
        let mut late = RejectTally::default();
        // Rows are read, made ready and folded in batches, each step over the
        // whole batch: row by row, the three steps' code evicted each other
        // from the instruction cache (cachegrind on 200,000 rows: 49 million
        // misses row by row, 6 million in batches).
        let mut rows: Vec<FleetRow> = Vec::with_capacity(BATCH_ROWS);
        let mut ready: Vec<Result<PreparedRow, Rejected>> = Vec::with_capacity(BATCH_ROWS);
        let mut profiles = ProfileLookup::new(store);
        let mut flush = |rows: &mut Vec<FleetRow>, state: &mut FleetState| {
            ready.extend(
                rows.drain(..)
                    .map(|r| FleetState::prepare_with(r, &mut profiles, settings)),
            );
            for p in ready.drain(..) {
                match p {
                    Ok(p) => state.add_prepared(p),
                    Err(r) => late.push(r),
                }
            }
        };
        let stats = ingest(
            name,
            reader,
            opts,
            &mut |r| {
                rows.push(r);
                if rows.len() == BATCH_ROWS {
                    flush(&mut rows, self);
                }
            },
            &mut |r| rejects.push(r),
        );
        flush(&mut rows, self);
        let mut stats = stats?;
        self.record(rejects, late, &mut stats);
        Ok(stats)
    }

    /// [`FleetState::ingest`] on several threads (see
    /// [`crate::fleet::ingest::parallel`]): the same state results, because
    /// the summaries do not depend on the order rows arrive in, nor on how
    /// they are grouped before they are merged. Each reading thread works
    /// out its chunk's states of charge and folds the rows into the state's
    /// summaries itself (`ChunkFold`), which are shared out into shards,
    /// each behind a lock, for the while (`SharedUnits`): this thread only
    /// collects the rejects. `progress` is told the bytes read so far.
    #[allow(clippy::too_many_arguments)]
    pub fn ingest_parallel<R: std::io::Read + Send>(
        &mut self,
        name: &str,
        reader: R,
        opts: &IngestOptions,
        store: &ProfileStore,
        settings: &FleetSettings,
        how: Parallelism,
        progress: &mut dyn FnMut(u64),
    ) -> Result<IngestStats, IngestError> {
        let mut rejects = RejectTally::default();
        let mut late = RejectTally::default();
        let units = SharedUnits::new(std::mem::take(&mut self.units));
        let read = ingest_parallel(
            name,
            reader,
            opts,
            how,
            &|rows: &mut [FleetRow], scratch: &mut FoldScratch| {
                ChunkFold::of(rows, scratch, store, settings, &units)
            },
            &mut |part: ChunkFold| part.late.into_iter().for_each(|r| late.push(r)),
            &mut |r| rejects.push(r),
            progress,
        );
        self.units = units.into_map();
        let mut stats = read?;
        self.record(rejects, late, &mut stats);
        Ok(stats)
    }

    /// Count an input in. `late` are rows the reader accepted but their
    /// profile cannot use: they are rejects too, so that rows read =
    /// accepted + rejected still holds.
    fn record(&mut self, rejects: RejectTally, late: RejectTally, stats: &mut IngestStats) {
        stats.rows_accepted -= late.count;
        stats.rows_rejected += late.count;
        self.rejected_total += rejects.count + late.count;
        self.rejected
            .extend(rejects.held.into_iter().chain(late.held));
        if self.rejected.len() >= 2 * REJECTED_CAP {
            self.trim_rejected();
        }
        self.rows_read += stats.rows_read;
        self.rows_accepted += stats.rows_accepted;
        for n in &stats.notices {
            if !self.notices.contains(n) {
                self.notices.push(n.clone());
            }
        }
    }

    /// Record a rejected row.
    pub fn add_rejected(&mut self, r: Rejected) {
        self.rejected_total += 1;
        self.rejected.push(r);
        if self.rejected.len() >= 2 * REJECTED_CAP {
            self.trim_rejected();
        }
    }

    /// Keep the first [`REJECTED_CAP`] rejected rows by (file, line, reason).
    fn trim_rejected(&mut self) {
        keep_first_rejected(&mut self.rejected);
    }

    /// The rejected rows kept for the report, in order.
    pub fn rejected_rows(&self) -> Vec<Rejected> {
        let mut kept = self.rejected.clone();
        first_rejected(&mut kept);
        kept
    }

    /// The units in the order of their ids: the one order that does not
    /// depend on how the rows arrived.
    pub fn units_by_id(&self) -> Vec<(&Arc<str>, &UnitSummary)> {
        let mut v: Vec<_> = self.units.iter().map(|(id, s)| (id, &**s)).collect();
        v.sort_unstable_by(|a, b| a.0.cmp(b.0));
        v
    }

    /// Combine another partition's state into this one (associative, order-free).
    pub fn merge(&mut self, other: FleetState) {
        for (id, s) in other.units {
            match self.units.get_mut(&id) {
                Some(mine) => mine.merge(*s),
                None => {
                    self.units.insert(id, s);
                }
            }
        }
        self.rejected_total += other.rejected_total;
        self.rejected.extend(other.rejected);
        self.trim_rejected();
        self.rows_read += other.rows_read;
        self.rows_accepted += other.rows_accepted;
        for n in other.notices {
            if !self.notices.contains(&n) {
                self.notices.push(n);
            }
        }
        self.notices.sort();
    }
}

/// What a reading thread hands on for one chunk, having folded its rows
/// into the state's summaries itself: the rows their profile cannot use,
/// and whether the rows were folded by unit.
#[derive(Default)]
pub(super) struct ChunkFold {
    pub(super) late: Vec<Rejected>,
    pub(super) by_unit: bool,
}

/// Whether two ids are the same: the same allocation for rows the reader
/// interned (nearly all), which needs no comparing of the text.
fn same_id(a: &Arc<str>, b: &Arc<str>) -> bool {
    Arc::ptr_eq(a, b) || **a == **b
}

/// A chunk is folded by unit when its rows average at least this many to a
/// run of the same unit.
const ROWS_PER_RUN_TO_FOLD: usize = 4;

/// A reading thread's space for [`ChunkFold::of`], kept from chunk to chunk.
#[derive(Default)]
pub(super) struct FoldScratch {
    facts: Vec<Option<RowFacts>>,
    points: Vec<HistoryPoint>,
    /// A chunk's rows by (turn, shard, place in the chunk).
    order: Vec<(u32, u32, u32)>,
}

impl ChunkFold {
    /// Work out every row's facts (its state of charge, above all), then
    /// fold the rows into `units`: two passes, so that each step's code
    /// stays in the instruction cache (see [`FleetState::ingest`]). What
    /// `rows` hold afterwards (partly what the summaries let go of) is only
    /// for filling again.
    ///
    /// When the rows come in runs of one unit (a file grouped by unit), each
    /// run goes in at once. Otherwise (a file sorted by time) the rows go in
    /// one by one, in the order of their units' shards, each shard locked
    /// once, and the summaries a shard's rows go to are all read before the
    /// first is folded (`warm`: their cache misses overlap).
    pub(super) fn of(
        rows: &mut [FleetRow],
        scratch: &mut FoldScratch,
        store: &ProfileStore,
        settings: &FleetSettings,
        units: &SharedUnits,
    ) -> ChunkFold {
        let runs = 1 + rows
            .windows(2)
            .filter(|w| !same_id(&w[0].unit_id, &w[1].unit_id))
            .count();
        let mut part = ChunkFold {
            late: Vec::new(),
            by_unit: runs * ROWS_PER_RUN_TO_FOLD <= rows.len(),
        };
        let facts = &mut scratch.facts;
        facts.clear();
        let mut profiles = ProfileLookup::new(store);
        for row in rows.iter_mut() {
            match FleetState::facts(row, profiles.get(&row.profile), settings) {
                Ok(f) => facts.push(Some(f)),
                Err(r) => {
                    part.late.push(r);
                    facts.push(None);
                }
            }
        }
        if part.by_unit {
            let mut end = rows.len();
            while let Some(last) = end.checked_sub(1).and_then(|i| rows.get(i)) {
                let start = rows[..end - 1]
                    .iter()
                    .rposition(|r| !same_id(&r.unit_id, &last.unit_id))
                    .map_or(0, |i| i + 1);
                let id = Arc::clone(&last.unit_id);
                let mut shard = units.lock(shard_of(&id));
                with_summary(&mut shard, &id, |s| {
                    s.add_run(
                        &mut rows[start..end],
                        &facts[start..end],
                        &mut scratch.points,
                    )
                });
                drop(shard);
                end = start;
            }
        } else {
            let order = &mut scratch.order;
            // Chunks go round the shards from different places, so that two
            // threads do not move from shard to shard in step, waiting for
            // each other at every one.
            let turn = rows.first().map_or(0, |r| r.source.line as usize);
            order.clear();
            order.extend(
                rows.iter()
                    .zip(facts.iter())
                    .enumerate()
                    .filter(|(_, (_, f))| f.is_some())
                    .map(|(i, (row, _))| {
                        let shard = shard_of(&row.unit_id);
                        (
                            (shard.wrapping_add(turn) % SHARDS) as u32,
                            shard as u32,
                            i as u32,
                        )
                    }),
            );
            order.sort_unstable();
            for same_shard in order.chunk_by(|a, b| a.1 == b.1) {
                let mut shard = units.lock(same_shard[0].1 as usize);
                warm(
                    &shard,
                    same_shard
                        .iter()
                        .filter_map(|&(_, _, i)| rows.get(i as usize)),
                );
                for &(_, _, i) in same_shard {
                    let i = i as usize;
                    if let (Some(row), Some(Some(f))) = (rows.get_mut(i), facts.get(i)) {
                        add_lent_to(&mut shard, row, *f);
                    }
                }
            }
        }
        facts.clear();
        part
    }
}

/// Rejected rows as an input is read: every one counted, at most twice
/// [`REJECTED_CAP`] held (the first [`REJECTED_CAP`] by (file, line, reason)
/// survive every trim), so that a file of mostly bad rows is read in memory
/// that does not grow with them. Held in full, the 735,000 rejects of a
/// generated file dated past today took 150 MB for four units.
#[derive(Default)]
struct RejectTally {
    held: Vec<Rejected>,
    count: u64,
}

impl RejectTally {
    fn push(&mut self, r: Rejected) {
        self.count += 1;
        self.held.push(r);
        if self.held.len() >= 2 * REJECTED_CAP {
            keep_first_rejected(&mut self.held);
        }
    }
}

/// Sort rejected rows by (file, line, reason) and keep the first [`REJECTED_CAP`].
fn first_rejected(rows: &mut Vec<Rejected>) {
    keep_first_rejected(rows);
    rows.sort_by(reject_order);
}

/// Keep the first [`REJECTED_CAP`] rejected rows by (file, line, reason), in
/// no particular order: a selection, not a sort, since a file of mostly bad
/// rows trims its list every [`REJECTED_CAP`] rejects.
fn keep_first_rejected(rows: &mut Vec<Rejected>) {
    if rows.len() > REJECTED_CAP {
        rows.select_nth_unstable_by(REJECTED_CAP - 1, reject_order);
        rows.truncate(REJECTED_CAP);
    }
}

fn reject_order(a: &Rejected, b: &Rejected) -> std::cmp::Ordering {
    (&a.file, a.line, &a.reason).cmp(&(&b.file, b.line, &b.reason))
}

/// Why a row the reader accepted cannot be assessed with its profile, in the
/// reader's reject style (column, what is wrong, what is expected); `None`
/// when it can. The reader knows profile ids, not their cell counts or types.
fn unusable(p: &Profile, row: &FleetRow) -> Option<String> {
    if row.sg.is_empty() {
        return None;
    }
    if !p.hydrometer_usable() {
        return Some(format!(
            "column `sg`: profile '{}' is valve-regulated: its electrolyte cannot be sampled, so SG readings do not apply",
            p.id()
        ));
    }
    let cells = row.cells.unwrap_or(p.cells());
    if row.sg.len() > 1 && row.sg.len() != cells as usize {
        return Some(format!(
            "column `sg`: {} values for {cells} cells (profile '{}'): give one per cell, or one mean value",
            row.sg.len(),
            p.id()
        ));
    }
    None
}

/// Heat-ageing factor at a temperature: 2^((T − 25)/N) above 25 °C, 1 below.
pub fn ageing_factor(t: Celsius, halving_c: f64) -> f64 {
    if t.0 <= 25.0 || halving_c <= 0.0 {
        1.0
    } else {
        2f64.powf((t.0 - 25.0) / halving_c)
    }
}

/// State of charge of a row for the history (with its interval, where a
/// chart will show it), whether it was rested, and whether its rest was too
/// short.
fn row_soc(
    p: &Profile,
    row: &mut FleetRow,
    settings: &FleetSettings,
) -> (Option<RowSoc>, bool, bool) {
    if row.after == After::Float {
        return (None, false, false);
    }
    let short =
        matches!(row.rest, Some(h) if h.0 < p.minimum_rest_hours()) && row.after != After::Idle;
    let rested = !short && (row.rest.is_some() || row.after == After::Idle);
    // The hydrometer values are lent to the reading and taken back, not
    // copied: a copy was an allocation for every flooded row.
    let reading = Reading {
        sg: std::mem::take(&mut row.sg),
        ..to_reading_without_sg(row)
    };
    let (setup, rules) = (&settings.setup, &settings.rules);
    // The two inversions of the curve for an interval were a tenth of a
    // reading's cost, for a chart only the HTML report draws.
    let soc = if settings.without_chart_history {
        match estimate_charge(p, &reading, setup, rules) {
            Ok(c) if !c.voltage_discredited => Some((c.soc_percent, None)),
            _ => None,
        }
    } else {
        match estimate(p, &reading, setup, rules) {
            Ok(a) if !a.voltage_discredited() => {
                Some((a.soc_percent, Some(a.soc_interval_percent)))
            }
            _ => None,
        }
    };
    row.sg = reading.sg;
    match soc {
        Some(soc) => (Some(soc), rested, short),
        None => (None, false, short),
    }
}

fn to_reading_without_sg(row: &FleetRow) -> Reading {
    Reading {
        volts: row.volts,
        sg: Vec::new(),
        cells: row.cells,
        temperature: row.temperature,
        rest: row.rest,
        after: row.after,
    }
}

fn to_reading(row: &FleetRow) -> Reading {
    Reading {
        sg: row.sg.clone(),
        ..to_reading_without_sg(row)
    }
}

/// One reason in the fleet report.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct FleetReason {
    /// Rule id.
    pub rule: String,
    /// What this reason calls for.
    pub action: Action,
    /// Evidence.
    pub detail: String,
    /// Rule source: shared text, since the same few sources stand under
    /// tens of thousands of reasons.
    pub source: Arc<str>,
}

impl From<Reason> for FleetReason {
    fn from(r: Reason) -> FleetReason {
        FleetReason::with_source(r, Arc::from)
    }
}

impl From<&Reason> for FleetReason {
    fn from(r: &Reason) -> FleetReason {
        FleetReason::from(r.clone())
    }
}

impl FleetReason {
    /// `r`, its source made shared text by `share`.
    fn with_source(r: Reason, share: impl FnOnce(String) -> Arc<str>) -> FleetReason {
        FleetReason {
            rule: r.rule,
            action: r.action,
            detail: r.detail,
            source: share(r.source),
        }
    }
}

/// Sources shared among the reasons a thread writes, so that the same few
/// texts are held once: copied into every reason, they were 8.8 MB of a
/// 50,000-unit report's memory, and writing it out read them from 73,000
/// places instead of 20 (the JSON writer's slowest part).
#[derive(Default)]
struct SharedTexts(std::collections::HashSet<Arc<str>, rustc_hash::FxBuildHasher>);

impl SharedTexts {
    /// The shared copy of `text`.
    fn get(&mut self, text: &str) -> Arc<str> {
        match self.0.get(text) {
            Some(t) => Arc::clone(t),
            None => {
                let t: Arc<str> = Arc::from(text);
                self.0.insert(Arc::clone(&t));
                t
            }
        }
    }

    /// A reason of the corrector's, its source shared.
    fn reason(&mut self, r: Reason) -> FleetReason {
        FleetReason::with_source(r, |s| self.get(&s))
    }

    /// A reason under a rule of the rules table.
    fn rule_reason(
        &mut self,
        action: Action,
        rule: RuleId,
        detail: String,
        rules: &Rules,
    ) -> FleetReason {
        FleetReason {
            rule: rule.id().to_string(),
            action,
            detail,
            source: self.get(&rules.source(rule)),
        }
    }
}

/// One unit's diagnosis.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct UnitReport {
    /// Rank (1 = most urgent).
    pub rank: usize,
    /// Unit id.
    pub unit_id: String,
    /// Site.
    pub site: Option<String>,
    /// Series string.
    pub string: Option<String>,
    /// Position in the string.
    pub position: Option<u32>,
    /// Profile id.
    pub profile: String,
    /// Recommended action.
    pub action: Action,
    /// State of charge at the latest reading (None for a unit on float, for
    /// one with a suspect shorted cell, and for a voltage that no cell count
    /// explains without a hydrometer reading: those give no charge of the
    /// whole unit).
    pub soc_percent: Option<f64>,
    /// Its 95 % interval.
    pub soc_interval_percent: Option<[f64; 2]>,
    /// Latest rest voltage at 25 °C per cell.
    pub ocv_per_cell_25c_volts: Option<f64>,
    /// Flag codes.
    pub flags: Vec<String>,
    /// Every reason, most urgent first.
    pub reasons: Vec<FleetReason>,
    /// Mean SG 25/25 of the latest hydrometer reading.
    pub sg_mean_25c: Option<f64>,
    /// Readings of this unit.
    pub readings: u64,
    /// Latest reading's time.
    pub latest_at: String,
    /// Trend of rested state of charge, % per 30 days.
    pub trend_percent_per_30_days: Option<f64>,
    /// Rested readings behind the trend.
    pub trend_readings: i64,
    /// Days below the recharge threshold in the current stretch (within the kept history).
    pub days_below_recharge: Option<f64>,
    /// Peer deviation of the rested per-cell voltage, mV.
    pub peer_deviation_mv: Option<f64>,
    /// Robust z-score among peers.
    pub peer_z: Option<f64>,
    /// Ohmic value above baseline, %.
    pub ohmic_rise_percent: Option<f64>,
    /// Coldest temperature seen or expected, °C.
    pub coldest_celsius: Option<f64>,
    /// Freezing point at the latest state of charge.
    pub freezing_point_celsius: Option<f64>,
    /// Mean heat-ageing factor (1 = ageing as at 25 °C).
    pub heat_ageing_factor: Option<f64>,
    /// History of rested state of charge (time, soc) for charts, oldest first.
    #[serde(skip)]
    pub history: Vec<(chrono::NaiveDateTime, f64, [f64; 2])>,
    /// Latest temperature.
    #[serde(skip)]
    pub latest_temperature: Option<f64>,
}

/// The whole fleet report.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct FleetReport {
    /// Schema id.
    pub schema: &'static str,
    /// Summary counts.
    pub summary: Summary,
    /// Units, most urgent first. Boxed: the ranking moves them as pointers,
    /// where moving 50,000 reports of about 600 bytes cost a twentieth of a
    /// large run on one thread.
    pub units: Vec<Box<UnitReport>>,
    /// Strings whose latest readings were taken on float charge, with the float checks.
    pub float_strings: Vec<crate::float::StringFloatAnalysis>,
    /// Rejected rows (first [`REJECTED_CAP`]).
    pub rejected: Vec<Rejected>,
    /// Notices from ingestion.
    pub notices: Vec<String>,
}

/// Summary counts.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct Summary {
    /// Rows read.
    pub rows_read: u64,
    /// Rows accepted.
    pub rows_accepted: u64,
    /// Rows rejected.
    pub rows_rejected: u64,
    /// Units.
    pub units: usize,
    /// Units by action, in precedence order.
    pub by_action: BTreeMap<String, usize>,
    /// Units by site, then action.
    pub by_site: BTreeMap<String, BTreeMap<String, usize>>,
    /// Duplicate readings found.
    pub duplicate_readings: u64,
    /// Readings with too little rest.
    pub short_rest_readings: u64,
    /// First and last reading time.
    pub period: Option<[String; 2]>,
    /// Profiles used.
    pub profiles: Vec<String>,
}

struct Judged {
    report: Box<UnitReport>,
    peer_key: Option<GroupKey>,
    sg_key: Option<GroupKey>,
    /// The latest reading was on float (its float check's findings join it).
    on_float: bool,
}

/// Put a report's reasons in order of urgency (stably: a reason added later
/// stays after the earlier ones of the same urgency), sort and dedup its
/// flags, and take the most urgent reason's action. Done once as a unit is
/// judged and again for the few that the rules across units add to.
fn settle(report: &mut UnitReport) {
    report.reasons.sort_by_key(|r| r.action);
    report.action = report
        .reasons
        .first()
        .map(|r| r.action)
        .unwrap_or(Action::Serviceable);
    report.flags.sort();
    report.flags.dedup();
}

/// A group of units compared with each other: (site, string, profile) of the
/// latest row, shared with the row rather than copied.
type GroupKey = (Option<Arc<str>>, Option<Arc<str>>, Arc<str>);

/// What the report takes from the state besides the units' own judgements.
struct Overview {
    float_strings: Vec<crate::float::StringFloatAnalysis>,
    float_findings: BTreeMap<String, UnitFloatFindings>,
    period: Option<[String; 2]>,
    profiles: Vec<String>,
    duplicate_readings: u64,
    short_rest_readings: u64,
    rows_read: u64,
    rows_accepted: u64,
    rows_rejected: u64,
    rejected: Vec<Rejected>,
    notices: Vec<String>,
}

/// What the report's summary counts over the units' summaries. Mergeable,
/// so that each judging thread counts the units it judges.
#[derive(Default)]
struct UnitCounts {
    first: Option<chrono::NaiveDateTime>,
    last: Option<chrono::NaiveDateTime>,
    profiles: Vec<String>,
    duplicate_readings: u64,
    short_rest_readings: u64,
}

impl UnitCounts {
    /// Count a unit in; whether its latest reading is a float voltage (the
    /// unit then goes to the float checks).
    fn count(&mut self, s: &UnitSummary) -> bool {
        self.duplicate_readings += s.duplicates();
        self.short_rest_readings += s.short_rest;
        let (Some(f), Some((l, row))) = (s.first_at, s.latest()) else {
            return false;
        };
        self.first = Some(self.first.map_or(f, |x| x.min(f)));
        self.last = Some(self.last.map_or(l.taken_at, |x| x.max(l.taken_at)));
        if !self.profiles.iter().any(|p| **p == *row.profile) {
            self.profiles.push(row.profile.to_string());
        }
        row.after == After::Float && row.volts.is_some()
    }

    fn merge(&mut self, other: UnitCounts) {
        self.first = either(self.first, other.first, Ord::min);
        self.last = either(self.last, other.last, Ord::max);
        for p in other.profiles {
            if !self.profiles.contains(&p) {
                self.profiles.push(p);
            }
        }
        self.duplicate_readings += other.duplicate_readings;
        self.short_rest_readings += other.short_rest_readings;
    }
}

/// What the report takes from the state as a whole.
struct Totals {
    rows_read: u64,
    rows_accepted: u64,
    rows_rejected: u64,
    rejected: Vec<Rejected>,
    notices: Vec<String>,
}

impl Totals {
    fn of(state: &FleetState) -> Totals {
        Totals {
            rows_read: state.rows_read,
            rows_accepted: state.rows_accepted,
            rows_rejected: state.rejected_total,
            rejected: state.rejected_rows(),
            notices: state.notices.clone(),
        }
    }
}

/// The overview from the units' counts, the units read on float (for the
/// float checks) and the state's totals.
fn overview(
    counts: UnitCounts,
    on_float: Vec<(&Arc<str>, &UnitSummary)>,
    totals: Totals,
    store: &ProfileStore,
    rules: &Rules,
) -> Overview {
    let UnitCounts {
        first,
        last,
        mut profiles,
        duplicate_readings,
        short_rest_readings,
    } = counts;
    profiles.sort();
    let (float_strings, float_findings) = float_strings(on_float, store, rules);
    Overview {
        float_strings,
        float_findings,
        period: first
            .zip(last)
            .map(|(f, l)| [minute_text(f), minute_text(l)]),
        profiles,
        duplicate_readings,
        short_rest_readings,
        rows_read: totals.rows_read,
        rows_accepted: totals.rows_accepted,
        rows_rejected: totals.rows_rejected,
        rejected: totals.rejected,
        notices: totals.notices,
    }
}

/// Judge every unit and rank the fleet.
pub fn finish(state: &FleetState, store: &ProfileStore, settings: &FleetSettings) -> FleetReport {
    let mut counts = UnitCounts::default();
    let on_float = state
        .units
        .iter()
        .filter(|(_, s)| counts.count(s))
        .map(|(id, s)| (id, &**s))
        .collect();
    let overview = overview(counts, on_float, Totals::of(state), store, &settings.rules);
    let mut texts = SharedTexts::default();
    let mut judged: Vec<Judged> = state
        .units_by_id()
        .into_iter()
        .filter_map(|(id, s)| judge_unit(id, s, store, settings, &mut texts))
        .collect();
    let touched = peer_and_string_rules(&mut judged, store, &settings.rules, &mut texts);
    rank(overview, judged, touched, 1)
}

/// [`finish`], consuming the state: each unit's summary is dropped once it
/// is judged, so the state and the report are never both held whole; the
/// report is the same.
pub fn finish_owned(
    state: FleetState,
    store: &ProfileStore,
    settings: &FleetSettings,
) -> FleetReport {
    finish_owned_on(state, store, settings, 1)
}

/// Rows read before they are made ready and folded in, on one thread.
const BATCH_ROWS: usize = 1024;

/// Units below which [`finish_owned_on`] judges on one thread whatever it is
/// given: starting threads costs more than a few thousand units take.
pub const PARALLEL_JUDGING_UNITS: usize = 4096;

/// Units in a run that a judging thread takes at a time.
const JUDGING_RUN_UNITS: usize = 1024;

/// [`finish_owned`] with the units judged on up to `threads` threads, which
/// take contiguous runs of them in turn; the report is the same on any
/// number of threads (tested).
pub fn finish_owned_on(
    state: FleetState,
    store: &ProfileStore,
    settings: &FleetSettings,
    threads: usize,
) -> FleetReport {
    let mut state = state;
    let totals = Totals::of(&state);
    // The summaries are judged where they lie in the map, through a list of
    // references (moved out into a list of their own, 50,000 summaries were
    // 15 MB more to copy, sort and fault in).
    let mut units: Vec<(&Arc<str>, &mut UnitSummary)> = state
        .units
        .iter_mut()
        .map(|(id, s)| (id, &mut **s))
        .collect();
    // Each summary is emptied as soon as its unit is judged, so that the
    // reports' memory can grow into what the summaries free. Units are judged
    // in the order their histories lie in memory, not by id: freed in id
    // order, the summaries of a file sorted by time (whose units' memory is
    // interleaved) left no allocator page empty until the end, and the peak
    // was 30 MB higher. The order changes nothing else: judging a unit depends
    // on its summary alone, and the ranking orders the units by id where
    // their urgency ties.
    units.sort_unstable_by_key(|(_, s)| s.history.as_ptr() as usize);
    let threads = if units.len() < PARALLEL_JUDGING_UNITS {
        1
    } else {
        threads.clamp(1, units.len())
    };
    // Each run also counts its units for the overview, while their summaries
    // are at hand, and keeps a copy of the summaries of units read on float,
    // with their ids, for the float checks. A copy, in new
    // memory: left where they were, the few summaries kept (a unit in 13 in
    // the bench's fleet) held on to the allocator pages they share with the
    // rest, and a file sorted by time peaked at 151 MB instead of 124 MB.
    let judge_run = |units: &mut [(&Arc<str>, &mut UnitSummary)], texts: &mut SharedTexts| {
        let mut judged = Vec::with_capacity(units.len());
        let mut counts = UnitCounts::default();
        let mut on_float = Vec::new();
        for (id, s) in units.iter_mut() {
            judged.extend(judge_unit(id, s, store, settings, texts));
            if counts.count(s) {
                on_float.push((Arc::clone(id), s.clone()));
            }
            **s = UnitSummary::default();
        }
        (judged, counts, on_float)
    };
    let runs = if threads == 1 {
        vec![judge_run(&mut units, &mut SharedTexts::default())]
    } else {
        // Runs of JUDGING_RUN_UNITS, taken in turn by whichever thread is
        // free: halves, one per thread, finished up to a fifth apart.
        let next = std::sync::Mutex::new(units.chunks_mut(JUDGING_RUN_UNITS).enumerate());
        let mut runs: Vec<_> = std::thread::scope(|scope| {
            let threads: Vec<_> = (0..threads)
                .map(|_| {
                    scope.spawn(|| {
                        let mut done = Vec::new();
                        let mut texts = SharedTexts::default();
                        loop {
                            let run = next
                                .lock()
                                .unwrap_or_else(std::sync::PoisonError::into_inner)
                                .next();
                            let Some((i, units)) = run else { break done };
                            done.push((i, judge_run(units, &mut texts)));
                        }
                    })
                })
                .collect();
            threads
                .into_iter()
                .flat_map(|t| t.join().unwrap_or_else(|e| std::panic::resume_unwind(e)))
                .collect()
        });
        // In the units' order again, as on one thread.
        runs.sort_unstable_by_key(|(i, _)| *i);
        runs.into_iter().map(|(_, run)| run).collect()
    };
    let mut judged = Vec::with_capacity(units.len());
    let mut counts = UnitCounts::default();
    let mut float_units = Vec::new();
    for (j, c, f) in runs {
        judged.extend(j);
        counts.merge(c);
        float_units.extend(f);
    }
    drop(units);
    let on_float = float_units.iter().map(|(id, s)| (id, s)).collect();
    let rules = &settings.rules;
    // What is left before the ranking is three independent pieces: freeing
    // the emptied state, the float checks and the rules across the judged
    // units. One after the other they were over a third of finishing a
    // 50,000-unit fleet with every core but one idle.
    let mut texts = SharedTexts::default();
    let (overview, touched) = if threads == 1 {
        drop(state);
        let overview = overview(counts, on_float, totals, store, rules);
        (
            overview,
            peer_and_string_rules(&mut judged, store, rules, &mut texts),
        )
    } else {
        std::thread::scope(|scope| {
            scope.spawn(move || drop(state));
            let float = scope.spawn(move || overview(counts, on_float, totals, store, rules));
            let touched = peer_and_string_rules(&mut judged, store, rules, &mut texts);
            let overview = float
                .join()
                .unwrap_or_else(|e| std::panic::resume_unwind(e));
            (overview, touched)
        })
    };
    rank(overview, judged, touched, threads)
}

/// The rules across units that need only the judged units (peers, a
/// string's hydrometer readings); returns the indices of the reports they
/// add a reason to, to be settled again.
fn peer_and_string_rules(
    judged: &mut [Judged],
    store: &ProfileStore,
    rules: &Rules,
    texts: &mut SharedTexts,
) -> Vec<usize> {
    let mut touched: Vec<usize> = Vec::new();
    // Peers: same string (else same site) and profile, rested latest readings.
    let groups = group_values(judged, |j| (&j.peer_key, j.report.ocv_per_cell_25c_volts));
    for members in &groups {
        if members.len() < 4 {
            continue;
        }
        let mut vs: Vec<f64> = members.iter().map(|m| m.1).collect();
        vs.sort_by(f64::total_cmp);
        let median = median_sorted(&vs);
        let mut dev: Vec<f64> = vs.iter().map(|v| (v - median).abs()).collect();
        dev.sort_by(f64::total_cmp);
        let mad = median_sorted(&dev).max(0.0005);
        for (i, v) in members {
            let z = 0.6745 * (v - median) / mad;
            let delta_mv = (v - median) * 1000.0;
            let r = &mut judged[*i].report;
            r.peer_z = Some(round(z, 2));
            r.peer_deviation_mv = Some(round(delta_mv, 1));
            if z.abs() > rules.get(RuleId::PeerZ) && delta_mv.abs() >= rules.get(RuleId::PeerMinMv)
            {
                touched.push(*i);
                r.flags.push("peer-outlier".into());
                r.reasons.push(texts.rule_reason(
                    Action::CapacityTest,
                    RuleId::PeerZ,
                    format!(
                        "{delta_mv:+.0} mV per cell from the median of {} peers (robust z {z:.1})",
                        members.len()
                    ),
                    rules,
                ));
            }
        }
    }

    // Hydrometer across a string of single cells: a cell more than the rule
    // below the string's mean (IEEE Std 450-1987 §4.4).
    let sg_groups = group_values(judged, |j| (&j.sg_key, j.report.sg_mean_25c));
    for members in &sg_groups {
        if members.len() < 3 {
            continue;
        }
        let mean = order_free_mean(members.iter().map(|m| m.1).collect());
        let limit = rules.get(RuleId::SgCellBelowMean);
        for (i, sg) in members {
            if mean - sg > limit + 1e-9 {
                touched.push(*i);
                let r = &mut judged[*i].report;
                let allowed = store
                    .get(&r.profile)
                    .map(|p| p.spec.equalize_allowed.value)
                    .unwrap_or(false);
                r.flags.push("low-cell-sg".into());
                r.reasons.push(texts.rule_reason(
                    if allowed { Action::Equalize } else { Action::CapacityTest },
                    RuleId::SgCellBelowMean,
                    format!("SG {sg:.3} is {:.3} below the string's mean {mean:.3} ({} cells, corrected to 25 °C)", mean - sg, members.len()),
                    rules,
                ));
            }
        }
    }

    touched
}

/// The float checks' findings added to the units read on float, the final
/// actions, the ranking and the summary; `touched` are the reports
/// [`peer_and_string_rules`] added to. For a large fleet this is done in
/// parts on up to `threads` threads (one after the other, with the other
/// core idle, it was 23 ms of a 50,000-unit fleet), and the parts' sorted
/// keys merged.
fn rank(
    overview: Overview,
    mut judged: Vec<Judged>,
    touched: Vec<usize>,
    threads: usize,
) -> FleetReport {
    let Overview {
        float_strings,
        float_findings,
        ..
    } = overview;
    let findings = std::sync::Mutex::new(float_findings);
    let mut settle_again = vec![false; judged.len()];
    for i in touched {
        if let Some(again) = settle_again.get_mut(i) {
            *again = true;
        }
    }
    let parts = if judged.len() < PARALLEL_JUDGING_UNITS {
        1
    } else {
        threads.clamp(1, judged.len())
    };
    let size = judged.len().div_ceil(parts).max(1);
    let parts: Vec<(Vec<RankKey>, SiteActionCounts<'_>)> = if parts == 1 {
        add_float_findings(&mut judged, &settle_again, &findings);
        vec![rank_part(0, &judged)]
    } else {
        std::thread::scope(|scope| {
            for (chunk, again) in judged.chunks_mut(size).zip(settle_again.chunks(size)) {
                let findings = &findings;
                scope.spawn(move || add_float_findings(chunk, again, findings));
            }
        });
        std::thread::scope(|scope| {
            let handles: Vec<_> = judged
                .chunks(size)
                .enumerate()
                .map(|(k, chunk)| scope.spawn(move || rank_part(k * size, chunk)))
                .collect();
            handles
                .into_iter()
                .map(|h| h.join().unwrap_or_else(|e| std::panic::resume_unwind(e)))
                .collect()
        })
    };
    let mut by_action: BTreeMap<String, usize> = BTreeMap::new();
    let mut by_site: BTreeMap<String, BTreeMap<String, usize>> = BTreeMap::new();
    let merge = parts.len() > 1;
    let mut order: Vec<RankKey> = Vec::with_capacity(judged.len());
    for (keys, counts) in parts {
        order.extend(keys);
        for ((site, action), n) in counts {
            *by_action.entry(action.as_str().to_string()).or_default() += n;
            *by_site
                .entry(site.to_string())
                .or_default()
                .entry(action.as_str().to_string())
                .or_default() += n;
        }
    }
    if merge {
        // The parts are sorted runs, which the stable sort finds and merges.
        order.sort_by(|a, b| by_urgency(a, b, |k| judged.get(k.index)));
    }
    let mut slots: Vec<Option<Box<UnitReport>>> =
        judged.into_iter().map(|j| Some(j.report)).collect();
    let units: Vec<Box<UnitReport>> = order
        .iter()
        .filter_map(|k| slots.get_mut(k.index).and_then(Option::take))
        .enumerate()
        .map(|(i, mut report)| {
            report.rank = i + 1;
            report
        })
        .collect();

    FleetReport {
        schema: FLEET_SCHEMA,
        summary: Summary {
            rows_read: overview.rows_read,
            rows_accepted: overview.rows_accepted,
            rows_rejected: overview.rows_rejected,
            units: units.len(),
            by_action,
            by_site,
            duplicate_readings: overview.duplicate_readings,
            short_rest_readings: overview.short_rest_readings,
            period: overview.period,
            profiles: overview.profiles,
        },
        units,
        float_strings,
        rejected: overview.rejected,
        notices: overview.notices,
    }
}

/// A unit read on float takes its float check's flags and reasons (and the
/// string's that concern it), so that its action counts like any other; the
/// units added to, and those marked in `settle_again`, are settled again.
/// The group keys, which the rules across units were the last to need, are
/// let go of here (their shared names' counts were 3 ms of a 50,000-unit
/// ranking on one thread).
fn add_float_findings(
    part: &mut [Judged],
    settle_again: &[bool],
    float_findings: &std::sync::Mutex<BTreeMap<String, UnitFloatFindings>>,
) {
    for (j, &again) in part.iter_mut().zip(settle_again) {
        (j.peer_key, j.sg_key) = (None, None);
        let found = if j.on_float {
            float_findings
                .lock()
                .unwrap_or_else(std::sync::PoisonError::into_inner)
                .remove(&j.report.unit_id)
        } else {
            None
        };
        let added = match found {
            Some(f) => {
                j.report.flags.extend(f.flags);
                j.report.reasons.extend(f.reasons);
                true
            }
            None => false,
        };
        if again || added {
            settle(&mut j.report);
        }
    }
}

/// One part of [`rank`], the units `start..` of the judged list: its
/// ranking keys, sorted, and its units counted by (site, action).
fn rank_part(start: usize, part: &[Judged]) -> (Vec<RankKey>, SiteActionCounts<'_>) {
    let mut counts: SiteActionCounts<'_> = HashMap::default();
    let mut keys: Vec<RankKey> = part
        .iter()
        .enumerate()
        .map(|(i, j)| {
            let site = j.report.site.as_deref().unwrap_or("(no site)");
            *counts.entry((site, j.report.action)).or_default() += 1;
            RankKey {
                action: j.report.action,
                soc: total_order_key(j.report.soc_percent.unwrap_or(101.0)),
                id_prefix: id_prefix(&j.report.unit_id),
                index: start + i,
            }
        })
        .collect();
    keys.sort_unstable_by(|a, b| by_urgency(a, b, |k| part.get(k.index - start)));
    (keys, counts)
}

/// The ranking's order: most urgent action first, then lowest state of
/// charge (none last), then unit id (`judged` finds a key's unit). With the
/// id's first 16 bytes in the key, only the pointers move and whole ids are
/// compared only where those tie. Ids are unique (they are the state's
/// keys), so the order is total and any sort exact.
fn by_urgency<'a>(
    a: &RankKey,
    b: &RankKey,
    judged: impl Fn(&RankKey) -> Option<&'a Judged>,
) -> std::cmp::Ordering {
    (a.action, a.soc, a.id_prefix)
        .cmp(&(b.action, b.soc, b.id_prefix))
        .then_with(|| {
            let id = |k: &RankKey| judged(k).map(|j| &j.report.unit_id);
            id(a).cmp(&id(b))
        })
}

/// Units counted by (site, action), under the reports' names.
type SiteActionCounts<'a> = HashMap<(&'a str, Action), usize, rustc_hash::FxBuildHasher>;

/// A unit's place in the ranking, and where its report is.
struct RankKey {
    action: Action,
    soc: i64,
    id_prefix: u128,
    index: usize,
}

/// The first 16 bytes of an id, padded with zeros, as a number that orders
/// as the ids do wherever two prefixes differ (a shorter id's padding sorts
/// first, as the shorter string does); equal prefixes need the whole ids.
fn id_prefix(id: &str) -> u128 {
    let mut b = [0u8; 16];
    let n = id.len().min(16);
    b[..n].copy_from_slice(&id.as_bytes()[..n]);
    u128::from_be_bytes(b)
}

/// An integer that orders as `f64::total_cmp` orders `x` (the same bit
/// trick the standard library's `total_cmp` uses), for sort keys.
fn total_order_key(x: f64) -> i64 {
    let bits = x.to_bits() as i64;
    bits ^ (((bits >> 63) as u64) >> 1) as i64
}

/// The one-sided 95 % quantile of Student's t with `dof` degrees of freedom
/// (infinite for none). The inverse CDF is an iterative search in statrs and
/// was a sixth of judging a unit; the small degrees of freedom that nearly
/// every unit has are worked out once.
fn student_t_95(dof: u64) -> f64 {
    const TABULATED: u64 = 256;
    static TABLE: std::sync::OnceLock<Vec<f64>> = std::sync::OnceLock::new();
    let exact = |dof: u64| {
        statrs::distribution::StudentsT::new(0.0, 1.0, dof as f64)
            .map(|d| statrs::distribution::ContinuousCDF::inverse_cdf(&d, 0.95))
            .unwrap_or(f64::INFINITY)
    };
    if dof >= TABULATED {
        return exact(dof);
    }
    let table = TABLE.get_or_init(|| (0..TABULATED).map(exact).collect());
    table.get(dof as usize).copied().unwrap_or(f64::INFINITY)
}

/// Judged units with a group key and a value: each group's (index, value)
/// pairs, in no particular order of groups (each group's rule touches only
/// its own members, so the order cannot change a report).
fn group_values(
    judged: &[Judged],
    key_and_value: impl Fn(&Judged) -> (&Option<GroupKey>, Option<f64>),
) -> Vec<Vec<(usize, f64)>> {
    // Keys borrowed, not cloned: one group per string or site, but a key per unit.
    let mut groups: HashMap<&GroupKey, Vec<(usize, f64)>, rustc_hash::FxBuildHasher> =
        HashMap::default();
    for (i, j) in judged.iter().enumerate() {
        if let (Some(k), Some(v)) = key_and_value(j) {
            groups.entry(k).or_default().push((i, v));
        }
    }
    groups.into_values().collect()
}

/// The mean of `values`, summed in ascending order, so that it does not
/// depend on the order the units were judged in (floating-point addition is
/// not associative, and the judging order follows memory, not ids).
fn order_free_mean(mut values: Vec<f64>) -> f64 {
    values.sort_by(f64::total_cmp);
    values.iter().sum::<f64>() / values.len() as f64
}

fn median_sorted(v: &[f64]) -> f64 {
    let n = v.len();
    if n == 0 {
        return f64::NAN;
    }
    if n % 2 == 1 {
        v[n / 2]
    } else {
        0.5 * (v[n / 2 - 1] + v[n / 2])
    }
}

fn round(x: f64, places: i32) -> f64 {
    let f = 10f64.powi(places);
    (x * f).round() / f
}

fn judge_unit(
    id: &str,
    s: &UnitSummary,
    store: &ProfileStore,
    settings: &FleetSettings,
    texts: &mut SharedTexts,
) -> Option<Judged> {
    let rules = &settings.rules;
    let (_, row) = s.latest()?;
    let mut flags: Vec<String> = Vec::new();
    let mut reasons: Vec<FleetReason> = Vec::new();
    let profile = match store.get(&row.profile) {
        Ok(p) => p,
        Err(e) => {
            let mut report = Box::new(empty_report(
                id,
                row,
                s,
                Action::Remeasure,
                vec![FleetReason {
                    rule: "unknown-profile".into(),
                    action: Action::Remeasure,
                    detail: e.to_string(),
                    source: "restvolt profile store".into(),
                }],
            ));
            settle(&mut report);
            return Some(Judged {
                report,
                peer_key: None,
                sg_key: None,
                on_float: row.after == After::Float,
            });
        }
    };
    let coldest = [
        s.coldest_milli_c.map(|c| c as f64 / 1000.0),
        settings.min_temperature.map(|c| c.0),
    ]
    .into_iter()
    .flatten()
    .fold(None, |a: Option<f64>, b| Some(a.map_or(b, |a| a.min(b))));

    // Latest reading, through the same corrector as `check`.
    let mut setup = settings.setup;
    setup.min_temperature = coldest.map(Celsius);
    let mut soc = None;
    let mut interval = None;
    let mut ocv_cell = None;
    let mut freezing = None;
    let mut sg_mean = None;
    if row.after == After::Float {
        flags.push("on-float".into());
        reasons.push(FleetReason {
            rule: "on-float".into(),
            action: Action::Serviceable,
            detail: "the latest reading was taken on float charge: state of charge cannot be read from a float voltage; see the float section".into(),
            source: "common practice: a float voltage is held by the charger, not by the electrolyte".into(),
        });
    } else {
        // The report shows the flags and reasons, never the written budget.
        match assess_without_budget(profile, &to_reading(row), &setup, rules) {
            Ok(a) => {
                if !a.charge_unknown() {
                    soc = Some(round(a.soc_percent, 1));
                    interval = Some([
                        round(a.soc_interval_percent[0], 1),
                        round(a.soc_interval_percent[1], 1),
                    ]);
                }
                let trusted = matches!(a.rest.status, RestStatus::Settled | RestStatus::Usable)
                    && !a.voltage_discredited();
                if trusted {
                    ocv_cell = a.ocv_per_cell_25c_volts;
                }
                freezing = a.freezing_point_celsius.map(|f| round(f, 1));
                sg_mean = a.sg.as_ref().map(|g| round(g.mean_25c, 4));
                for f in &a.flags {
                    flags.push(f.code.as_str().to_string());
                }
                // Moved, not copied: the assessment is done with.
                reasons.extend(a.reasons.into_iter().map(|r| texts.reason(r)));
            }
            Err(e) => {
                flags.push("unusable-reading".into());
                reasons.push(FleetReason {
                    rule: "unusable-reading".into(),
                    action: Action::Remeasure,
                    detail: e.to_string(),
                    source: "restvolt corrector".into(),
                });
            }
        }
    }

    // History rules.
    let trend = s.trend_percent_per_30_days();
    let expected = profile
        .spec
        .self_discharge
        .soc_percent_per_30_days_at_25c
        .value;
    // The decline must be faster than the limit with 95 % confidence, not
    // only on its face: a few readings a percent or two apart otherwise make
    // a steep slope out of meter noise. One-sided bound with Student's t at
    // n − 2 degrees of freedom (ordinary least squares; statrs).
    if let (Some(slope), Some(se)) = (trend, s.trend_standard_error_percent_per_30_days()) {
        let limit = -rules.get(RuleId::TrendFactor) * expected;
        let t95 = student_t_95(s.trend_n.saturating_sub(2) as u64);
        let bound = slope + t95 * se;
        if bound < limit {
            flags.push("fast-decline".into());
            reasons.push(texts.rule_reason(
                Action::CapacityTest,
                RuleId::TrendFactor,
                format!("falls {:.1} % per 30 days (≥ {:.1} % at 95 % confidence, {} rested readings); expected about {expected} %", -slope, -bound, s.trend_n),
                rules,
            ));
        }
    }
    let recharge_below = profile.spec.thresholds.recharge_below_soc_percent.value;
    let mut days_below = None;
    let rested: Vec<_> = s
        .history
        .iter()
        .filter(|h| h.rested && h.soc_percent().is_some())
        .collect();
    if let Some(last) = rested.last() {
        if last.soc_percent().unwrap_or(0.0) < recharge_below {
            let start = rested
                .iter()
                .rev()
                .take_while(|h| h.soc_percent().unwrap_or(0.0) < recharge_below)
                .last()
                .map(|h| h.taken_at)
                .unwrap_or(last.taken_at);
            let days = (last.taken_at - start).num_minutes() as f64 / 1440.0;
            days_below = Some(round(days, 1));
            if days >= rules.get(RuleId::SulfationDays) {
                flags.push("sulfation-risk".into());
                reasons.push(texts.rule_reason(
                    Action::RechargeNow,
                    RuleId::SulfationDays,
                    format!("below {recharge_below} % for {days:.0} days"),
                    rules,
                ));
            }
        }
    }
    if let Some(pc) = s
        .history
        .iter()
        .rev()
        .find(|h| h.after == After::Charge && h.rested && h.soc_percent().is_some())
    {
        let pc_soc = pc.soc_percent().unwrap_or(0.0);
        if pc_soc < rules.get(RuleId::PostChargeShortfall) {
            flags.push("post-charge-shortfall".into());
            reasons.push(texts.rule_reason(
                Action::CapacityTest,
                RuleId::PostChargeShortfall,
                format!(
                    "rested {pc_soc:.0} % after the charge of {}: sulfation or lost capacity",
                    pc.taken_at.format("%Y-%m-%d")
                ),
                rules,
            ));
        }
    }

    // Ohmic value against the baseline (given, else the earliest seen).
    let baseline = row
        .baseline_ohmic
        .map(|b| b.0)
        .or(s.first_ohmic.map(|(_, bits)| f64::from_bits(bits)));
    let mut ohmic_rise = None;
    if let (Some(o), Some(b)) = (row.ohmic, baseline) {
        if b > 0.0 {
            let rise = (o.0 / b - 1.0) * 100.0;
            ohmic_rise = Some(round(rise, 1));
            if rise >= rules.get(RuleId::OhmicAct) {
                flags.push("ohmic-rise".into());
                reasons.push(texts.rule_reason(
                    Action::CapacityTest,
                    RuleId::OhmicAct,
                    format!(
                        "ohmic {:.2} mΩ is {rise:+.0} % over the baseline {b:.2} mΩ",
                        o.0
                    ),
                    rules,
                ));
            } else if rise >= rules.get(RuleId::OhmicWarn) {
                flags.push("ohmic-watch".into());
                reasons.push(texts.rule_reason(
                    Action::Serviceable,
                    RuleId::OhmicWarn,
                    format!(
                        "ohmic {:.2} mΩ is {rise:+.0} % over the baseline {b:.2} mΩ: watch",
                        o.0
                    ),
                    rules,
                ));
            }
        }
    }

    let ageing = s.ageing_factor();
    if let Some(a) = ageing {
        if a > rules.get(RuleId::HeatAgeingWarn) {
            flags.push("heat-ageing".into());
            reasons.push(texts.rule_reason(
                Action::CapacityTest,
                RuleId::HeatAgeingWarn,
                format!(
                    "mean heat-ageing factor {a:.1}× (life halves per {} °C above 25 °C)",
                    rules.get(RuleId::LifeHalving)
                ),
                rules,
            ));
        }
    }

    let history = if settings.without_chart_history {
        Vec::new()
    } else {
        s.history
            .iter()
            .filter(|h| h.rested)
            .filter_map(|h| Some((h.taken_at, h.soc_percent()?, h.soc_interval_percent()?)))
            .collect()
    };
    // Peers: the same string, else the same site; a unit with neither has none.
    let peer_key = ocv_cell
        .filter(|_| row.site.is_some() || row.string.is_some())
        .map(|_| (row.site.clone(), row.string.clone(), row.profile.clone()));
    let mut report = empty_report(id, row, s, Action::Serviceable, reasons);
    report.soc_percent = soc;
    report.soc_interval_percent = interval;
    report.ocv_per_cell_25c_volts = ocv_cell.map(|v| round(v, 4));
    report.flags = flags;
    report.trend_percent_per_30_days = trend.map(|t| round(t, 2));
    report.days_below_recharge = days_below;
    report.ohmic_rise_percent = ohmic_rise;
    report.coldest_celsius = coldest.map(|c| round(c, 1));
    report.freezing_point_celsius = freezing;
    report.sg_mean_25c = sg_mean;
    report.heat_ageing_factor = ageing.map(|a| round(a, 2));
    report.history = history;
    // A string's single cells, compared by hydrometer.
    let sg_key = match (&row.string, row.cells.unwrap_or(profile.cells())) {
        (Some(_), 1) => Some((row.site.clone(), row.string.clone(), row.profile.clone())),
        _ => None,
    };
    settle(&mut report);
    Some(Judged {
        report: Box::new(report),
        peer_key,
        sg_key,
        on_float: row.after == After::Float,
    })
}

fn empty_report(
    id: &str,
    row: &FleetRow,
    s: &UnitSummary,
    action: Action,
    reasons: Vec<FleetReason>,
) -> UnitReport {
    UnitReport {
        rank: 0,
        unit_id: id.to_string(),
        site: row.site.as_ref().map(|x| x.to_string()),
        string: row.string.as_ref().map(|x| x.to_string()),
        position: row.position,
        profile: row.profile.to_string(),
        action,
        soc_percent: None,
        soc_interval_percent: None,
        ocv_per_cell_25c_volts: None,
        flags: Vec::new(),
        reasons,
        sg_mean_25c: None,
        readings: s.readings,
        latest_at: minute_text(row.taken_at),
        trend_percent_per_30_days: None,
        trend_readings: s.trend_n,
        days_below_recharge: None,
        peer_deviation_mv: None,
        peer_z: None,
        ohmic_rise_percent: None,
        coldest_celsius: None,
        freezing_point_celsius: None,
        heat_ageing_factor: None,
        history: Vec::new(),
        latest_temperature: row.temperature.map(|t| t.0),
    }
}

/// `t` as `YYYY-MM-DD HH:MM`, as chrono's `format("%Y-%m-%d %H:%M")` writes
/// it (tested) without parsing the format for each of a fleet's units.
fn minute_text(t: chrono::NaiveDateTime) -> String {
    use chrono::{Datelike, Timelike};
    if !(0..=9999).contains(&t.year()) {
        return t.format("%Y-%m-%d %H:%M").to_string();
    }
    // Digit by digit: `format!` took about 2,000 instructions a time, once
    // for every unit of a report.
    let digit = |n: u32| b'0' + (n % 10) as u8;
    let (y, mo, d, h, mi) = (
        t.year().unsigned_abs(),
        t.month(),
        t.day(),
        t.hour(),
        t.minute(),
    );
    let text = [
        digit(y / 1000),
        digit(y / 100),
        digit(y / 10),
        digit(y),
        b'-',
        digit(mo / 10),
        digit(mo),
        b'-',
        digit(d / 10),
        digit(d),
        b' ',
        digit(h / 10),
        digit(h),
        b':',
        digit(mi / 10),
        digit(mi),
    ];
    text.iter().map(|&b| char::from(b)).collect()
}

/// What the float checks found for one unit whose latest reading is on float:
/// the flags and reasons it takes into its own report.
#[derive(Debug, Default)]
struct UnitFloatFindings {
    flags: Vec<String>,
    reasons: Vec<FleetReason>,
}

/// Float strings, and every checked unit's findings by unit id.
type FloatResults = (
    Vec<crate::float::StringFloatAnalysis>,
    BTreeMap<String, UnitFloatFindings>,
);

/// Group the units `on_float` (those whose latest reading is a float
/// voltage) by (site, string, profile) and run the float checks on each
/// group. Each unit's own check, and the string's reasons that concern it,
/// go back to that unit (see [`UnitFloatFindings`]).
fn float_strings(
    mut on_float: Vec<(&Arc<str>, &UnitSummary)>,
    store: &ProfileStore,
    rules: &Rules,
) -> FloatResults {
    let mut groups: BTreeMap<(String, String, String), Vec<&UnitSummary>> = BTreeMap::new();
    // In id order (only these: sorting all units first was a tenth of
    // judging a large fleet that had none).
    on_float.sort_unstable_by(|a, b| a.0.cmp(b.0));
    for (_, s) in on_float {
        let Some((_, r)) = s.latest() else { continue };
        let key = (
            r.site.as_deref().unwrap_or("").to_string(),
            r.string.as_deref().unwrap_or(&r.unit_id).to_string(),
            r.profile.to_string(),
        );
        groups.entry(key).or_default().push(s);
    }
    let mut out = Vec::new();
    let mut findings: BTreeMap<String, UnitFloatFindings> = BTreeMap::new();
    for ((site, string, profile_id), members) in groups {
        let Ok(profile) = store.get(&profile_id) else {
            continue;
        };
        let name = if site.is_empty() {
            string.clone()
        } else {
            format!("{site} / {string}")
        };
        let (capacity, capacity_note) = string_capacity(&members);
        let mut readings: Vec<crate::float::FloatReading> = members
            .iter()
            .filter_map(|s| s.latest())
            .filter_map(|(_, r)| {
                Some(crate::float::FloatReading {
                    unit_id: r.unit_id.to_string(),
                    string: Some(name.clone()),
                    position: r.position,
                    taken_at: Some(r.taken_at),
                    volts: r.volts?,
                    cells: r.cells.unwrap_or(profile.cells()),
                    temperature: r.temperature,
                    ambient: r.ambient,
                    float_current: r.float_current,
                    capacity,
                })
            })
            .collect();
        let (previous, mut notes) = earlier_visits(&members);
        notes.extend(capacity_note);

        // A unit whose reading cannot be checked (a float voltage of 0 V or
        // below, a negative current) is set aside with its own error, so the
        // rest of the string is still checked.
        let mut set_aside: Vec<String> = Vec::new();
        let analysis = loop {
            match crate::float::analyse_string(profile, &name, &readings, &previous, rules) {
                Ok(a) => break Some(a),
                Err(e) => {
                    let bad = match &e {
                        crate::float::FloatError::NotFinite { unit_id, .. }
                        | crate::float::FloatError::OutOfRange { unit_id, .. }
                        | crate::float::FloatError::NoCells { unit_id } => {
                            readings.iter().position(|r| r.unit_id == *unit_id)
                        }
                        _ => None,
                    };
                    let unchecked: Vec<String> = match bad {
                        Some(i) => vec![readings.remove(i).unit_id],
                        None => readings.drain(..).map(|r| r.unit_id).collect(),
                    };
                    for id in unchecked {
                        findings.insert(id.clone(), float_unchecked(&e));
                        set_aside.push(id);
                    }
                    if readings.is_empty() {
                        break None;
                    }
                }
            }
        };
        let Some(mut a) = analysis else { continue };
        a.notes.extend(notes);
        if !set_aside.is_empty() {
            set_aside_units(&mut a, &set_aside);
        }
        for c in &a.per_unit {
            let mut reasons: Vec<FleetReason> = c.reasons.iter().map(FleetReason::from).collect();
            reasons.extend(a.reasons_for_unit(&c.unit_id).iter().map(|r| {
                let mut f = FleetReason::from(r);
                f.detail = format!("string {}: {}", a.string, f.detail);
                f
            }));
            findings.insert(
                c.unit_id.clone(),
                UnitFloatFindings {
                    flags: c
                        .flags
                        .iter()
                        .map(|f| f.code.as_str().to_string())
                        .collect(),
                    reasons,
                },
            );
        }
        out.push(a);
    }
    (out, findings)
}

/// Say which units of a string were set aside, and withdraw "fully charged
/// on float": a unit that could not be checked may be the one short of charge.
fn set_aside_units(a: &mut crate::float::StringFloatAnalysis, ids: &[String]) {
    let ids = ids.join(", ");
    a.notes.push(format!(
        "not checked: {ids} (see the unit list); the string's figures are of the other units"
    ));
    if a.fully_charged_on_float == Some(true) {
        a.fully_charged_on_float = None;
        a.state_of_charge_note = a.state_of_charge_note.replace(
            "This string is fully charged on float: ",
            &format!("Not shown fully charged, as {ids} could not be checked, though "),
        );
    }
}

/// The findings of a unit on float whose reading could not be checked.
fn float_unchecked(e: &crate::float::FloatError) -> UnitFloatFindings {
    UnitFloatFindings {
        flags: vec!["float-unchecked".into()],
        reasons: vec![FleetReason {
            rule: "float-unchecked".into(),
            action: Action::Remeasure,
            detail: format!("the float check could not be made: {e}"),
            source: "restvolt float checks".into(),
        }],
    }
}

/// The string's rated capacity: the value its units' rows give, when
/// they agree. Rows that disagree give none, and a note saying so, rather
/// than an expected float current from a guess.
fn string_capacity(members: &[&UnitSummary]) -> (Option<crate::units::AmpHours>, Option<String>) {
    let mut seen: Vec<f64> = members
        .iter()
        .flat_map(|s| s.capacities_ah.iter().copied())
        .collect();
    seen.sort_by(f64::total_cmp);
    seen.dedup();
    match seen.as_slice() {
        [] => (None, None),
        [one] => (Some(crate::units::AmpHours(*one)), None),
        many => (
            None,
            Some(format!(
                "the rows of this string give different capacities ({} Ah): no capacity is used, so the expected float current is unknown",
                many.iter()
                    .map(|c| c.to_string())
                    .collect::<Vec<_>>()
                    .join(", ")
            )),
        ),
    }
}

/// Earlier float visits of a string, as `(time, string float current, string
/// voltage)`, with notes on the visits left out.
///
/// A visit is matched by its exact `taken_at`: the units of a string read at
/// one round carry the round's time (as in the demo data). Its string voltage
/// is the sum of its units' float voltages, so it is used only when every
/// unit of the string was read then; its current is the median of the units'
/// entries, as at the latest visit. Each unit's latest reading is the latest
/// visit and is not repeated here.
fn earlier_visits(
    members: &[&UnitSummary],
) -> (
    Vec<(
        chrono::NaiveDateTime,
        crate::units::Amperes,
        crate::units::Volts,
    )>,
    Vec<String>,
) {
    // time → (units read, summed volts, currents)
    let mut visits: BTreeMap<chrono::NaiveDateTime, (usize, f64, Vec<f64>)> = BTreeMap::new();
    for s in members {
        let earlier = s.history.len().saturating_sub(1);
        for h in s.history[..earlier]
            .iter()
            .filter(|h| h.after == After::Float)
        {
            let e = visits.entry(h.taken_at).or_default();
            // 0 V or below is a lead off, not a share of the string voltage.
            if let Some(v) = h.volts().filter(|v| v.0 > 0.0) {
                e.0 += 1;
                e.1 += v.0;
            }
            // A negative current is a discharge or a reversed clamp, not a float current.
            if let Some(i) = h.float_current().filter(|i| i.0 >= 0.0) {
                e.2.push(i.0);
            }
        }
    }
    let mut out = Vec::new();
    // Visits at which some unit went unread: (when, units read), in time order.
    let mut partial: Vec<(chrono::NaiveDateTime, usize)> = Vec::new();
    for (at, (n, volts, mut currents)) in visits {
        if currents.is_empty() {
            continue;
        }
        if n < members.len() {
            partial.push((at, n));
            continue;
        }
        currents.sort_by(f64::total_cmp);
        out.push((
            at,
            crate::units::Amperes(median_sorted(&currents)),
            crate::units::Volts(volts),
        ));
    }
    (
        out,
        partial_visits_note(&partial, members.len())
            .into_iter()
            .collect(),
    )
}

/// The note on the float visits that left some of the string's `units`
/// unread (`partial`: when, and how many were read, in time order): one
/// note however many there were, so that a string read a few units at a
/// time does not bury its other notes under one line per visit.
fn partial_visits_note(partial: &[(chrono::NaiveDateTime, usize)], units: usize) -> Option<String> {
    match partial {
        [] => None,
        [(at, n)] => Some(format!(
            "the float visit of {} gave a float voltage for {n} of the string's {units} units: its string voltage is unknown, so its float current is not compared",
            minute_text(*at)
        )),
        [(first, _), .., (last, _)] => {
            let most = partial.iter().map(|(_, n)| *n).max().unwrap_or(0);
            Some(format!(
                "{} float visits, {} to {}, gave a float voltage for at most {most} of the string's {units} units: their string voltages are unknown, so their float currents are not compared",
                partial.len(),
                minute_text(*first),
                minute_text(*last)
            ))
        }
    }
}

#[cfg(test)]
mod number_tests {
    use super::{id_prefix, order_free_mean, student_t_95, total_order_key};

    #[test]
    fn minute_text_is_chronos_format() {
        use chrono::NaiveDate;
        let days = [
            (1, 1, 1),
            (999, 12, 31),
            (1999, 12, 31),
            (2000, 2, 29),
            (2024, 1, 8),
            (2026, 12, 1),
            (9999, 12, 31),
            (10_000, 1, 1),
            (-1, 6, 15),
        ];
        for (y, m, d) in days {
            for (h, min) in [(0, 0), (9, 5), (23, 59)] {
                let t = NaiveDate::from_ymd_opt(y, m, d)
                    .and_then(|d| d.and_hms_opt(h, min, 59))
                    .unwrap();
                assert_eq!(
                    super::minute_text(t),
                    t.format("%Y-%m-%d %H:%M").to_string(),
                    "{t}"
                );
            }
        }
    }

    #[test]
    fn id_prefixes_order_as_the_ids_where_they_differ() {
        let ids = [
            "",
            "A",
            "A\0",
            "AB",
            "B",
            "FD-C1001-1",
            "FD-C1001-10",
            "FD-C1001-2",
            "sixteen-bytes-id",
            "sixteen-bytes-id-and-more",
            "sixteen-bytes-ie",
            "é",
            "ü-1",
        ];
        for a in ids {
            for b in ids {
                let (pa, pb) = (id_prefix(a), id_prefix(b));
                if pa != pb {
                    assert_eq!(pa.cmp(&pb), a.cmp(b), "{a:?} {b:?}");
                }
            }
        }
        // Equal prefixes are left to the whole ids.
        assert_eq!(id_prefix("A"), id_prefix("A\0"));
        assert_eq!(
            id_prefix("sixteen-bytes-id"),
            id_prefix("sixteen-bytes-id-and-more")
        );
    }

    #[test]
    fn a_group_mean_does_not_depend_on_the_order_of_its_members() {
        // Values whose plain left-to-right sum differs by order (from
        // memory: floating-point addition rounds at each step).
        let values = [1.197, 1.101, 0.1, 1e16, 1.25, -1e16, 0.3];
        let plain = |v: &[f64]| v.iter().sum::<f64>();
        let mut reversed = values;
        reversed.reverse();
        assert_ne!(
            plain(&values),
            plain(&reversed),
            "the example must be order-sensitive"
        );
        let want = order_free_mean(values.to_vec());
        let mut v = values.to_vec();
        for k in 0..values.len() {
            v.rotate_left(1);
            assert_eq!(
                order_free_mean(v.clone()).to_bits(),
                want.to_bits(),
                "rotation {k}"
            );
        }
        assert_eq!(order_free_mean(reversed.to_vec()).to_bits(), want.to_bits());
        // And it is the mean: exact on values that sum exactly.
        assert_eq!(order_free_mean(vec![1.25, 1.0, 1.5, 1.25]), 1.25);
    }

    #[test]
    fn the_sort_key_orders_as_total_cmp() {
        let xs = [
            f64::NEG_INFINITY,
            -101.0,
            -0.5,
            -0.0,
            0.0,
            1e-300,
            0.05,
            42.0,
            101.0,
            f64::INFINITY,
            f64::NAN,
        ];
        for a in xs {
            for b in xs {
                assert_eq!(
                    total_order_key(a).cmp(&total_order_key(b)),
                    a.total_cmp(&b),
                    "{a} {b}"
                );
            }
        }
    }

    #[test]
    fn one_sided_95_quantiles_match_the_published_table() {
        // published: NIST/SEMATECH e-Handbook of Statistical Methods §1.3.6.7.2,
        // upper critical values of Student's t, α = 0.05 (one-sided).
        for (dof, t) in [(1, 6.314), (2, 2.920), (5, 2.015), (10, 1.812), (30, 1.697)] {
            approx::assert_abs_diff_eq!(student_t_95(dof), t, epsilon = 5e-4);
        }
        // Beyond the table the value is worked out, and tends to the normal's 1.645.
        approx::assert_abs_diff_eq!(student_t_95(10_000), 1.645, epsilon = 1e-3);
        assert!(student_t_95(0).is_infinite());
    }

    #[test]
    fn the_table_is_the_exact_quantile() {
        for dof in 1..300 {
            let exact = statrs::distribution::StudentsT::new(0.0, 1.0, dof as f64)
                .map(|d| statrs::distribution::ContinuousCDF::inverse_cdf(&d, 0.95))
                .unwrap();
            assert_eq!(student_t_95(dof).to_bits(), exact.to_bits(), "dof {dof}");
        }
    }
}

#[cfg(test)]
mod peer_group_tests {

    /// Peers are the units of one (site, string, profile). A site named
    /// "north/yard" without strings and the string "yard" of site "north"
    /// are two groups, though both once joined into the text "north/yard".
    #[test]
    fn a_site_with_a_slash_is_not_another_sites_string() {
        let mut csv = String::from("unit_id,taken_at,profile,site,string,volts,temp_c,rest_h\n");
        for (i, v) in [12.80, 12.80, 12.81, 12.79, 12.50].iter().enumerate() {
            csv.push_str(&format!(
                "A{i},2026-01-05 10:00,agm,north/yard,,{v},25,48\n"
            ));
        }
        for i in 0..4 {
            csv.push_str(&format!(
                "B{i},2026-01-05 10:00,agm,north,yard,12.50,25,48\n"
            ));
        }
        let (report, _) = crate::report::fixture::report_of("peers.csv", csv.as_bytes());
        let outliers: Vec<&str> = report
            .units
            .iter()
            .filter(|u| u.flags.iter().any(|f| f == "peer-outlier"))
            .map(|u| u.unit_id.as_str())
            .collect();
        assert_eq!(outliers, ["A4"]);
        // Every unit was compared within its own group of 5 or 4.
        assert!(report.units.iter().all(|u| u.peer_z.is_some()));
    }
}

#[cfg(test)]
mod shared_text_tests {
    use super::*;

    #[test]
    fn a_text_is_shared_once_and_reasons_keep_their_words() {
        let mut texts = SharedTexts::default();
        let a = texts.get("IEEE Std 450-1987 §4.4 (published)");
        let b = texts.get(&String::from("IEEE Std 450-1987 §4.4 (published)"));
        assert!(Arc::ptr_eq(&a, &b));
        assert!(!Arc::ptr_eq(&a, &texts.get("other")));
        let r = Reason {
            action: Action::Equalize,
            rule: "low-cell-sg".into(),
            detail: "SG 1.190".into(),
            source: "IEEE Std 450-1987 §4.4 (published)".into(),
        };
        let shared = texts.reason(r.clone());
        assert!(Arc::ptr_eq(&shared.source, &a));
        // The same reason as converted without sharing.
        assert_eq!(shared, FleetReason::from(r));
    }

    /// Every reason of the units judged on the reading threads holds one of
    /// a few shared sources (at most one copy per thread), not a copy of its
    /// own.
    #[test]
    fn a_large_report_holds_each_source_once_per_thread() {
        let mut text = Vec::new();
        crate::fleet::generate::generate(
            &crate::fleet::generate::GenerateOptions {
                units: PARALLEL_JUDGING_UNITS as u32 + 10,
                days: 60,
                seed: 4,
                readings_per_unit: Some(2),
            },
            &mut text,
        )
        .unwrap();
        let store = ProfileStore::builtin().unwrap();
        let settings = FleetSettings::default();
        let mut state = FleetState::default();
        state
            .ingest(
                "gen.csv",
                text.as_slice(),
                &IngestOptions::default(),
                &store,
                &settings,
            )
            .unwrap();
        let threads = 2;
        let report = finish_owned_on(state, &store, &settings, threads);
        // Units on float also take the float checks' reasons, which are
        // few and not shared.
        let sources: Vec<&Arc<str>> = report
            .units
            .iter()
            .filter(|u| !u.flags.iter().any(|f| f == "on-float"))
            .flat_map(|u| u.reasons.iter().map(|r| &r.source))
            .collect();
        let mut texts: Vec<&str> = sources.iter().map(|s| &***s).collect();
        texts.sort_unstable();
        texts.dedup();
        let mut places: Vec<*const u8> = sources.iter().map(|s| s.as_ptr()).collect();
        places.sort_unstable();
        places.dedup();
        assert!(sources.len() > 1000, "{} reasons", sources.len());
        assert!(
            places.len() <= threads * texts.len() + texts.len(),
            "{} reasons, {} texts, {} allocations",
            sources.len(),
            texts.len(),
            places.len()
        );
    }
}

#[cfg(test)]
mod reject_tests {
    use super::*;
    use rand::seq::SliceRandom;
    use rand::SeedableRng;

    fn rejected(line: u64) -> Rejected {
        Rejected {
            file: "f.csv".into(),
            line,
            reason: format!("bad {}", line % 7),
        }
    }

    #[test]
    fn a_tally_counts_every_reject_and_holds_a_bounded_list_with_the_first() {
        let mut lines: Vec<u64> = (1..=10_000).collect();
        lines.shuffle(&mut rand::rngs::StdRng::seed_from_u64(5));
        let mut tally = RejectTally::default();
        for &l in &lines {
            tally.push(rejected(l));
            assert!(tally.held.len() < 2 * REJECTED_CAP);
        }
        assert_eq!(tally.count, 10_000);
        let mut kept = tally.held;
        first_rejected(&mut kept);
        let want: Vec<Rejected> = (1..=REJECTED_CAP as u64).map(rejected).collect();
        assert_eq!(kept, want);
    }

    /// A file whose rows are nearly all rejected (dated past the latest time
    /// accepted) keeps the exact count and the first rows, on one thread and
    /// on several, and holds no more than the bounded list.
    #[test]
    fn a_file_of_mostly_rejected_rows_keeps_the_count_and_the_first() {
        let mut csv = String::from("unit_id,taken_at,profile,volts,temp_c,rest_h\n");
        let bad = 5 * REJECTED_CAP;
        for i in 0..bad + 10 {
            let year = if i < 10 { 2025 } else { 2031 };
            csv.push_str(&format!("U{},{year}-03-01 10:00,agm,12.70,25,24\n", i % 10));
        }
        let opts = IngestOptions {
            now: chrono::NaiveDate::from_ymd_opt(2026, 12, 2).and_then(|d| d.and_hms_opt(0, 0, 0)),
            ..IngestOptions::default()
        };
        let store = ProfileStore::builtin().unwrap();
        let settings = FleetSettings::default();
        let mut one = FleetState::default();
        one.ingest("f.csv", csv.as_bytes(), &opts, &store, &settings)
            .unwrap();
        let mut many = FleetState::default();
        let how = crate::fleet::ingest::Parallelism {
            threads: 3,
            chunk_bytes: 4096,
        };
        many.ingest_parallel(
            "f.csv",
            csv.as_bytes(),
            &opts,
            &store,
            &settings,
            how,
            &mut |_| {},
        )
        .unwrap();
        for state in [&one, &many] {
            assert_eq!(state.rejected_total, bad as u64);
            assert_eq!(
                (state.rows_read, state.rows_accepted),
                (bad as u64 + 10, 10)
            );
            assert!(state.rejected.len() < 2 * REJECTED_CAP);
            let kept = state.rejected_rows();
            assert_eq!(kept.len(), REJECTED_CAP);
            // The first rejected rows of the file: lines 12 on (line 1 is
            // the header, lines 2-11 the good rows).
            let lines: Vec<u64> = kept.iter().map(|r| r.line).collect();
            let want: Vec<u64> = (12..12 + REJECTED_CAP as u64).collect();
            assert_eq!(lines, want);
            assert!(
                kept[0].reason.contains("is in the future"),
                "{}",
                kept[0].reason
            );
        }
    }
}

#[cfg(test)]
mod lend_tests {
    use super::*;
    use crate::fleet::generate::{generate, GenerateOptions};
    use rand::seq::SliceRandom;
    use rand::SeedableRng;

    /// A lent row folds in as a moved one does, whatever the order the rows
    /// come in, and is left as it was when the summary keeps the row it had.
    #[test]
    fn a_lent_row_folds_as_a_moved_one() {
        let mut text = Vec::new();
        let opts = GenerateOptions {
            units: 30,
            days: 200,
            seed: 19,
            readings_per_unit: Some(16),
        };
        generate(&opts, &mut text).unwrap();
        let mut rows = crate::fleet::tests::rows_of(&text);
        // Every row twice, so that equal points meet too.
        let again = rows.clone();
        rows.extend(again);
        rows.shuffle(&mut rand::rngs::StdRng::seed_from_u64(3));
        let store = ProfileStore::builtin().unwrap();
        let settings = FleetSettings::default();
        let (mut moved, mut lent) = (UnitMap::default(), UnitMap::default());
        for row in &rows {
            let mut row = row.clone();
            let profile = store.get(&row.profile).ok();
            let facts = FleetState::facts(&mut row, profile, &settings).unwrap();
            add_to(&mut moved, row.clone(), facts);
            let kept_before = lent
                .get(&*row.unit_id)
                .and_then(|s| s.latest_row.as_deref().cloned());
            let offered = row.clone();
            add_lent_to(&mut lent, &mut row, facts);
            let kept_now = lent[&*row.unit_id].latest_row.as_deref().cloned();
            match kept_before {
                None => assert_eq!(kept_now.as_ref(), Some(&offered)),
                Some(before) if kept_now.as_ref() == Some(&before) => {
                    assert_eq!(row, offered)
                }
                // Left with parts of the row let go of, and its SG list's
                // allocation: only for dropping.
                Some(_) => assert_eq!(kept_now.as_ref(), Some(&offered)),
            }
        }
        let listed = |m: &UnitMap| {
            let mut v: Vec<String> = m.iter().map(|(k, s)| format!("{k}: {s:?}")).collect();
            v.sort();
            v
        };
        assert_eq!(lent.len(), 30);
        assert_eq!(listed(&lent), listed(&moved));
    }
}
