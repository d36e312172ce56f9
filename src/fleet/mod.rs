//! Fleets: many units, many readings over time.
//!
//! [`ingest`] streams readings from CSV files into [`ingest::FleetRow`]s with
//! per-record rejects; [`generate`] writes a reproducible synthetic fleet in
//! the same format, with a documented mix of faults, for demos and tests.

pub mod analysis;
pub mod generate;
pub mod ingest;
mod shards;
pub mod summary;

#[cfg(test)]
mod tests;
