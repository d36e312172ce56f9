//! Deterministic, self-contained SVG charts for the fleet report page.
//!
//! Every chart is one `<svg role="img">` whose first children are `<title>`
//! and `<desc>` (the text alternative, named by `aria-labelledby`), followed by
//! a visible title, a legend, axes with labels and units, and the marks. No
//! scripts, no fonts (the generic `sans-serif` family), no external files.
//!
//! The same input always gives the same bytes: coordinates are written with one
//! decimal place, tick labels with the decimals their step needs, and nothing
//! iterates a hash map. Element ids are derived from the title and description,
//! so several charts can share one HTML page as long as their titles differ.
//!
//! Colour never carries meaning alone: series also differ by marker shape,
//! line dash and fill pattern, special points (outliers, flagged readings)
//! use their own shape and a text label, and every series is named in a legend.
//!
//! # Palette
//! Our own five colours, chosen along the blue–orange axis that stays
//! distinguishable in the common colour-vision deficiencies, and spread in
//! lightness so that they still differ when printed in grey. Each has at least
//! 3:1 contrast against the white background (WCAG 2.1, SC 1.4.11, for
//! graphical objects); see the test `palette_contrast_against_white`.
//!
//! | # | name      | hex       | use                            |
//! |---|-----------|-----------|--------------------------------|
//! | 0 | ink blue  | `#1F4E79` | first series, ordinary points  |
//! | 1 | amber     | `#B8650F` | second series, outliers/flags  |
//! | 2 | sky       | `#4A8FC0` | third series, the freeze region|
//! | 3 | plum      | `#7E3F73` | fourth series                  |
//! | 4 | slate     | `#6E6E6E` | fifth series                   |
//!
//! Axes and text use `#333333`, grid lines `#DDDDDD`, reference lines
//! (medians, thresholds, curves) `#333333` with their own dash.
//!
//! Chart values are plain `f64` in the unit that the matching [`Axis::label`]
//! names; charts do not interpret them.

mod band;
mod bars;
mod canvas;
mod scale;
mod scatter;
mod strip;
pub(crate) mod svg;

pub use band::{band_series, BandPoint, Threshold};
pub use bars::grouped_bars;
pub use scatter::{scatter_with_curve, ScatterPoint};
pub use strip::{string_strip, StripPoint};

/// The five series colours, in the order series use them (see the module docs).
pub const PALETTE: [&str; 5] = ["#1F4E79", "#B8650F", "#4A8FC0", "#7E3F73", "#6E6E6E"];

/// One axis of a chart.
#[derive(Clone, Debug, PartialEq)]
pub struct Axis {
    /// The axis label with its unit, e.g. "State of charge (%)".
    pub label: String,
    /// Lower end of the axis in the label's unit; `None` fits the data.
    pub min: Option<f64>,
    /// Upper end of the axis in the label's unit; `None` fits the data.
    pub max: Option<f64>,
}

/// What every chart shares: its title, its text alternative, its size and axes.
#[derive(Clone, Debug, PartialEq)]
pub struct ChartFrame {
    /// Visible title, also the SVG `<title>`.
    pub title: String,
    /// What the chart shows in words, for the SVG `<desc>`; the chart adds
    /// counts of anything it could not draw.
    pub description: String,
    /// Width of the drawing in CSS pixels (at least 240 is used).
    pub width_px: u32,
    /// Height of the drawing in CSS pixels (grown if the legend needs room).
    pub height_px: u32,
    /// The horizontal axis.
    pub x: Axis,
    /// The vertical axis.
    pub y: Axis,
}

#[cfg(test)]
pub(crate) mod test_support {
    //! Checks every chart test shares: the output must be well-formed XML with
    //! the text alternative in place.
    use super::{Axis, ChartFrame};

    pub fn frame(title: &str, x_label: &str, y_label: &str) -> ChartFrame {
        ChartFrame {
            title: title.into(),
            description: format!("{title}, for testing."),
            width_px: 480,
            height_px: 300,
            x: Axis {
                label: x_label.into(),
                min: None,
                max: None,
            },
            y: Axis {
                label: y_label.into(),
                min: None,
                max: None,
            },
        }
    }

    /// Parses `svg` with an independent XML parser and checks the accessibility
    /// structure; returns the `<desc>` text.
    pub fn check(svg: &str, frame: &ChartFrame) -> String {
        let doc = roxmltree::Document::parse(svg).unwrap_or_else(|e| panic!("{e}\n{svg}"));
        let root = doc.root_element();
        assert_eq!(root.tag_name().name(), "svg");
        assert_eq!(root.attribute("role"), Some("img"));
        let kids: Vec<_> = root.children().filter(|n| n.is_element()).collect();
        assert_eq!(kids[0].tag_name().name(), "title");
        assert_eq!(kids[1].tag_name().name(), "desc");
        assert_eq!(kids[0].text(), Some(frame.title.as_str()));
        let labelled = root.attribute("aria-labelledby").unwrap_or_default();
        for id in labelled.split(' ') {
            assert!(
                doc.descendants().any(|n| n.attribute("id") == Some(id)),
                "aria-labelledby names missing id {id}"
            );
        }
        let texts: Vec<&str> = doc.descendants().filter_map(|n| n.text()).collect();
        for label in [&frame.x.label, &frame.y.label] {
            assert!(
                texts.contains(&label.as_str()),
                "axis label {label} missing"
            );
        }
        kids[1].text().unwrap_or_default().to_string()
    }

