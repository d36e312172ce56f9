//! Reports for people: the fleet page and the inline SVG charts that go into it.
pub mod charts;
