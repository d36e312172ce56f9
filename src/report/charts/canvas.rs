//! The one frame every chart is drawn in: the `<svg>` root with its text
//! alternative, title, legend, grid, axes, tick labels and axis labels, a clip
//! region for the marks, and the "no data" note.

use super::scale::{self, Domain, Scale};
use super::svg::{attrs, fixed, Svg, Val};
use super::{ChartFrame, PALETTE};

pub(crate) const INK: &str = "#333333";
const GRID: &str = "#DDDDDD";
const CHAR_W: f64 = 6.5; // rough width of one 11 px sans-serif character
const LEGEND_ROW: f64 = 16.0;
/// Largest marker half-size (diamond: radius 4 + 1, plus half its stroke), rounded up.
const MARKER_OVERHANG: f64 = 6.0;

/// Marker shapes; each series or kind of point gets its own.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub(crate) enum Shape {
    Circle,
    Square,
    Triangle,
    Diamond,
    Cross,
}

impl Shape {
    /// Shapes in the order series use them.
    pub const ALL: [Shape; 5] = [
        Shape::Circle,
        Shape::Square,
        Shape::Triangle,
        Shape::Diamond,
        Shape::Cross,
    ];

    fn name(self) -> &'static str {
        match self {
            Shape::Circle => "circle",
            Shape::Square => "square",
            Shape::Triangle => "triangle",
            Shape::Diamond => "diamond",
            Shape::Cross => "cross",
        }
    }
}

/// Line dashes in the order series use them (`None` is solid).
pub(crate) const DASHES: [Option<&str>; 4] = [None, Some("6 3"), Some("2 2"), Some("8 3 2 3")];

/// Fill patterns drawn over a fill colour.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub(crate) enum Pattern {
    Solid,
    Hatch,
    BackHatch,
    Dots,
    Cross,
    Horizontal,
}

impl Pattern {
    /// Patterns in the order series use them.
    pub const ALL: [Pattern; 6] = [
        Pattern::Solid,
        Pattern::Hatch,
        Pattern::BackHatch,
        Pattern::Dots,
        Pattern::Cross,
        Pattern::Horizontal,
    ];
}

/// A patterned fill; its pattern element is written once, in `<defs>`.
#[derive(Clone, Copy, Debug)]
pub(crate) struct Fill {
    pub pattern: Pattern,
    pub colour: &'static str,
    pub opacity: f64,
}

/// How a legend entry looks: any mix of a fill box, a line and a marker.
#[derive(Clone, Copy, Debug)]
pub(crate) struct Swatch {
    pub colour: &'static str,
    pub fill: Option<Fill>,
    pub line: Option<Option<&'static str>>,
    pub marker: Option<Shape>,
}

/// One legend row item.
pub(crate) struct LegendEntry {
    pub label: String,
    pub swatch: Swatch,
}

/// The colour, shape, dash and pattern for series number `i`, so that no two of
/// the first thirty series look alike even without colour.
pub(crate) fn series_style(i: usize) -> (&'static str, Shape, Option<&'static str>, Pattern) {
    (
        PALETTE[i % PALETTE.len()],
        Shape::ALL[i % Shape::ALL.len()],
        DASHES[i % DASHES.len()],
        Pattern::ALL[i % Pattern::ALL.len()],
    )
}

/// The horizontal axis: named categories (bars, positions) or numbers.
pub(crate) enum XPlan {
    Categories(Vec<String>),
    /// Finite data values, and caller-given ticks (empty: nice ticks).
    Numeric {
        data: Vec<f64>,
        ticks: Vec<(f64, String)>,
    },
}

/// Everything the frame needs to know before the marks are drawn.
pub(crate) struct Plan<'a> {
    pub frame: &'a ChartFrame,
    pub kind: &'static str,
    pub x: XPlan,
    pub y_data: Vec<f64>,
    pub y_include_zero: bool,
    pub legend: Vec<LegendEntry>,
    pub has_data: bool,
    /// Sentences appended to the description (e.g. counts of skipped values).
    pub notes: Vec<String>,
}

