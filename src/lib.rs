//! restvolt: state of charge of lead-acid batteries from rest voltage and
//! hydrometer readings, with an honest uncertainty, plausibility flags and a
//! fleet diagnosis.
//!
//! Data flows one way: input → [`units`] → electrolyte/profile → correct →
//! fleet → rules → report. No module reaches back up that chain.
#![warn(missing_docs)]

pub mod calibrate;
pub mod cli;
pub mod correct;
pub mod electrolyte;
pub mod fleet;
pub mod float;
pub(crate) mod pool;
pub mod profile;
pub mod report;
pub mod rules;
pub mod safety;
pub mod settle;
pub mod units;
pub mod ventilation;