    /// Elements whose class list contains `class`.
    pub fn count_class(svg: &str, class: &str) -> usize {
        let doc = roxmltree::Document::parse(svg).unwrap();
        doc.descendants()
            .filter(|n| {
                n.attribute("class")
                    .is_some_and(|c| c.split(' ').any(|w| w == class))
            })
            .count()
    }
}

#[cfg(test)]
mod tests {
    use super::PALETTE;

    /// WCAG 2.1 relative luminance of an sRGB colour `#RRGGBB` (published definition).
    fn luminance(hex: &str) -> f64 {
        let ch = |i: usize| {
            let c = f64::from(u8::from_str_radix(&hex[i..i + 2], 16).unwrap()) / 255.0;
            if c <= 0.04045 {
                c / 12.92
            } else {
                ((c + 0.055) / 1.055).powf(2.4)
            }
        };
        0.2126 * ch(1) + 0.7152 * ch(3) + 0.0722 * ch(5)
    }

    #[test]
    fn palette_contrast_against_white() {
        // WCAG 2.1 SC 1.4.11 (published): graphical objects need 3:1 against adjacent colours.
        for hex in PALETTE {
            let ratio = 1.05 / (luminance(hex) + 0.05);
            assert!(ratio >= 3.0, "{hex} has contrast {ratio:.2}");
        }
    }

    #[test]
    fn first_two_series_differ_in_lightness() {
        // Common practice: the two most-used series should differ in grey as well
        // (a luminance contrast of 2:1 between them).
        let (a, b) = (luminance(PALETTE[0]), luminance(PALETTE[1]));
        let ratio = (a.max(b) + 0.05) / (a.min(b) + 0.05);
        assert!(ratio >= 2.0, "ratio {ratio:.2}");
    }

    #[test]
    fn luminance_matches_known_values() {
        // WCAG 2.1 definition (published): white is 1, black is 0.
        assert!((luminance("#FFFFFF") - 1.0).abs() < 1e-12);
        assert!(luminance("#000000").abs() < 1e-12);
    }
}

#[cfg(test)]
mod robustness {
    //! Whatever numbers arrive, every chart returns well-formed XML with its
    //! text alternative and no NaN or infinity in any attribute.
    use super::test_support::{check, frame};
    use super::*;
    use proptest::prelude::*;

    fn any_value() -> impl Strategy<Value = f64> {
        prop_oneof![
            4 => -1e3..1e3f64,
            1 => Just(f64::NAN),
            1 => Just(f64::INFINITY),
            1 => Just(f64::NEG_INFINITY),
            1 => Just(0.0),
            1 => prop::num::f64::ANY,
        ]
    }

    proptest! {
        #![proptest_config(ProptestConfig::with_cases(64))]
        #[test]
        fn every_chart_stays_valid(
            v in prop::collection::vec(any_value(), 0..12),
            lim in prop::option::of(any_value()),
            w in 0u32..2000,
        ) {
            let mut f = frame("Robust <&>", "x (%)", "y (V)");
            f.width_px = w;
            f.height_px = w / 2;
            f.y.min = lim;
            let labels: Vec<String> = (0..v.len()).map(|i| i.to_string()).collect();
            let mut outputs = vec![grouped_bars(&f, &labels, &[("a".into(), v.clone())])];
            let strip: Vec<StripPoint> = v.iter().map(|&y| StripPoint { label: "u".into(), y, outlier: y > 0.0 }).collect();
            outputs.push(string_strip(&f, &strip, v.first().copied().unwrap_or(f64::NAN)));
            let band: Vec<BandPoint> = v.windows(2).map(|p| BandPoint { x: p[0], y: p[1], low: p[1] - 1.0, high: p[1] + 1.0 }).collect();
            let th = [Threshold { y: v.last().copied().unwrap_or(0.0), label: "t".into() }];
            outputs.push(band_series(&f, &[("s".into(), band)], &th, &[]));
            let pts: Vec<ScatterPoint> = v.windows(2).map(|p| ScatterPoint { x: p[0], y: p[1], label: "p".into(), flagged: p[0] < 0.0 }).collect();
            let curve: Vec<(f64, f64)> = v.iter().map(|&x| (x, -x)).collect();
            outputs.push(scatter_with_curve(&f, &pts, &curve, "c", "r"));
            for svg in outputs {
                check(&svg, &f);
                let doc = roxmltree::Document::parse(&svg).unwrap();
                for a in doc.descendants().flat_map(|n| n.attributes()) {
                    let v = a.value();
                    prop_assert!(!v.contains("NaN") && !v.contains("inf"), "{}={}", a.name(), v);
                }
            }
        }
    }
}