/// Plot-area pixel bounds.
#[derive(Clone, Copy, Debug)]
pub(crate) struct Area {
    pub left: f64,
    pub top: f64,
    pub right: f64,
    pub bottom: f64,
}

/// A chart being drawn: the frame is written, marks go between
/// [`Canvas::begin_marks`] and [`Canvas::end_marks`].
pub(crate) struct Canvas {
    pub svg: Svg,
    pub x: Scale,
    pub y: Scale,
    pub area: Area,
    pub x_decimals: usize,
    pub y_decimals: usize,
    id: String,
    fills: Vec<Fill>,
    has_data: bool,
}

/// FNV-1a: a stable hash for element ids (std's hasher may change between releases).
fn stable_hash(parts: &[&str]) -> u32 {
    let mut h: u32 = 0x811c_9dc5;
    for p in parts {
        for b in p.bytes().chain([0u8]) {
            h ^= u32::from(b);
            h = h.wrapping_mul(0x0100_0193);
        }
    }
    h
}

fn text_width(s: &str) -> f64 {
    s.chars().count() as f64 * CHAR_W
}

/// Left-to-right legend layout, wrapping at `width`: (x, row) per entry.
fn legend_layout(entries: &[LegendEntry], left: f64, width: f64) -> (Vec<(f64, usize)>, usize) {
    let mut out = Vec::with_capacity(entries.len());
    let (mut x, mut row) = (left, 0);
    for e in entries {
        let w = 22.0 + text_width(&e.label) + 14.0;
        if x > left && x + w > left + width {
            x = left;
            row += 1;
        }
        out.push((x, row));
        x += w;
    }
    let rows = if entries.is_empty() { 0 } else { row + 1 };
    (out, rows)
}

