//! A string of units in position order, with its median and its outliers.

use super::canvas::{
    category, skipped, Canvas, LegendEntry, Plan, Shape, Swatch, XPlan, INK, NOT_FINITE,
};
use super::svg::fixed;
use super::{ChartFrame, PALETTE};

/// One unit of a series string, in position order.
#[derive(Clone, Debug, PartialEq)]
pub struct StripPoint {
    /// Position label along x, e.g. the cell or block number "7".
    pub label: String,
    /// The value in the y axis's unit, e.g. rest volts per cell.
    pub y: f64,
    /// Drawn with its own shape and a text label when true.
    pub outlier: bool,
}

/// A series string: one marker per unit at its position, a dashed median line
/// labelled with its value, and outliers as amber diamonds with a text label
/// ("7: 2.031"), ordinary units as blue circles. A non-finite value leaves its
/// position empty and is counted in the description; a non-finite median is
/// not drawn.
pub fn string_strip(frame: &ChartFrame, points: &[StripPoint], median: f64) -> String {
    let mut y_data: Vec<f64> = points
        .iter()
        .map(|p| p.y)
        .filter(|v| v.is_finite())
        .collect();
    let drawn = y_data.len();
    let mut notes = Vec::new();
    if drawn < points.len() {
        notes.push(skipped(points.len() - drawn, "unit", NOT_FINITE));
    }
    let median_ok = median.is_finite() && drawn > 0;
    if median_ok {
        y_data.push(median);
    }
    let (normal, outlier) = (PALETTE[0], PALETTE[1]);
    let mut legend = vec![LegendEntry {
        label: "unit".into(),
        swatch: Swatch {
            colour: normal,
            fill: None,
            line: None,
            marker: Some(Shape::Circle),
        },
    }];
    if points.iter().any(|p| p.outlier && p.y.is_finite()) {
        legend.push(LegendEntry {
            label: "outlier".into(),
            swatch: Swatch {
                colour: outlier,
                fill: None,
                line: None,
                marker: Some(Shape::Diamond),
            },
        });
    }
    if median_ok {
        legend.push(LegendEntry {
            label: "median".into(),
            swatch: Swatch {
                colour: INK,
                fill: None,
                line: Some(Some(MEDIAN_DASH)),
                marker: None,
            },
        });
    }
    let mut c = Canvas::begin(Plan {
        frame,
        kind: "string-strip",
        x: XPlan::Categories(points.iter().map(|p| p.label.clone()).collect()),
        y_data,
        y_include_zero: false,
        legend,
        has_data: drawn > 0,
        notes,
    });
    let digits = c.y_decimals + 1;

    c.begin_marks();
    let mut labels = Vec::new();
    for (i, p) in points.iter().enumerate().filter(|(_, p)| p.y.is_finite()) {
        let (px, py) = (category(&c.x, i).0, c.y.map(p.y));
        let tip = format!("{}: {}", p.label, fixed(p.y, digits));
        if p.outlier {
            c.marker(Shape::Diamond, px, py, outlier, "outlier", Some(&tip));
            labels.push((px, py, tip));
        } else {
            c.marker(Shape::Circle, px, py, normal, "unit", Some(&tip));
        }
    }
    c.end_marks();
    if median_ok {
        let text = format!("median {}", fixed(median, digits));
        c.reference_line(median, &text, MEDIAN_DASH, "median");
    }
    // Outlier labels sit outside the clip so a label near the edge stays readable.
    for (px, py, text) in labels {
        c.label(px + 7.0, py + 4.0, "start", &text, "outlier");
    }
    c.finish()
}

const MEDIAN_DASH: &str = "6 3";

#[cfg(test)]
mod tests {
    use super::*;
    use crate::report::charts::test_support::{check, count_class, frame};

    fn fr() -> ChartFrame {
        frame(
            "Rest voltage along string B",
            "Position in string (cell)",
            "Rest voltage per cell (V)",
        )
    }

    /// Invented demo readings of a six-cell string with one low cell.
    fn cells() -> Vec<StripPoint> {
        [2.121, 2.118, 2.124, 2.031, 2.119, 2.122]
            .iter()
            .enumerate()
            .map(|(i, &y)| StripPoint {
                label: (i + 1).to_string(),
                y,
                outlier: i == 3,
            })
            .collect()
    }

    #[test]
    fn strip_is_valid_and_outliers_have_own_shape_and_label() {
        let f = fr();
        let svg = string_strip(&f, &cells(), 2.120);
        check(&svg, &f);
        let doc = roxmltree::Document::parse(&svg).unwrap();
        let marks = doc
            .descendants()
            .find(|n| n.attribute("class") == Some("marks"))
            .unwrap();
        let kinds: Vec<_> = marks
            .descendants()
            .filter(|n| n.attribute("class").is_some_and(|c| c.contains("marker-")))
            .map(|n| (n.tag_name().name(), n.attribute("class").unwrap()))
            .collect();
        assert_eq!(
            kinds
                .iter()
                .filter(|k| *k == &("circle", "unit marker-circle"))
                .count(),
            5
        );
        assert_eq!(
            kinds
                .iter()
                .filter(|k| *k == &("polygon", "outlier marker-diamond"))
                .count(),
            1
        );
        assert_eq!(count_class(&svg, "outlier-label"), 1);
        assert!(svg.contains(">4: 2.031<"));
        assert!(svg.contains(">median 2.120<"));
    }

    #[test]
    fn empty_single_and_nan_strip() {
        let f = fr();
        let desc = check(&string_strip(&f, &[], f64::NAN), &f);
        assert!(desc.contains("No data"));
        let one = [StripPoint {
            label: "1".into(),
            y: 2.1,
            outlier: false,
        }];
        check(&string_strip(&f, &one, 2.1), &f);
        let mut pts = cells();
        pts[1].y = f64::NAN;
        let desc = check(&string_strip(&f, &pts, f64::NAN), &f);
        assert!(desc.contains("Skipped 1 unit (NaN or infinite)."), "{desc}");
        assert_eq!(count_class(&string_strip(&f, &pts, f64::NAN), "median"), 0);
    }

    #[test]
    fn snapshot_string_strip() {
        insta::assert_snapshot!(string_strip(&fr(), &cells(), 2.120));
    }
}
