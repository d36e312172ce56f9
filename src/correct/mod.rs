//! One reading → its equilibrium rest voltage at 25 °C, state of charge with a
//! GUM uncertainty, plausibility flags and a recommended action.

pub mod assess;
pub mod rest;
pub mod uncertainty;

pub use assess::{
    assess, assess_without_budget, estimate, estimate_charge, Action, Assessment, Charge,
    CorrectError, Estimate, Flag, FlagCode, Reading, Reason, Setup,
};
pub use rest::{After, RestAssessment, RestStatus};

#[cfg(test)]
mod tests;