impl Canvas {
    /// Writes the root, text alternative, title, legend, grid and axes.
    pub fn begin(plan: Plan) -> Canvas {
        let f = plan.frame;
        let width = f64::from(f.width_px.clamp(240, 4000));
        let (legend_pos, rows) = legend_layout(&plan.legend, 12.0, width - 24.0);
        let top = 36.0 + rows as f64 * LEGEND_ROW + 8.0;
        // The right pad leaves room for half of a last x tick label such as "24 Mar".
        let (left, right_pad, bottom_pad) = (64.0, 28.0, 46.0);
        let height = f64::from(f.height_px.min(4000)).max(top + bottom_pad + 80.0);
        let area = Area {
            left,
            top,
            right: width - right_pad,
            bottom: height - bottom_pad,
        };
        let id = format!(
            "rv-{}-{:08x}",
            plan.kind,
            stable_hash(&[plan.kind, &f.title, &f.description])
        );

        let y_target = ((area.bottom - area.top) / 40.0).clamp(2.0, 10.0) as usize;
        let yd = scale::resolve(
            &f.y,
            &plan.y_data,
            plan.y_include_zero,
            true,
            true,
            y_target,
        );
        let y = Scale {
            d0: yd.lo,
            d1: yd.hi,
            r0: area.bottom,
            r1: area.top,
        };
        let x_target = ((area.right - area.left) / 80.0).clamp(2.0, 10.0) as usize;
        let (x, x_decimals, x_ticks) = match &plan.x {
            XPlan::Categories(names) => {
                let s = Scale {
                    d0: 0.0,
                    d1: names.len().max(1) as f64,
                    r0: area.left,
                    r1: area.right,
                };
                (s, 0, category_ticks(names, &s))
            }
            XPlan::Numeric { data, ticks } => {
                let nice = ticks.is_empty();
                let xd: Domain = scale::resolve(&f.x, data, false, nice, false, x_target);
                let s = Scale {
                    d0: xd.lo,
                    d1: xd.hi,
                    r0: area.left,
                    r1: area.right,
                };
                let labelled: Vec<(f64, String)> = if nice {
                    xd.ticks
                        .iter()
                        .map(|&v| (v, fixed(v, xd.decimals)))
                        .collect()
                } else {
                    ticks
                        .iter()
                        .filter(|(v, _)| v.is_finite() && *v >= xd.lo && *v <= xd.hi)
                        .map(|(v, l)| (*v, l.clone()))
                        .collect()
                };
                (s, xd.decimals, labelled)
            }
        };

        let mut desc = f.description.trim().to_string();
        if !plan.has_data {
            plan_note(&mut desc, "No data to show.");
        }
        for n in &plan.notes {
            plan_note(&mut desc, n);
        }

        let mut svg = Svg::default();
        let (tid, did) = (format!("{id}-title"), format!("{id}-desc"));
        svg.open(
            "svg",
            attrs! {
                "xmlns" => "http://www.w3.org/2000/svg",
                "width" => fixed(width, 0), "height" => fixed(height, 0),
                "viewBox" => format!("0 0 {} {}", fixed(width, 0), fixed(height, 0)),
                "role" => "img",
                "aria-labelledby" => format!("{tid} {did}"),
                "class" => format!("rv-chart {}", plan.kind),
                "font-family" => "sans-serif", "font-size" => "11", "fill" => INK,
            },
        );
        svg.text("title", attrs! {"id" => &tid}, &f.title);
        svg.text("desc", attrs! {"id" => &did}, &desc);

        let mut c = Canvas {
            svg,
            x,
            y,
            area,
            x_decimals,
            y_decimals: yd.decimals,
            id,
            fills: Vec::new(),
            has_data: plan.has_data,
        };
        c.defs(&plan.legend);
        c.svg.empty(
            "rect",
            attrs! {"width" => width, "height" => height, "fill" => "#FFFFFF"},
        );
        c.svg.text(
            "text",
            attrs! {"class" => "chart-title", "x" => 12.0, "y" => 22.0, "font-size" => "14", "font-weight" => "bold"},
            &f.title,
        );
        c.legend(&plan.legend, &legend_pos);
        c.axes(&yd.ticks, &x_ticks, matches!(plan.x, XPlan::Categories(_)));
        c.axis_labels(&f.x.label, &f.y.label);
        c
    }

    /// `<defs>`: the plot clip and one pattern per distinct legend fill.
    fn defs(&mut self, legend: &[LegendEntry]) {
        let a = self.area;
        self.svg.open("defs", attrs! {});
        self.svg
            .open("clipPath", attrs! {"id" => format!("{}-clip", self.id)});
        // The clip reaches past the frame by a marker's half-size, so a point
        // on a fixed end (0 % or 100 %) is drawn whole instead of cut in half.
        let m = MARKER_OVERHANG;
        self.svg.empty(
            "rect",
            attrs! {"x" => a.left - m, "y" => a.top - m, "width" => a.right - a.left + 2.0 * m,
            "height" => a.bottom - a.top + 2.0 * m},
        );
        self.svg.close("clipPath");
        for fill in legend.iter().filter_map(|e| e.swatch.fill) {
            let n = self.fills.len();
            self.fills.push(fill);
            self.svg.open(
                "pattern",
                attrs! {"id" => format!("{}-fill-{n}", self.id), "width" => 6.0, "height" => 6.0, "patternUnits" => "userSpaceOnUse"},
            );
            self.svg.empty(
                "rect",
                attrs! {"width" => 6.0, "height" => 6.0, "fill" => fill.colour, "fill-opacity" => fixed(fill.opacity, 2)},
            );
            // Light fills get coloured strokes, solid fills white ones, so the
            // pattern shows on either.
            let ink = if fill.opacity >= 0.6 {
                "#FFFFFF"
            } else {
                fill.colour
            };
            let d = match fill.pattern {
                Pattern::Solid => None,
                Pattern::Hatch => Some("M-1,1 L1,-1 M0,6 L6,0 M5,7 L7,5"),
                Pattern::BackHatch => Some("M-1,5 L1,7 M0,0 L6,6 M5,-1 L7,1"),
                Pattern::Cross => Some("M0,0 L6,6 M0,6 L6,0"),
                Pattern::Horizontal => Some("M0,3 L6,3"),
                Pattern::Dots => None,
            };
            if let Some(d) = d {
                self.svg.empty(
                    "path",
                    attrs! {"d" => d, "stroke" => ink, "stroke-width" => "1.2"},
                );
            }
            if fill.pattern == Pattern::Dots {
                self.svg.empty(
                    "circle",
                    attrs! {"cx" => 3.0, "cy" => 3.0, "r" => 1.3, "fill" => ink},
                );
            }
            self.svg.close("pattern");
        }
        self.svg.close("defs");
    }

