//! The state's per-unit summaries while several reading threads fold into
//! them: split by a hash of the unit id into shards, each behind a lock of
//! its own, so that each thread folds its rows in itself.

use super::analysis::UnitMap;
use super::ingest::FleetRow;
use super::summary::{RowFacts, UnitSummary};
use std::hash::BuildHasher;
use std::sync::{Arc, Mutex, MutexGuard};

/// Shards: enough that two threads seldom want the same one at once.
pub(super) const SHARDS: usize = 64;

/// Do `f` to unit `id`'s summary in `units`, a new one if it has none. The
/// unit is looked up by its name before the name is cloned for a new entry:
/// a clone is an atomic count, and nearly every row is of a unit already
/// there. (A closure, not a returned reference, as the borrow checker cannot
/// yet see that a lookup that found nothing has let go of the map.)
pub(super) fn with_summary<T>(
    units: &mut UnitMap,
    id: &Arc<str>,
    f: impl FnOnce(&mut UnitSummary) -> T,
) -> T {
    match units.get_mut(&**id) {
        Some(s) => f(s),
        None => f(units.entry(Arc::clone(id)).or_default()),
    }
}

/// Fold a row with its facts into its unit's summary in `units`, looked up
/// by name first as [`with_summary`] does (here the row, which the summary
/// takes, lends the name).
pub(super) fn add_to(units: &mut UnitMap, row: FleetRow, facts: RowFacts) {
    match units.get_mut(&*row.unit_id) {
        Some(s) => s.add(row, facts),
        None => {
            let id = Arc::clone(&row.unit_id);
            units.entry(id).or_default().add(row, facts)
        }
    }
}

/// [`add_to`] of a lent row (see [`UnitSummary::add_lent`]).
pub(super) fn add_lent_to(units: &mut UnitMap, row: &mut FleetRow, facts: RowFacts) {
    match units.get_mut(&*row.unit_id) {
        Some(s) => s.add_lent(row, facts),
        None => {
            let id = Arc::clone(&row.unit_id);
            units.entry(id).or_default().add_lent(row, facts)
        }
    }
}

/// Touch the summaries that `rows` will be folded into, all before any is
/// folded (see [`UnitSummary::touch`]).
pub(super) fn warm<'r>(units: &UnitMap, rows: impl Iterator<Item = &'r FleetRow>) {
    let touched = rows
        .filter_map(|row| units.get(&*row.unit_id))
        .fold(0u64, |acc, s| acc.wrapping_add(s.touch()));
    std::hint::black_box(touched);
}

/// Per-unit summaries split into shards by unit id.
pub(super) struct SharedUnits {
    shards: Vec<Mutex<UnitMap>>,
}

impl SharedUnits {
    /// The summaries of `units`, shared out.
    pub(super) fn new(units: UnitMap) -> SharedUnits {
        let mut shards: Vec<UnitMap> = (0..SHARDS).map(|_| UnitMap::default()).collect();
        for (id, s) in units {
            shards[shard_of(&id)].insert(id, s);
        }
        SharedUnits {
            shards: shards.into_iter().map(Mutex::new).collect(),
        }
    }

    /// Shard `shard` (a unit's is [`shard_of`] its id), locked.
    pub(super) fn lock(&self, shard: usize) -> MutexGuard<'_, UnitMap> {
        // A thread that panicked while folding ends the whole read (its
        // panic is passed on), so a poisoned shard is never read after.
        self.shards[shard % SHARDS]
            .lock()
            .unwrap_or_else(std::sync::PoisonError::into_inner)
    }

    /// All the summaries in one map again.
    pub(super) fn into_map(self) -> UnitMap {
        let shards: Vec<UnitMap> = self
            .shards
            .into_iter()
            .map(|m| {
                m.into_inner()
                    .unwrap_or_else(std::sync::PoisonError::into_inner)
            })
            .collect();
        let mut units = UnitMap::default();
        units.reserve(shards.iter().map(UnitMap::len).sum());
        // Each id is in one shard only, so nothing is merged here.
        for shard in shards {
            units.extend(shard);
        }
        units
    }
}

/// The shard of unit `id`. The map's own hash, multiplied to mix its bits
/// and cut to the top six: a shard's units then differ in the bits the map
/// indexes and tags its buckets with (its low bits, its top seven), which a
/// shard picked by those same bits would leave equal.
pub(super) fn shard_of(id: &str) -> usize {
    let h = rustc_hash::FxBuildHasher.hash_one(id);
    (h.wrapping_mul(0x9E37_79B9_7F4A_7C15) >> (64 - SHARDS.trailing_zeros())) as usize
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn every_unit_is_kept_in_one_shard_and_comes_back() {
        let mut units = UnitMap::default();
        for i in 0..5000 {
            let s = UnitSummary {
                readings: i,
                ..UnitSummary::default()
            };
            units.insert(Arc::from(format!("U-{i}")), Box::new(s));
        }
        let shared = SharedUnits::new(units.clone());
        let sizes: Vec<usize> = (0..SHARDS).map(|i| shared.lock(i).len()).collect();
        assert_eq!(sizes.iter().sum::<usize>(), 5000);
        // Shared out evenly enough: no shard holds more than twice its part.
        assert!(
            sizes.iter().all(|&n| n > 0 && n < 2 * 5000 / SHARDS),
            "{sizes:?}"
        );
        for i in 0..SHARDS {
            assert!(shared.lock(i).keys().all(|id| shard_of(id) == i));
        }
        let back = shared.into_map();
        assert_eq!(back.len(), units.len());
        assert!(units.iter().all(|(id, s)| back[id].readings == s.readings));
    }

    #[test]
    fn a_summary_is_found_or_made() {
        let mut units = UnitMap::default();
        let id: Arc<str> = Arc::from("A-1");
        with_summary(&mut units, &id, |s| s.readings += 2);
        with_summary(&mut units, &Arc::from("A-1"), |s| s.readings += 3);
        assert_eq!(units.len(), 1);
        assert_eq!(units["A-1"].readings, 5);
    }
}
