//! Time series with an interval band and labelled threshold lines.

use super::canvas::{
    points, series_style, skipped, Canvas, Fill, LegendEntry, Pattern, Plan, Swatch, XPlan,
    NOT_FINITE,
};
use super::svg::{attrs, fixed};
use super::ChartFrame;

/// One point of a banded series: x in the x axis's unit (e.g. days), the
/// estimate `y` and its interval `low`..`high` in the y axis's unit.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct BandPoint {
    /// Position along x, e.g. days since the first reading.
    pub x: f64,
    /// The estimate, e.g. state of charge in %.
    pub y: f64,
    /// Lower end of the interval.
    pub low: f64,
    /// Upper end of the interval.
    pub high: f64,
}

/// A horizontal line across the plot with a text label, e.g. "recharge below 75 %".
#[derive(Clone, Debug, PartialEq)]
pub struct Threshold {
    /// Where the line sits, in the y axis's unit.
    pub y: f64,
    /// The label written at its right end.
    pub label: String,
}

/// Series over time, each a line with markers over a shaded interval band,
/// plus threshold lines. Series are `(name, points in x order)`; each has its
/// own colour, marker shape and dash, and is named in the legend.
/// `x_tick_labels` are `(x, label)` pairs written by the caller (e.g. dates);
/// when empty, numeric ticks are generated. A point with any non-finite field
/// is skipped (the line breaks there) and counted in the description.
pub fn band_series(
    frame: &ChartFrame,
    series: &[(String, Vec<BandPoint>)],
    thresholds: &[Threshold],
    x_tick_labels: &[(f64, String)],
) -> String {
    let ok = |p: &BandPoint| [p.x, p.y, p.low, p.high].iter().all(|v| v.is_finite());
    let valid = || {
        series
            .iter()
            .flat_map(|(_, pts)| pts.iter().filter(|p| ok(p)))
    };
    let x_data: Vec<f64> = valid().map(|p| p.x).collect();
    let mut y_data: Vec<f64> = valid().flat_map(|p| [p.y, p.low, p.high]).collect();
    let lines: Vec<&Threshold> = thresholds.iter().filter(|t| t.y.is_finite()).collect();
    y_data.extend(lines.iter().map(|t| t.y));

    let total: usize = series.iter().map(|(_, p)| p.len()).sum();
    let mut notes = Vec::new();
    if x_data.len() < total {
        notes.push(skipped(total - x_data.len(), "point", NOT_FINITE));
    }
    if lines.len() < thresholds.len() {
        notes.push(skipped(
            thresholds.len() - lines.len(),
            "threshold",
            NOT_FINITE,
        ));
    }
    let style = |i: usize| {
        let (colour, shape, dash, _) = series_style(i);
        let band = Fill {
            pattern: Pattern::Solid,
            colour,
            opacity: 0.18,
        };
        (colour, shape, dash, band)
    };
    let legend = (0..series.len())
        .map(|i| {
            let (colour, shape, dash, band) = style(i);
            LegendEntry {
                label: series[i].0.clone(),
                swatch: Swatch {
                    colour,
                    fill: Some(band),
                    line: Some(dash),
                    marker: Some(shape),
                },
            }
        })
        .collect();
    let has_data = !x_data.is_empty();
    let mut c = Canvas::begin(Plan {
        frame,
        kind: "band-series",
        x: XPlan::Numeric {
            data: x_data,
            ticks: x_tick_labels.to_vec(),
        },
        y_data,
        y_include_zero: false,
        legend,
        has_data,
        notes,
    });

    c.begin_marks();
    for (i, (name, pts)) in series.iter().enumerate() {
        let (colour, shape, dash, band) = style(i);
        let url = c.fill_url(band);
        // Runs of consecutive valid points: a skipped point breaks line and band.
        for run in pts.split(|p| !ok(p)).filter(|r| !r.is_empty()) {
            let upper = run.iter().map(|p| (c.x.map(p.x), c.y.map(p.high)));
            let lower = run.iter().rev().map(|p| (c.x.map(p.x), c.y.map(p.low)));
            let outline: Vec<(f64, f64)> = upper.chain(lower).collect();
            c.svg.empty(
                "polygon",
                attrs! {"class" => format!("band series-{i}"), "points" => points(&outline), "fill" => url.as_str(), "stroke" => "none"},
            );
            let line: Vec<(f64, f64)> = run.iter().map(|p| (c.x.map(p.x), c.y.map(p.y))).collect();
            c.polyline(&line, colour, dash, &format!("series-line series-{i}"));
            for (p, &(px, py)) in run.iter().zip(&line) {
                let (xd, yd) = (c.x_decimals + 1, c.y_decimals + 1);
                let tip = format!(
                    "{name}, x {}: {} ({} to {})",
                    fixed(p.x, xd),
                    fixed(p.y, yd),
                    fixed(p.low, yd),
                    fixed(p.high, yd)
                );
                c.marker(
                    shape,
                    px,
                    py,
                    colour,
                    &format!("point series-{i}"),
                    Some(&tip),
                );
            }
        }
    }
    c.end_marks();
    for t in lines {
        c.reference_line(t.y, &t.label, "2 3", "threshold");
    }
    c.finish()
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::report::charts::test_support::{check, count_class, frame};

    fn fr() -> ChartFrame {
        frame("State of charge over time", "Date", "State of charge (%)")
    }

    /// Invented demo series: two banks over four weekly readings.
    fn banks() -> Vec<(String, Vec<BandPoint>)> {
        let mk = |v: &[(f64, f64)]| {
            v.iter()
                .enumerate()
                .map(|(i, &(y, u))| BandPoint {
                    x: 7.0 * i as f64,
                    y,
                    low: y - u,
                    high: y + u,
                })
                .collect()
        };
        vec![
            (
                "Bank North".into(),
                mk(&[(92.0, 4.0), (88.0, 4.0), (81.0, 5.0), (77.0, 6.0)]),
            ),
            (
                "Bank South".into(),
                mk(&[(70.0, 8.0), (74.0, 7.0), (79.0, 6.0), (85.0, 5.0)]),
            ),
        ]
    }

    fn recharge() -> Vec<Threshold> {
        // Common practice in this project's rules: recharge below 75 % (illustrative label only).
        vec![Threshold {
            y: 75.0,
            label: "recharge below 75 %".into(),
        }]
    }

    fn ticks() -> Vec<(f64, String)> {
        vec![
            (0.0, "3 Mar".into()),
            (7.0, "10 Mar".into()),
            (14.0, "17 Mar".into()),
            (21.0, "24 Mar".into()),
            (99.0, "off".into()),
        ]
    }

    #[test]
    fn band_series_is_valid_with_bands_lines_and_threshold() {
        let f = fr();
        let svg = band_series(&f, &banks(), &recharge(), &ticks());
        check(&svg, &f);
        assert_eq!(count_class(&svg, "band"), 2);
        assert_eq!(count_class(&svg, "series-line"), 2);
        assert_eq!(count_class(&svg, "threshold"), 1);
        assert!(svg.contains(">recharge below 75 %<"));
        assert!(svg.contains(">17 Mar<"));
        // A tick outside the data range is not drawn.
        assert!(!svg.contains(">off<"));
        // The two series use different marker shapes and dashes.
        assert_eq!(count_class(&svg, "marker-circle"), 4 + 1); // + legend swatch
        assert_eq!(count_class(&svg, "marker-square"), 4 + 1);
        assert!(svg.contains("stroke-dasharray=\"6 3\""));
    }

    #[test]
    fn nan_breaks_the_line_and_is_counted() {
        let f = fr();
        let mut s = banks();
        s[0].1[1].y = f64::NAN;
        let svg = band_series(
            &f,
            &s,
            &[Threshold {
                y: f64::NAN,
                label: "x".into(),
            }],
            &[],
        );
        let desc = check(&svg, &f);
        assert!(
            desc.contains("Skipped 1 point (NaN or infinite)."),
            "{desc}"
        );
        assert!(
            desc.contains("Skipped 1 threshold (NaN or infinite)."),
            "{desc}"
        );
        // North splits into a run of one and a run of two: three lines in all.
        assert_eq!(count_class(&svg, "series-line"), 3);
    }

    #[test]
    fn empty_and_single_point_band_series() {
        let f = fr();
        let desc = check(&band_series(&f, &[], &[], &[]), &f);
        assert!(desc.contains("No data"));
        let one = vec![(
            "A".to_string(),
            vec![BandPoint {
                x: 3.0,
                y: 50.0,
                low: 50.0,
                high: 50.0,
            }],
        )];
        check(&band_series(&f, &one, &[], &[]), &f);
    }

    #[test]
    fn snapshot_band_series() {
        insta::assert_snapshot!(band_series(&fr(), &banks(), &recharge(), &ticks()));
    }
}