    /// `url(#…)` for the pattern of `fill`, written in `defs` from the legend.
    pub fn fill_url(&self, fill: Fill) -> String {
        let n = self
            .fills
            .iter()
            .position(|f| {
                f.pattern == fill.pattern && f.colour == fill.colour && f.opacity == fill.opacity
            })
            .unwrap_or(0);
        format!("url(#{}-fill-{n})", self.id)
    }

    fn legend(&mut self, entries: &[LegendEntry], pos: &[(f64, usize)]) {
        if entries.is_empty() {
            return;
        }
        self.svg.open("g", attrs! {"class" => "legend"});
        for (e, &(x, row)) in entries.iter().zip(pos) {
            let y = 36.0 + row as f64 * LEGEND_ROW;
            let s = e.swatch;
            if let Some(fill) = s.fill {
                let url = self.fill_url(fill);
                self.svg.empty(
                    "rect",
                    attrs! {"x" => x, "y" => y - 5.0, "width" => 18.0, "height" => 10.0, "fill" => url, "stroke" => s.colour},
                );
            }
            if let Some(dash) = s.line {
                self.polyline(&[(x, y), (x + 18.0, y)], s.colour, dash, "legend-line");
            }
            if let Some(shape) = s.marker {
                self.marker(shape, x + 9.0, y, s.colour, "legend-marker", None);
            }
            self.svg
                .text("text", attrs! {"x" => x + 22.0, "y" => y + 4.0}, &e.label);
        }
        self.svg.close("g");
    }

    fn axes(&mut self, y_ticks: &[f64], x_ticks: &[(f64, String)], categories: bool) {
        let a = self.area;
        let f_dec = self.y_decimals;
        self.svg.open("g", attrs! {"class" => "axes"});
        for &t in y_ticks {
            let py = self.y.map(t);
            self.svg.empty(
                "line",
                attrs! {"x1" => a.left, "y1" => py, "x2" => a.right, "y2" => py, "stroke" => GRID},
            );
            self.svg.text(
                "text",
                attrs! {"x" => a.left - 6.0, "y" => py + 4.0, "text-anchor" => "end"},
                &fixed(t, f_dec),
            );
        }
        for (t, label) in x_ticks {
            let px = if categories { *t } else { self.x.map(*t) };
            self.svg.empty(
                "line",
                attrs! {"x1" => px, "y1" => a.bottom, "x2" => px, "y2" => a.bottom + 4.0, "stroke" => INK},
            );
            self.svg.text(
                "text",
                attrs! {"x" => px, "y" => a.bottom + 16.0, "text-anchor" => "middle"},
                label,
            );
        }
        self.svg.empty(
            "rect",
            attrs! {"class" => "plot-frame", "x" => a.left, "y" => a.top, "width" => a.right - a.left,
            "height" => a.bottom - a.top, "fill" => "none", "stroke" => INK},
        );
        self.svg.close("g");
    }

