//! One reading → its equilibrium rest voltage at 25 °C, state of charge with a
//! GUM uncertainty, plausibility flags and a recommended action.

pub mod rest;

pub use rest::{After, RestAssessment, RestStatus};
