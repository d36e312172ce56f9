//! Scatter of readings against a reference curve with a shaded region below it.

use super::canvas::{
    points, skipped, Canvas, Fill, LegendEntry, Pattern, Plan, Shape, Swatch, XPlan, INK,
    NOT_FINITE,
};
use super::svg::{attrs, fixed};
use super::{ChartFrame, PALETTE};

/// One reading in a scatter chart.
#[derive(Clone, Debug, PartialEq)]
pub struct ScatterPoint {
    /// Position along x in the x axis's unit, e.g. state of charge in %.
    pub x: f64,
    /// Position along y in the y axis's unit, e.g. temperature in °C.
    pub y: f64,
    /// Name of the reading (shown as a text label when flagged, on hover otherwise).
    pub label: String,
    /// Drawn as an amber triangle with its label when true.
    pub flagged: bool,
}

/// Readings as points (blue circles; flagged ones amber triangles with a text
/// label) over a reference `curve` of `(x, y)` pairs in x order, drawn as a
/// solid line named `curve_label`, and the region below it hatched and
/// labelled `region_label` (e.g. "electrolyte may freeze" below the freezing
/// point). Non-finite points and curve points are skipped and counted.
pub fn scatter_with_curve(
    frame: &ChartFrame,
    points_in: &[ScatterPoint],
    curve: &[(f64, f64)],
    curve_label: &str,
    region_label: &str,
) -> String {
    let pts: Vec<&ScatterPoint> = points_in
        .iter()
        .filter(|p| p.x.is_finite() && p.y.is_finite())
        .collect();
    let line: Vec<(f64, f64)> = curve
        .iter()
        .copied()
        .filter(|(x, y)| x.is_finite() && y.is_finite())
        .collect();
    let x_data: Vec<f64> = pts
        .iter()
        .map(|p| p.x)
        .chain(line.iter().map(|c| c.0))
        .collect();
    let y_data: Vec<f64> = pts
        .iter()
        .map(|p| p.y)
        .chain(line.iter().map(|c| c.1))
        .collect();
    let mut notes = Vec::new();
    if pts.len() < points_in.len() {
        notes.push(skipped(points_in.len() - pts.len(), "point", NOT_FINITE));
    }
    if line.len() < curve.len() {
        notes.push(skipped(curve.len() - line.len(), "curve point", NOT_FINITE));
    }
    let (normal, flagged) = (PALETTE[0], PALETTE[1]);
    let region = Fill {
        pattern: Pattern::Hatch,
        colour: PALETTE[2],
        opacity: 0.2,
    };
    let mut legend = vec![LegendEntry {
        label: "reading".into(),
        swatch: Swatch {
            colour: normal,
            fill: None,
            line: None,
            marker: Some(Shape::Circle),
        },
    }];
    if pts.iter().any(|p| p.flagged) {
        legend.push(LegendEntry {
            label: "flagged".into(),
            swatch: Swatch {
                colour: flagged,
                fill: None,
                line: None,
                marker: Some(Shape::Triangle),
            },
        });
    }
    if line.len() >= 2 {
        legend.push(LegendEntry {
            label: curve_label.into(),
            swatch: Swatch {
                colour: INK,
                fill: None,
                line: Some(None),
                marker: None,
            },
        });
        legend.push(LegendEntry {
            label: region_label.into(),
            swatch: Swatch {
                colour: PALETTE[2],
                fill: Some(region),
                line: None,
                marker: None,
            },
        });
    }
    let has_data = !x_data.is_empty();
    let mut c = Canvas::begin(Plan {
        frame,
        kind: "scatter-curve",
        x: XPlan::Numeric {
            data: x_data,
            ticks: Vec::new(),
        },
        y_data,
        y_include_zero: false,
        legend,
        has_data,
        notes,
    });

    c.begin_marks();
    if line.len() >= 2 {
        let px: Vec<(f64, f64)> = line
            .iter()
            .map(|&(x, y)| (c.x.map(x), c.y.map(y)))
            .collect();
        let floor = c.area.bottom;
        let mut outline = Vec::with_capacity(px.len() + 2);
        outline.push((px[0].0, floor));
        outline.extend(&px);
        outline.push((px[px.len() - 1].0, floor));
        let url = c.fill_url(region);
        c.svg.empty(
            "polygon",
            attrs! {"class" => "region", "points" => points(&outline), "fill" => url, "stroke" => "none"},
        );
        c.polyline(&px, INK, None, "curve");
    }
    let mut labels = Vec::new();
    let (xd, yd) = (c.x_decimals + 1, c.y_decimals + 1);
    for p in &pts {
        let (px, py) = (c.x.map(p.x), c.y.map(p.y));
        let tip = format!("{}: {}, {}", p.label, fixed(p.x, xd), fixed(p.y, yd));
        if p.flagged {
            c.marker(Shape::Triangle, px, py, flagged, "flagged", Some(&tip));
            labels.push((px, py, p.label.as_str()));
        } else {
            c.marker(Shape::Circle, px, py, normal, "reading", Some(&tip));
        }
    }
    c.end_marks();
    if line.len() >= 2 {
        // Region label in its bottom-left corner, curve label by the curve's end:
        // both inside the plot, outside the clip so they are never cut.
        let (x0, x1) = (c.x.map(line[0].0), c.x.map(line[line.len() - 1].0));
        let y1 = c.y.map(line[line.len() - 1].1);
        let bottom = c.area.bottom;
        c.label(
            x0.min(x1) + 6.0,
            bottom - 6.0,
            "start",
            region_label,
            "region",
        );
        c.label(
            x1,
            y1 - 6.0,
            if x1 > x0 { "end" } else { "start" },
            curve_label,
            "curve",
        );
    }
    for (px, py, text) in labels {
        c.label(px + 7.0, py - 5.0, "start", text, "flagged");
    }
    c.finish()
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::report::charts::test_support::{check, count_class, frame};

    fn fr() -> ChartFrame {
        frame(
            "Freezing risk by unit",
            "State of charge (%)",
            "Temperature (°C)",
        )
    }

    /// Freezing point against SG from US Army TM 5-1185 Table III (published,
    /// /work/shared/REFERENCES.md §3), placed on an illustrative SOC axis: the
    /// SOC positions are invented for the demo, the temperatures are not.
    fn freeze_curve() -> Vec<(f64, f64)> {
        vec![
            (0.0, -7.0),
            (25.0, -15.0),
            (50.0, -27.0),
            (75.0, -52.0),
            (100.0, -68.0),
        ]
    }

    /// Invented demo readings.
    fn readings() -> Vec<ScatterPoint> {
        vec![
            ScatterPoint {
                x: 85.0,
                y: -10.0,
                label: "Mast 3".into(),
                flagged: false,
            },
            ScatterPoint {
                x: 40.0,
                y: -18.0,
                label: "Gate 'B'".into(),
                flagged: false,
            },
            ScatterPoint {
                x: 15.0,
                y: -14.0,
                label: "Pump 7".into(),
                flagged: true,
            },
        ]
    }

    #[test]
    fn scatter_is_valid_with_curve_region_and_flag_shape() {
        let f = fr();
        let svg = scatter_with_curve(
            &f,
            &readings(),
            &freeze_curve(),
            "freezing point",
            "electrolyte may freeze",
        );
        check(&svg, &f);
        assert_eq!(count_class(&svg, "region"), 1);
        assert_eq!(count_class(&svg, "curve"), 1);
        assert!(svg.contains(">electrolyte may freeze<"));
        assert!(svg.contains("Gate &apos;B&apos;"));
        let doc = roxmltree::Document::parse(&svg).unwrap();
        let marks = doc
            .descendants()
            .find(|n| n.attribute("class") == Some("marks"))
            .unwrap();
        let flagged: Vec<_> = marks
            .descendants()
            .filter(|n| n.attribute("class") == Some("flagged marker-triangle"))
            .collect();
        let normal: Vec<_> = marks
            .descendants()
            .filter(|n| n.attribute("class") == Some("reading marker-circle"))
            .collect();
        assert_eq!((flagged.len(), normal.len()), (1, 2));
        assert_eq!(flagged[0].tag_name().name(), "polygon");
        assert_eq!(normal[0].tag_name().name(), "circle");
        assert_eq!(count_class(&svg, "flagged-label"), 1);
    }

    #[test]
    fn empty_single_and_nan_scatter() {
        let f = fr();
        let desc = check(&scatter_with_curve(&f, &[], &[], "c", "r"), &f);
        assert!(desc.contains("No data"));
        let one = [ScatterPoint {
            x: 50.0,
            y: 5.0,
            label: "A".into(),
            flagged: true,
        }];
        check(&scatter_with_curve(&f, &one, &[], "c", "r"), &f);
        let mut pts = readings();
        pts[0].y = f64::NAN;
        let curve = [(0.0, -7.0), (f64::NAN, 1.0), (100.0, -68.0)];
        let desc = check(&scatter_with_curve(&f, &pts, &curve, "c", "r"), &f);
        assert!(
            desc.contains("Skipped 1 point (NaN or infinite)."),
            "{desc}"
        );
        assert!(
            desc.contains("Skipped 1 curve point (NaN or infinite)."),
            "{desc}"
        );
    }

    #[test]
    fn snapshot_scatter_with_curve() {
        let f = fr();
        insta::assert_snapshot!(scatter_with_curve(
            &f,
            &readings(),
            &freeze_curve(),
            "freezing point",
            "electrolyte may freeze"
        ));
    }
}