    /// Writes both axis labels, with their units as the caller wrote them.
    fn axis_labels(&mut self, frame_x: &str, frame_y: &str) {
        let a = self.area;
        let cx = (a.left + a.right) / 2.0;
        self.svg.text(
            "text",
            attrs! {"class" => "axis-label x", "x" => cx, "y" => a.bottom + 36.0, "text-anchor" => "middle"},
            frame_x,
        );
        let cy = (a.top + a.bottom) / 2.0;
        self.svg.text(
            "text",
            attrs! {"class" => "axis-label y", "x" => 16.0, "y" => cy, "text-anchor" => "middle",
            "transform" => format!("rotate(-90 16 {})", fixed(cy, 1))},
            frame_y,
        );
    }

    /// Opens the clipped group that holds the marks.
    pub fn begin_marks(&mut self) {
        self.svg.open(
            "g",
            attrs! {"class" => "marks", "clip-path" => format!("url(#{}-clip)", self.id)},
        );
    }

    /// Closes the group opened by [`Canvas::begin_marks`].
    pub fn end_marks(&mut self) {
        self.svg.close("g");
    }

    /// A line through pixel points, solid or with `dash` (an SVG dash array);
    /// every line of every chart goes through here.
    pub fn polyline(&mut self, pts: &[(f64, f64)], colour: &str, dash: Option<&str>, class: &str) {
        let mut a: Vec<(&str, Val)> = vec![
            ("class", class.into()),
            ("points", points(pts).into()),
            ("fill", "none".into()),
            ("stroke", colour.into()),
            ("stroke-width", "1.5".into()),
        ];
        if let Some(d) = dash {
            a.push(("stroke-dasharray", d.into()));
        }
        self.svg.empty("polyline", &a);
    }

    /// A full-width horizontal reference line at data value `v`, labelled at
    /// its right end; drawn after the marks and outside the clip so the label
    /// is never cut, and skipped when `v` lies outside a fixed axis range.
    pub fn reference_line(&mut self, v: f64, label: &str, dash: &str, class: &str) {
        if v < self.y.d0 || v > self.y.d1 {
            return;
        }
        let (a, py) = (self.area, self.y.map(v));
        self.polyline(&[(a.left, py), (a.right, py)], INK, Some(dash), class);
        // Above the line, unless that would leave the plot at the top.
        let ly = if py - 16.0 < a.top {
            py + 13.0
        } else {
            py - 4.0
        };
        self.label(a.right - 4.0, ly, "end", label, class);
    }

    /// A text label in pixel coordinates.
    pub fn label(&mut self, x: f64, y: f64, anchor: &str, text: &str, class: &str) {
        self.svg.text(
            "text",
            // A white halo keeps labels readable where they cross lines or bands.
            attrs! {"class" => format!("{class}-label"), "x" => x, "y" => y, "text-anchor" => anchor,
            "stroke" => "#FFFFFF", "stroke-width" => "3", "paint-order" => "stroke"},
            text,
        );
    }

