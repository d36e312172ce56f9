//! Grouped bars: one group of bars per bin, one bar per site.

use super::canvas::{
    category, series_style, skipped, Canvas, Fill, LegendEntry, Plan, Swatch, XPlan, NOT_FINITE,
};
use super::svg::attrs;
use super::ChartFrame;

/// Histogram-like grouped bars, e.g. the state-of-charge distribution per
/// site. `bin_labels` name the bins along x ("0–10", …); each group is
/// `(site name, one value per bin)` in the y axis's unit. Groups differ by
/// colour and fill pattern and are named in the legend. Non-finite values are
/// skipped and counted in the description, as are values beyond the last bin.
pub fn grouped_bars(
    frame: &ChartFrame,
    bin_labels: &[String],
    groups: &[(String, Vec<f64>)],
) -> String {
    let bins = bin_labels.len();
    let (mut y_data, mut not_finite, mut beyond) = (Vec::new(), 0, 0);
    for (_, values) in groups {
        for (i, v) in values.iter().enumerate() {
            if i >= bins {
                beyond += 1;
            } else if v.is_finite() {
                y_data.push(*v);
            } else {
                not_finite += 1;
            }
        }
    }
    let fills: Vec<(&'static str, Fill)> = (0..groups.len())
        .map(|g| {
            let (colour, _, _, pattern) = series_style(g);
            (
                colour,
                Fill {
                    pattern,
                    colour,
                    opacity: 1.0,
                },
            )
        })
        .collect();
    let legend = groups
        .iter()
        .zip(&fills)
        .map(|((name, _), &(colour, fill))| LegendEntry {
            label: name.clone(),
            swatch: Swatch {
                colour,
                fill: Some(fill),
                line: None,
                marker: None,
            },
        })
        .collect();
    let mut notes = Vec::new();
    if not_finite > 0 {
        notes.push(skipped(not_finite, "value", NOT_FINITE));
    }
    if beyond > 0 {
        notes.push(skipped(beyond, "value", "beyond the last bin"));
    }
    let has_data = !y_data.is_empty();
    let mut c = Canvas::begin(Plan {
        frame,
        kind: "grouped-bars",
        x: XPlan::Categories(bin_labels.to_vec()),
        y_data,
        y_include_zero: true,
        legend,
        has_data,
        notes,
    });

    c.begin_marks();
    let base = c.y.map(0.0f64.clamp(c.y.d0, c.y.d1));
    let slot_count = groups.len().max(1) as f64;
    for (b, bin) in bin_labels.iter().enumerate() {
        let (centre, band) = category(&c.x, b);
        let slot = band * 0.8 / slot_count;
        let start = centre - band * 0.4;
        for (g, ((name, values), &(colour, fill))) in groups.iter().zip(&fills).enumerate() {
            let Some(v) = values.get(b).copied().filter(|v| v.is_finite()) else {
                continue;
            };
            let top = c.y.map(v);
            let tip = format!("{name}, {bin}: {}", super::svg::fixed(v, c.y_decimals + 1));
            let url = c.fill_url(fill);
            c.svg.open(
                "rect",
                attrs! {"class" => format!("bar series-{g}"), "x" => start + g as f64 * slot, "y" => top.min(base),
                "width" => (slot - 1.0).max(0.5), "height" => (top - base).abs(), "fill" => url, "stroke" => colour},
            );
            c.svg.text("title", attrs! {}, &tip);
            c.svg.close("rect");
        }
    }
    c.end_marks();
    c.finish()
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::report::charts::test_support::{check, count_class, frame};

    fn bins() -> Vec<String> {
        ["0–25", "25–50", "50–75", "75–100"]
            .map(String::from)
            .to_vec()
    }

    fn sites() -> Vec<(String, Vec<f64>)> {
        // Invented demo counts.
        vec![
            ("Harbour depot".into(), vec![1.0, 2.0, 5.0, 9.0]),
            ("Hill & Vale <north>".into(), vec![0.0, 4.0, 3.0, 6.0]),
        ]
    }

    fn fr() -> ChartFrame {
        frame(
            "State of charge by site",
            "State of charge (%)",
            "Units (count)",
        )
    }

    #[test]
    fn bars_are_valid_and_labelled() {
        let f = fr();
        let svg = grouped_bars(&f, &bins(), &sites());
        check(&svg, &f);
        assert_eq!(count_class(&svg, "bar"), 8);
        assert_eq!(count_class(&svg, "series-1"), 4);
        assert!(svg.contains("Hill &amp; Vale &lt;north&gt;"));
    }

    #[test]
    fn groups_differ_by_pattern_not_only_colour() {
        let svg = grouped_bars(&fr(), &bins(), &sites());
        let doc = roxmltree::Document::parse(&svg).unwrap();
        let patterns: Vec<_> = doc
            .descendants()
            .filter(|n| n.has_tag_name("pattern"))
            .collect();
        assert_eq!(patterns.len(), 2);
        // The first pattern is solid, the second has hatching strokes.
        assert!(!patterns[0].children().any(|n| n.has_tag_name("path")));
        assert!(patterns[1].children().any(|n| n.has_tag_name("path")));
    }

    #[test]
    fn empty_bars_draw_frame_and_note() {
        let f = fr();
        let svg = grouped_bars(&f, &[], &[]);
        let desc = check(&svg, &f);
        assert!(desc.contains("No data"));
        assert_eq!(count_class(&svg, "no-data"), 1);
        assert_eq!(count_class(&svg, "plot-frame"), 1);
    }

    #[test]
    fn nan_and_extra_values_are_counted() {
        let f = fr();
        let groups = vec![(
            "A".to_string(),
            vec![1.0, f64::NAN, 3.0, f64::INFINITY, 7.0],
        )];
        let desc = check(&grouped_bars(&f, &bins(), &groups), &f);
        assert!(
            desc.contains("Skipped 2 values (NaN or infinite)."),
            "{desc}"
        );
        assert!(
            desc.contains("Skipped 1 value (beyond the last bin)."),
            "{desc}"
        );
    }

    #[test]
    fn single_bar_and_all_zero() {
        let f = fr();
        let one = vec![("A".to_string(), vec![4.0])];
        check(&grouped_bars(&f, &bins()[..1], &one), &f);
        let zeros = vec![("A".to_string(), vec![0.0; 4])];
        check(&grouped_bars(&f, &bins(), &zeros), &f);
    }

    #[test]
    fn snapshot_grouped_bars() {
        insta::assert_snapshot!(grouped_bars(&fr(), &bins(), &sites()));
    }
}