    /// A point marker centred on pixel (x, y); `class` names what it marks and
    /// the shape name is added, so a reader (or test) can tell kinds apart
    /// without colour. `tip` becomes a hover `<title>`.
    pub fn marker(
        &mut self,
        shape: Shape,
        x: f64,
        y: f64,
        colour: &str,
        class: &str,
        tip: Option<&str>,
    ) {
        let class = format!("{class} marker-{}", shape.name());
        let (name, r) = (shape_element(shape), 4.0);
        let a = match shape {
            Shape::Circle => vec![("cx", x.into()), ("cy", y.into()), ("r", r.into())],
            Shape::Square => vec![
                ("x", (x - r).into()),
                ("y", (y - r).into()),
                ("width", (2.0 * r).into()),
                ("height", (2.0 * r).into()),
            ],
            Shape::Triangle => vec![(
                "points",
                points(&[(x, y - r - 1.0), (x + r + 0.5, y + r), (x - r - 0.5, y + r)]).into(),
            )],
            Shape::Diamond => vec![(
                "points",
                points(&[
                    (x, y - r - 1.0),
                    (x + r + 1.0, y),
                    (x, y + r + 1.0),
                    (x - r - 1.0, y),
                ])
                .into(),
            )],
            Shape::Cross => vec![(
                "d",
                format!(
                    "M{},{} L{},{} M{},{} L{},{}",
                    fixed(x - r, 1),
                    fixed(y - r, 1),
                    fixed(x + r, 1),
                    fixed(y + r, 1),
                    fixed(x - r, 1),
                    fixed(y + r, 1),
                    fixed(x + r, 1),
                    fixed(y - r, 1)
                )
                .into(),
            )],
        };
        let mut all: Vec<(&str, Val)> = vec![("class", class.into())];
        all.extend(a);
        if shape == Shape::Cross {
            all.extend([
                ("stroke", colour.into()),
                ("stroke-width", "2".into()),
                ("fill", "none".into()),
            ]);
        } else {
            all.extend([
                ("fill", colour.into()),
                ("stroke", "#FFFFFF".into()),
                ("stroke-width", "0.8".into()),
            ]);
        }
        match tip {
            Some(t) => {
                self.svg.open(name, &all);
                self.svg.text("title", attrs! {}, t);
                self.svg.close(name);
            }
            None => self.svg.empty(name, &all),
        }
    }

    /// The "no data" note when there was nothing to draw, and the closing tag.
    pub fn finish(mut self) -> String {
        if !self.has_data {
            let a = self.area;
            self.svg.text(
                "text",
                attrs! {"class" => "no-data", "x" => (a.left + a.right) / 2.0, "y" => (a.top + a.bottom) / 2.0,
                "text-anchor" => "middle", "font-size" => "13"},
                "no data",
            );
        }
        self.svg.close("svg");
        self.svg.finish()
    }
}

fn plan_note(desc: &mut String, note: &str) {
    if !desc.is_empty() {
        desc.push(' ');
    }
    desc.push_str(note);
}

fn shape_element(shape: Shape) -> &'static str {
    match shape {
        Shape::Circle => "circle",
        Shape::Square => "rect",
        Shape::Triangle | Shape::Diamond => "polygon",
        Shape::Cross => "path",
    }
}

/// `points` attribute text for a polygon or polyline.
pub(crate) fn points(pts: &[(f64, f64)]) -> String {
    let parts: Vec<String> = pts
        .iter()
        .map(|(x, y)| format!("{},{}", fixed(*x, 1), fixed(*y, 1)))
        .collect();
    parts.join(" ")
}

/// Category tick positions (pixel centres) and labels, thinned so that
/// estimated label widths do not overlap.
fn category_ticks(names: &[String], s: &Scale) -> Vec<(f64, String)> {
    let n = names.len();
    if n == 0 {
        return Vec::new();
    }
    let band = (s.r1 - s.r0) / n as f64;
    let widest = names.iter().map(|l| text_width(l)).fold(0.0, f64::max) + 6.0;
    let every = ((widest / band).ceil() as usize).max(1);
    names
        .iter()
        .enumerate()
        .filter(|(i, _)| i % every == 0)
        .map(|(i, l)| (s.map(i as f64 + 0.5), l.clone()))
        .collect()
}

/// Pixel centre and width of category `i` on a categories x scale.
pub(crate) fn category(s: &Scale, i: usize) -> (f64, f64) {
    let band = s.map(1.0) - s.map(0.0);
    (s.map(i as f64 + 0.5), band)
}

/// A sentence for the description about what was left out, e.g.
/// "Skipped 2 values (NaN or infinite)."
pub(crate) fn skipped(n: usize, noun: &str, reason: &str) -> String {
    let plural = if n == 1 { "" } else { "s" };
    format!("Skipped {n} {noun}{plural} ({reason}).")
}

/// The reason given for NaN and infinite inputs.
pub(crate) const NOT_FINITE: &str = "NaN or infinite";
