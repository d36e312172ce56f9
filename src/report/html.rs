//! One self-contained HTML page: inline CSS and inline SVG, no scripts, no
//! fonts and no reference to anything outside the page, with a print
//! stylesheet for A4.
//!
//! Sections, each a `<section id=…>`, in order: `header` (fleet, period,
//! time of generation, restvolt version, profiles), `summary` (units by action
//! and by site), `actions` (units needing action with reasons, evidence and
//! sources), `float` (strings read on float charge: average and spread, the
//! float checks with their sources, what can be said about the state of charge,
//! and the units that raised a flag; one line when there are none), `charts`, `data-quality` (counts and every kept rejected row with
//! its line), `cautions` (for the actions present, from
//! [`safety::caution_text`](crate::safety::caution_text), pointing to
//! SAFETY.md) and `how-to-read` (the 95 % intervals).
//!
//! Charts: the state-of-charge distribution per site; each series string as
//! its units in position order with the median and the peer outliers; the
//! state of charge over time of up to [`MAX_HISTORY_CHARTS`] units needing
//! action, with the interval band and the profile's recharge threshold; and
//! temperature against state of charge with the freezing-point curve of each
//! of the [`MAX_FREEZE_CHARTS`] most used profiles. Whatever a chart leaves out
//! is counted in its caption.
//!
//! Every text from the data is escaped. Colour never carries meaning alone:
//! action badges carry the action word, and charts label their special points.
//! The page is deterministic: the time of generation comes from the context.

use super::charts::{
    band_series, grouped_bars, scatter_with_curve, string_strip, Axis, BandPoint, ChartFrame,
    ScatterPoint, StripPoint, Threshold,
};
use super::{
    actions_present, caution_actions, evidence, float_current_text, float_soc_status,
    float_temp_spread_text, float_unit_reading, float_units_flagged, float_units_note, location,
    needing_action, plural, report_cautions, FleetFormat, ReportContext, FLOAT_INTRO,
};
use crate::correct::Action;
use crate::fleet::analysis::{FleetReport, UnitReport};
use crate::safety::caution_text;
use crate::units::SocPercent;
use std::collections::BTreeMap;
use std::fmt::Write as _;

/// The HTML page format.
#[derive(Clone, Copy, Debug, Default)]
pub struct Html;

/// Most state-of-charge-over-time charts on one page.
pub const MAX_HISTORY_CHARTS: usize = 12;
/// Most series-string charts on one page.
pub const MAX_STRING_CHARTS: usize = 12;
/// Most freezing-point charts (one per profile) on one page.
pub const MAX_FREEZE_CHARTS: usize = 3;

/// Text escaped for HTML content and quoted attribute values; characters HTML
/// forbids (controls other than whitespace) are dropped.
pub fn escape(text: &str) -> String {
    let mut out = String::with_capacity(text.len());
    for c in text.chars() {
        match c {
            '&' => out.push_str("&amp;"),
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '"' => out.push_str("&quot;"),
            '\'' => out.push_str("&#39;"),
            '\n' | '\t' => out.push(c),
            '\r' => {}
            c if c.is_control() => {}
            c => out.push(c),
        }
    }
    out
}

/// Nothing may load from anywhere (inline CSS and `data:` images excepted) and
/// no script may run; a browser blocks and logs any load the page attempts,
/// which is how the browser test proves the page needs nothing outside itself.
const CSP: &str = "default-src 'none'; style-src 'unsafe-inline'; img-src data:";

const STYLE: &str = "
:root { color-scheme: light; }
body { margin: 0; background: #F7F6F2; color: #222; font: 15px/1.5 system-ui, -apple-system, 'Segoe UI', sans-serif; }
main { max-width: 60rem; margin: 0 auto; padding: 1.5rem 1.25rem 3rem; background: #FFF; }
h1 { font-size: 1.6rem; margin: 0 0 .5rem; color: #1F4E79; }
h2 { font-size: 1.25rem; margin: 2rem 0 .75rem; padding-bottom: .25rem; border-bottom: 2px solid #D8E2EC; color: #1F4E79; }
h3 { font-size: 1.05rem; margin: 1rem 0 .4rem; }
section { margin-bottom: 1.5rem; }
dl.facts { display: grid; grid-template-columns: max-content 1fr; gap: .2rem 1rem; margin: 0; }
dl.facts dt { color: #555; }
dl.facts dd { margin: 0; }
table { border-collapse: collapse; width: 100%; margin: .5rem 0 1rem; font-size: .93rem; }
th, td { text-align: left; vertical-align: top; padding: .3rem .5rem; border-bottom: 1px solid #E2E2DE; }
th { background: #F0F3F6; font-weight: 600; }
td.num, th.num { text-align: right; font-variant-numeric: tabular-nums; }
.badge { display: inline-block; padding: 0 .45rem; border: 1px solid currentColor; border-radius: .6rem; font-size: .85rem; font-weight: 600; white-space: nowrap; }
.act-replace { background: #7A1F2B; color: #FFF; }
.act-recharge-now { background: #8A4B08; color: #FFF; }
.act-remeasure { background: #FFF4D6; color: #5C4300; }
.act-equalize { background: #F1E8F0; color: #5A2D52; }
.act-capacity-test { background: #E6EEF6; color: #1F4E79; }
.act-recharge { background: #E9F3EC; color: #245C36; }
.act-serviceable { background: #F1F1F1; color: #444; }
article.unit { border: 1px solid #E2E2DE; border-left: 4px solid #1F4E79; border-radius: 4px; padding: .5rem .9rem; margin: .75rem 0; }
article.unit h3 { margin-top: .2rem; }
.rank { color: #555; font-weight: normal; margin-right: .3rem; }
.where, .flags { margin: .2rem 0; color: #444; }
ul.reasons { margin: .3rem 0; padding-left: 1.2rem; }
ul.reasons li { margin: .25rem 0; }
.source { display: block; color: #555; font-size: .88rem; }
dl.evidence { display: grid; grid-template-columns: max-content 1fr; gap: 0 1rem; margin: .4rem 0; font-size: .9rem; }
dl.evidence dt { color: #555; }
dl.evidence dd { margin: 0; }
figure { margin: 1rem 0 1.5rem; }
figure svg { max-width: 100%; height: auto; }
figcaption { font-size: .88rem; color: #444; margin-top: .25rem; }
.caution { border-left: 4px solid #B8650F; padding: .2rem .9rem; margin: .75rem 0; background: #FCF8F2; }
.caution h3 { margin: .2rem 0; }
.caution p { margin: .25rem 0; }
.note { color: #444; }
footer { margin-top: 2rem; font-size: .85rem; color: #555; }
@media print {
  @page { size: A4; margin: 16mm 14mm 18mm; }
  body { background: #FFF; font-size: 10pt; }
  main { max-width: none; padding: 0; }
  h2 { break-after: avoid; page-break-after: avoid; }
  h3 { break-after: avoid; page-break-after: avoid; }
  table, figure, article.unit, .caution, dl.facts, tr { break-inside: avoid; page-break-inside: avoid; }
  thead { display: table-header-group; }
  .badge, th { -webkit-print-color-adjust: exact; print-color-adjust: exact; }
  section#charts { break-before: page; page-break-before: always; }
}
";

fn badge(a: Action) -> String {
    format!(
        "<span class=\"badge act-{0}\">{0}</span>",
        escape(a.as_str())
    )
}

/// The chart SVG for embedding: HTML parsing puts `<svg>` in the SVG namespace
/// by itself, so the namespace declaration (a URL) is dropped to keep the
/// page free of any address.
fn inline(svg: String) -> String {
    svg.replacen(" xmlns=\"http://www.w3.org/2000/svg\"", "", 1)
}

fn axis(label: &str, min: Option<f64>, max: Option<f64>) -> Axis {
    Axis {
        label: label.into(),
        min,
        max,
    }
}

fn frame(title: String, description: String, x: Axis, y: Axis) -> ChartFrame {
    ChartFrame {
        title,
        description,
        width_px: 720,
        height_px: 320,
        x,
        y,
    }
}

fn figure(h: &mut String, svg: String, caption: &str) {
    let _ = write!(
        h,
        "<figure>\n{}\n<figcaption>{}</figcaption>\n</figure>\n",
        inline(svg),
        escape(caption)
    );
}

fn median(values: &mut [f64]) -> f64 {
    values.sort_by(f64::total_cmp);
    let n = values.len();
    match n {
        0 => f64::NAN,
        _ if n % 2 == 1 => values[n / 2],
        _ => 0.5 * (values[n / 2 - 1] + values[n / 2]),
    }
}

impl FleetFormat for Html {
    fn render(&self, report: &FleetReport, ctx: &ReportContext) -> String {
        let mut h = String::with_capacity(64 * 1024);
        let _ = write!(
            h,
            "<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n\
             <meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\n\
             <meta http-equiv=\"Content-Security-Policy\" content=\"{CSP}\">\n\
             <meta name=\"generator\" content=\"restvolt {}\">\n\
             <title>Fleet report: {}</title>\n<style>{STYLE}</style>\n</head>\n<body>\n<main>\n",
            env!("CARGO_PKG_VERSION"),
            escape(&ctx.fleet_name)
        );
        header(&mut h, report, ctx);
        summary(&mut h, report);
        actions(&mut h, report);
        float_strings(&mut h, report);
        charts(&mut h, report, ctx);
        data_quality(&mut h, report);
        cautions(&mut h, report);
        how_to_read(&mut h);
        let _ = write!(
            h,
            "<footer>Generated by restvolt {} at {}. This page is self-contained: it loads \
             nothing and runs no scripts.</footer>\n</main>\n</body>\n</html>\n",
            env!("CARGO_PKG_VERSION"),
            escape(&ctx.generated_at)
        );
        h
    }
}

fn header(h: &mut String, report: &FleetReport, ctx: &ReportContext) {
    let s = &report.summary;
    let period = s
        .period
        .as_ref()
        .map_or("no dated readings".to_string(), |[a, b]| {
            format!("{a} to {b}")
        });
    let _ = write!(
        h,
        "<section id=\"header\">\n<h1>Fleet report: {}</h1>\n<dl class=\"facts\">\n\
         <dt>Period covered</dt><dd>{}</dd>\n<dt>Generated at</dt><dd>{}</dd>\n\
         <dt>restvolt version</dt><dd>{}</dd>\n<dt>Units</dt><dd>{}</dd>\n<dt>Profiles used</dt><dd>",
        escape(&ctx.fleet_name),
        escape(&period),
        escape(&ctx.generated_at),
        env!("CARGO_PKG_VERSION"),
        s.units
    );
    if s.profiles.is_empty() {
        h.push_str("none");
    }
    let names: Vec<String> = s
        .profiles
        .iter()
        .map(|id| match ctx.store.get(id) {
            Ok(p) => format!("{} ({})", escape(id), escape(&p.spec.name)),
            Err(_) => format!("{} (not in the profile store)", escape(id)),
        })
        .collect();
    h.push_str(&names.join("; "));
    h.push_str("</dd>\n</dl>\n</section>\n");
}

fn summary(h: &mut String, report: &FleetReport) {
    h.push_str(
        "<section id=\"summary\">\n<h2>Summary</h2>\n<table>\n<caption class=\"note\">Units by \
         recommended action, most urgent first</caption>\n<thead><tr><th>Action</th>\
         <th class=\"num\">Units</th><th>Meaning</th></tr></thead>\n<tbody>\n",
    );
    let present = actions_present(report);
    for (a, n) in &present {
        let _ = writeln!(
            h,
            "<tr><td>{}</td><td class=\"num\">{n}</td><td>{}</td></tr>",
            badge(*a),
            escape(a.meaning())
        );
    }
    let _ = write!(
        h,
        "</tbody>\n<tfoot><tr><th>All units</th><th class=\"num\">{}</th><th></th></tr></tfoot>\n</table>\n",
        report.summary.units
    );
    if !report.summary.by_site.is_empty() {
        h.push_str(
            "<table>\n<caption class=\"note\">Units by site and action</caption>\n<thead><tr><th>Site</th>",
        );
        for (a, _) in &present {
            let _ = write!(h, "<th class=\"num\">{}</th>", escape(a.as_str()));
        }
        h.push_str("<th class=\"num\">All</th></tr></thead>\n<tbody>\n");
        for (site, counts) in &report.summary.by_site {
            let _ = write!(h, "<tr><td>{}</td>", escape(site));
            for (a, _) in &present {
                let n = counts.get(a.as_str()).copied().unwrap_or(0);
                let _ = write!(h, "<td class=\"num\">{n}</td>");
            }
            let total: usize = counts.values().sum();
            let _ = writeln!(h, "<td class=\"num\">{total}</td></tr>");
        }
        h.push_str("</tbody>\n</table>\n");
    }
    h.push_str("</section>\n");
}

fn actions(h: &mut String, report: &FleetReport) {
    h.push_str("<section id=\"actions\">\n<h2>Units needing action</h2>\n");
    let mut any = false;
    for u in needing_action(report) {
        any = true;
        unit_block(h, u);
    }
    if !any {
        // Units on float are judged with the others: none needs action either.
        h.push_str("<p>No unit needs action: every unit is serviceable.</p>\n");
    }
    if let Some(note) = float_units_note(report, "<a href=\"#float\">Strings on float</a>") {
        let _ = writeln!(h, "<p class=\"note\">{note}.</p>");
    }
    h.push_str("</section>\n");
}

/// One reason as a list item: rule, action, evidence and source.
fn reason_item(h: &mut String, r: &crate::correct::Reason) {
    let _ = writeln!(
        h,
        "<li><strong>{}</strong> → {}: {}<span class=\"source\">Source: {}</span></li>",
        escape(&r.rule),
        escape(r.action.as_str()),
        escape(&r.detail),
        escape(&r.source)
    );
}

fn float_strings(h: &mut String, report: &FleetReport) {
    h.push_str("<section id=\"float\">\n<h2>Strings on float</h2>\n");
    if report.float_strings.is_empty() {
        h.push_str(
            "<p class=\"note\">No reading in this report was taken on float charge.</p>\n</section>\n",
        );
        return;
    }
    let _ = writeln!(h, "<p>{}</p>", escape(FLOAT_INTRO));
    for s in &report.float_strings {
        let profile = s.per_unit.first().map_or("-", |c| c.profile.as_str());
        let _ = write!(
            h,
            "<article class=\"unit float-string\">\n<h3>{} {}</h3>\n<dl class=\"evidence\">\n\
             <dt>Profile</dt><dd>{}</dd>\n<dt>Units read</dt><dd>{}</dd>\n\
             <dt>Float voltage per cell</dt><dd>{:.3} V average, spread {:.3} V</dd>\n\
             <dt>Temperature spread</dt><dd>{}</dd>\n<dt>Float current</dt><dd>{}</dd>\n\
             <dt>String action</dt><dd>{}: {}</dd>\n<dt>State of charge</dt><dd>{}</dd>\n</dl>\n",
            escape(&s.string),
            badge(s.action),
            escape(profile),
            s.units,
            s.average_volts_per_cell,
            s.spread_volts_per_cell,
            escape(&float_temp_spread_text(s)),
            escape(&float_current_text(s)),
            escape(s.action.as_str()),
            escape(s.action.meaning()),
            escape(&float_soc_status(s))
        );
        if !s.reasons.is_empty() {
            h.push_str("<ul class=\"reasons\">\n");
            for r in &s.reasons {
                reason_item(h, r);
            }
            h.push_str("</ul>\n");
        }
        let _ = writeln!(h, "<p>{}</p>", escape(&s.state_of_charge_note));
        if !s.notes.is_empty() {
            h.push_str("<ul class=\"note\">\n");
            for n in &s.notes {
                let _ = writeln!(h, "<li>{}</li>", escape(n));
            }
            h.push_str("</ul>\n");
        }
        let flagged: Vec<_> = float_units_flagged(s).collect();
        if flagged.is_empty() {
            h.push_str("<p class=\"note\">No unit raised a float flag.</p>\n</article>\n");
            continue;
        }
        let _ = write!(
            h,
            "<table>\n<caption class=\"note\">Units of {} that raised a float flag, most urgent first</caption>\n\
             <thead><tr><th scope=\"col\">Unit</th><th scope=\"col\" class=\"num\">#</th>\
             <th scope=\"col\">Reading</th><th scope=\"col\">Action</th><th scope=\"col\">Flags and reasons</th></tr></thead>\n<tbody>\n",
            escape(&s.string)
        );
        for c in flagged {
            let _ = writeln!(
                h,
                "<tr><td>{}</td><td class=\"num\">{}</td><td>{}</td><td>{}</td><td><ul class=\"reasons\">",
                escape(&c.unit_id),
                c.position.map(|p| p.to_string()).unwrap_or_default(),
                escape(&float_unit_reading(c)),
                badge(c.action)
            );
            for r in &c.reasons {
                reason_item(h, r);
            }
            h.push_str("</ul></td></tr>\n");
        }
        h.push_str("</tbody>\n</table>\n</article>\n");
    }
    h.push_str("</section>\n");
}

/// "54.3 % (95 % interval 48.1–60.2 %)", or "unknown".
fn soc_sentence(u: &UnitReport) -> String {
    match (u.soc_percent, u.soc_interval_percent) {
        (Some(s), Some([lo, hi])) => format!("{s:.1} % (95 % interval {lo:.1}–{hi:.1} %)"),
        (Some(s), None) => format!("{s:.1} %"),
        _ => "unknown".into(),
    }
}

fn unit_block(h: &mut String, u: &UnitReport) {
    let _ = write!(
        h,
        "<article class=\"unit\">\n<h3><span class=\"rank\">#{}</span> {} {}</h3>\n\
         <p class=\"where\">{} · profile {} · state of charge {}</p>\n",
        u.rank,
        escape(&u.unit_id),
        badge(u.action),
        escape(&location(u)),
        escape(&u.profile),
        soc_sentence(u)
    );
    h.push_str("<ul class=\"reasons\">\n");
    for r in &u.reasons {
        let _ = writeln!(
            h,
            "<li><strong>{}</strong> → {}: {}<span class=\"source\">Source: {}</span></li>",
            escape(&r.rule),
            escape(r.action.as_str()),
            escape(&r.detail),
            escape(&r.source)
        );
    }
    h.push_str("</ul>\n<dl class=\"evidence\">\n");
    for (what, value) in evidence(u) {
        let _ = writeln!(h, "<dt>{}</dt><dd>{}</dd>", escape(what), escape(&value));
    }
    h.push_str("</dl>\n");
    if !u.flags.is_empty() {
        let _ = writeln!(
            h,
            "<p class=\"flags\">Flags: {}</p>",
            escape(&u.flags.join(", "))
        );
    }
    h.push_str("</article>\n");
}

fn charts(h: &mut String, report: &FleetReport, ctx: &ReportContext) {
    h.push_str("<section id=\"charts\">\n<h2>Charts</h2>\n");
    soc_distribution(h, report);
    strings(h, report);
    histories(h, report, ctx);
    freezing(h, report, ctx);
    h.push_str("</section>\n");
}

fn soc_distribution(h: &mut String, report: &FleetReport) {
    h.push_str("<h3>State of charge by site</h3>\n");
    let labels: Vec<String> = (0..10)
        .map(|i| format!("{}–{}", i * 10, i * 10 + 10))
        .collect();
    let mut sites: BTreeMap<String, Vec<f64>> = BTreeMap::new();
    let mut unknown = 0;
    for u in &report.units {
        let site = u.site.clone().unwrap_or_else(|| "(no site)".into());
        match u.soc_percent.filter(|s| s.is_finite()) {
            Some(soc) => {
                // 100 % belongs to the last bin; the analysis clamps to 0–100.
                let bin = ((soc / 10.0).floor().max(0.0) as usize).min(9);
                sites.entry(site).or_insert_with(|| vec![0.0; 10])[bin] += 1.0;
            }
            None => unknown += 1,
        }
    }
    if sites.is_empty() {
        h.push_str("<p class=\"note\">No unit has a state of charge to chart.</p>\n");
        return;
    }
    let groups: Vec<(String, Vec<f64>)> = sites.into_iter().collect();
    let f = frame(
        "Units by state of charge, per site".into(),
        format!(
            "Number of units in each 10 % band of state of charge at the latest reading, one bar per site ({}).",
            groups.iter().map(|g| g.0.as_str()).collect::<Vec<_>>().join(", ")
        ),
        axis("State of charge at the latest reading (%)", None, None),
        axis("Units (count)", Some(0.0), None),
    );
    let mut caption = "Bands are 0–10 % up to 90–100 %; 100 % counts in the last band.".to_string();
    if unknown > 0 {
        let _ = write!(
            caption,
            " Not shown: {} without a state of charge (float or unusable readings).",
            plural(unknown, "unit", "units")
        );
    }
    figure(h, grouped_bars(&f, &labels, &groups), &caption);
}

fn strings(h: &mut String, report: &FleetReport) {
    let mut groups: BTreeMap<(String, String), Vec<&UnitReport>> = BTreeMap::new();
    for u in &report.units {
        if let Some(st) = &u.string {
            let site = u.site.clone().unwrap_or_else(|| "(no site)".into());
            groups.entry((site, st.clone())).or_default().push(u);
        }
    }
    if groups.is_empty() {
        return;
    }
    h.push_str("<h3>Series strings</h3>\n");
    let total = groups.len();
    for ((site, st), mut units) in groups.into_iter().take(MAX_STRING_CHARTS) {
        units.sort_by(|a, b| {
            (a.position.is_none(), a.position, &a.unit_id).cmp(&(
                b.position.is_none(),
                b.position,
                &b.unit_id,
            ))
        });
        let points: Vec<StripPoint> = units
            .iter()
            .map(|u| StripPoint {
                label: u
                    .position
                    .map_or_else(|| u.unit_id.clone(), |p| p.to_string()),
                y: u.ocv_per_cell_25c_volts.unwrap_or(f64::NAN),
                outlier: u.flags.iter().any(|f| f == "peer-outlier"),
            })
            .collect();
        let mut ys: Vec<f64> = points
            .iter()
            .map(|p| p.y)
            .filter(|y| y.is_finite())
            .collect();
        let med = median(&mut ys);
        let outliers: Vec<&str> = units
            .iter()
            .filter(|u| u.flags.iter().any(|f| f == "peer-outlier"))
            .map(|u| u.unit_id.as_str())
            .collect();
        let f = frame(
            format!("String {st} at {site}: rest voltage per cell"),
            format!(
                "Rest voltage per cell referred to 25 °C of the {} of string {st} at {site}, in position order, with the string median{}.",
                plural(units.len(), "unit", "units"),
                if outliers.is_empty() {
                    String::new()
                } else {
                    format!("; peer outliers: {}", outliers.join(", "))
                }
            ),
            axis("Position in the string", None, None),
            axis("Rest voltage per cell at 25 °C (V)", None, None),
        );
        let missing = points.iter().filter(|p| !p.y.is_finite()).count();
        let mut caption = format!(
            "Dashed line: the string median. Diamonds with a label: peer outliers ({}).",
            if outliers.is_empty() {
                "none".to_string()
            } else {
                outliers.join(", ")
            }
        );
        if missing > 0 {
            let _ = write!(
                caption,
                " {} without a trusted rested reading left blank.",
                plural(missing, "unit", "units")
            );
        }
        figure(h, string_strip(&f, &points, med), &caption);
    }
    if total > MAX_STRING_CHARTS {
        let _ = writeln!(
            h,
            "<p class=\"note\">{} more not drawn (at most {MAX_STRING_CHARTS} per page).</p>",
            plural(total - MAX_STRING_CHARTS, "string", "strings")
        );
    }
}

fn histories(h: &mut String, report: &FleetReport, ctx: &ReportContext) {
    let candidates: Vec<&UnitReport> = needing_action(report).collect();
    if candidates.is_empty() {
        return;
    }
    h.push_str("<h3>State of charge over time, units needing action</h3>\n");
    let (with, without): (Vec<&UnitReport>, Vec<&UnitReport>) =
        candidates.into_iter().partition(|u| !u.history.is_empty());
    for u in with.iter().take(MAX_HISTORY_CHARTS) {
        let Some(first) = u.history.first().map(|p| p.0) else {
            continue;
        };
        let days = |t: chrono::NaiveDateTime| (t - first).num_minutes() as f64 / 1440.0;
        let points: Vec<BandPoint> = u
            .history
            .iter()
            .map(|(t, soc, [lo, hi])| BandPoint {
                x: days(*t),
                y: *soc,
                low: *lo,
                high: *hi,
            })
            .collect();
        let mut ticks: Vec<(f64, String)> = vec![(0.0, first.format("%Y-%m-%d").to_string())];
        let span_days = u.history.last().map_or(0.0, |(t, _, _)| days(*t));
        if let Some((t, _, _)) = u.history.last() {
            if span_days > 0.0 {
                ticks.push((span_days, t.format("%Y-%m-%d").to_string()));
            }
        }
        // A margin either side keeps the first and last date labels inside the drawing.
        let margin_days = (span_days * 0.08).max(1.0);
        let thresholds: Vec<Threshold> = ctx
            .store
            .get(&u.profile)
            .map(|p| {
                let y = p.spec.thresholds.recharge_below_soc_percent.value;
                vec![Threshold {
                    y,
                    label: format!("recharge below {y} %"),
                }]
            })
            .unwrap_or_default();
        let f = frame(
            format!("State of charge over time: {}", u.unit_id),
            format!(
                "Rested state of charge of {} ({}) at {} readings from {}, with the 95 % interval as a band{}.",
                u.unit_id,
                u.action.as_str(),
                points.len(),
                first.format("%Y-%m-%d"),
                if thresholds.is_empty() {
                    String::new()
                } else {
                    " and the profile's recharge threshold".to_string()
                }
            ),
            axis(
                &format!("Days since {} (d)", first.format("%Y-%m-%d")),
                Some(-margin_days),
                Some(span_days + margin_days),
            ),
            axis("State of charge (%)", Some(0.0), Some(100.0)),
        );
        let svg = band_series(&f, &[(u.unit_id.clone(), points)], &thresholds, &ticks);
        let caption = format!(
            "#{} {}: {}. Line: estimate; band: 95 % interval; dashed: the recharge threshold.",
            u.rank,
            u.unit_id,
            u.action.as_str()
        );
        figure(h, svg, &caption);
    }
    let left = with.len().saturating_sub(MAX_HISTORY_CHARTS);
    if left > 0 {
        let _ = writeln!(
            h,
            "<p class=\"note\">{left} more {} needing action not drawn (at most {MAX_HISTORY_CHARTS} per page; the most urgent are shown).</p>",
            if left == 1 { "unit" } else { "units" }
        );
    }
    if !without.is_empty() {
        let ids: Vec<String> = without.iter().map(|u| escape(&u.unit_id)).collect();
        let _ = writeln!(
            h,
            "<p class=\"note\">No rested history to draw for {}: {}.</p>",
            plural(without.len(), "unit", "units"),
            ids.join(", ")
        );
    }
}

fn freezing(h: &mut String, report: &FleetReport, ctx: &ReportContext) {
    // Profiles by how many units use them, then by id.
    let mut counts: BTreeMap<&str, usize> = BTreeMap::new();
    for u in &report.units {
        *counts.entry(u.profile.as_str()).or_default() += 1;
    }
    let mut order: Vec<(&str, usize)> = counts.into_iter().collect();
    order.sort_by(|a, b| b.1.cmp(&a.1).then(a.0.cmp(b.0)));
    let mut drawn = 0;
    let mut heading = false;
    for (id, _) in &order {
        if drawn == MAX_FREEZE_CHARTS {
            break;
        }
        let Ok(profile) = ctx.store.get(id) else {
            continue;
        };
        let units: Vec<&UnitReport> = report
            .units
            .iter()
            .map(|u| &**u)
            .filter(|u| u.profile == *id)
            .collect();
        let points: Vec<ScatterPoint> = units
            .iter()
            .filter_map(|u| {
                Some(ScatterPoint {
                    x: u.soc_percent?,
                    y: u.latest_temperature?,
                    label: u.unit_id.clone(),
                    flagged: u.flags.iter().any(|f| f == "freeze-risk"),
                })
            })
            .collect();
        if points.is_empty() {
            continue;
        }
        let curve: Vec<(f64, f64)> = (0..=20)
            .filter_map(|i| {
                let soc = f64::from(i) * 5.0;
                profile
                    .freezing_point_at(SocPercent(soc))
                    .ok()
                    .map(|c| (soc, c.0))
            })
            .collect();
        if !heading {
            h.push_str("<h3>Temperature and freezing point</h3>\n");
            heading = true;
        }
        let flagged: Vec<&str> = points
            .iter()
            .filter(|p| p.flagged)
            .map(|p| p.label.as_str())
            .collect();
        // At risk, but with no charge to draw them at (a reading that says
        // nothing of it is judged as a flat battery): named all the same.
        let unknown: Vec<&str> = units
            .iter()
            .filter(|u| u.soc_percent.is_none() && u.flags.iter().any(|f| f == "freeze-risk"))
            .map(|u| u.unit_id.as_str())
            .collect();
        let f = frame(
            format!("Temperature against state of charge: {id}"),
            format!(
                "Latest temperature against state of charge of the {} of profile {id} that have both, with the electrolyte's freezing point over 0–100 %{}{}.",
                plural(points.len(), "unit", "units"),
                if flagged.is_empty() {
                    String::new()
                } else {
                    format!("; at risk of freezing: {}", flagged.join(", "))
                },
                if unknown.is_empty() {
                    String::new()
                } else {
                    format!(
                        "; at risk of freezing, charge not known (not drawn): {}",
                        unknown.join(", ")
                    )
                }
            ),
            axis("State of charge (%)", Some(0.0), Some(100.0)),
            axis("Temperature (°C)", None, None),
        );
        let svg = scatter_with_curve(
            &f,
            &points,
            &curve,
            &format!("freezing point ({id})"),
            "electrolyte may freeze",
        );
        let mut caption = format!(
            "Points: latest temperature of each unit. Triangles with a label: flagged freeze-risk, judged on the coldest temperature seen or expected ({}).",
            if flagged.is_empty() {
                "none".to_string()
            } else {
                flagged.join(", ")
            }
        );
        let missing = units.len() - points.len();
        if missing > 0 {
            let _ = write!(
                caption,
                " {} without a state of charge or a temperature not shown.",
                plural(missing, "unit", "units")
            );
        }
        figure(h, svg, &caption);
        drawn += 1;
    }
    let left = order
        .iter()
        .filter(|(id, _)| ctx.store.get(id).is_ok())
        .count()
        .saturating_sub(drawn);
    if drawn == MAX_FREEZE_CHARTS && left > 0 {
        let _ = writeln!(
            h,
            "<p class=\"note\">Freezing-point charts for {} more not drawn (at most {MAX_FREEZE_CHARTS}, most used first).</p>",
            plural(left, "profile", "profiles")
        );
    }
}

fn data_quality(h: &mut String, report: &FleetReport) {
    let s = &report.summary;
    let _ = write!(
        h,
        "<section id=\"data-quality\">\n<h2>Data quality</h2>\n<dl class=\"facts\">\n\
         <dt>Rows read</dt><dd>{}</dd>\n<dt>Accepted</dt><dd>{}</dd>\n<dt>Rejected</dt><dd>{}</dd>\n\
         <dt>Duplicate readings</dt><dd>{}</dd>\n<dt>Readings with too little rest</dt><dd>{}</dd>\n</dl>\n",
        s.rows_read, s.rows_accepted, s.rows_rejected, s.duplicate_readings, s.short_rest_readings
    );
    if !report.rejected.is_empty() {
        h.push_str(
            "<table>\n<caption class=\"note\">Rejected rows</caption>\n<thead><tr><th>File</th>\
             <th class=\"num\">Line</th><th>Reason</th></tr></thead>\n<tbody>\n",
        );
        for r in &report.rejected {
            let _ = writeln!(
                h,
                "<tr><td>{}</td><td class=\"num\">{}</td><td>{}</td></tr>",
                escape(&r.file),
                r.line,
                escape(&r.reason)
            );
        }
        h.push_str("</tbody>\n</table>\n");
    }
    let kept = report.rejected.len() as u64;
    if s.rows_rejected > kept {
        let _ = writeln!(
            h,
            "<p class=\"note\">{} more rejected rows were counted but not kept.</p>",
            s.rows_rejected - kept
        );
    }
    if !report.notices.is_empty() {
        h.push_str("<ul>\n");
        for n in &report.notices {
            let _ = writeln!(h, "<li>{}</li>", escape(n));
        }
        h.push_str("</ul>\n");
    }
    h.push_str("</section>\n");
}

fn cautions(h: &mut String, report: &FleetReport) {
    let present: Vec<&str> = caution_actions(report)
        .into_iter()
        .map(|a| a.as_str())
        .collect();
    let _ = writeln!(
        h,
        "<section id=\"cautions\">\n<h2>Cautions</h2>\n<p>Before the work these actions call for \
         ({}). Each caution is explained in full in SAFETY.md, which comes with restvolt.</p>",
        escape(&present.join(", "))
    );
    for c in report_cautions(report) {
        let t = caution_text(c);
        let _ = writeln!(
            h,
            "<div class=\"caution\">\n<h3>{}</h3>\n<p>{}</p>\n<p class=\"source\">Sources: {}</p>\n\
             <p class=\"source\">Long form: SAFETY.md, section “{}”.</p>\n</div>",
            escape(t.title),
            escape(t.text),
            escape(t.source),
            escape(t.safety_md_section)
        );
    }
    h.push_str("</section>\n");
}

fn how_to_read(h: &mut String) {
    h.push_str(
        "<section id=\"how-to-read\">\n<h2>How to read this</h2>\n\
         <p>Each state of charge comes with a 95 % interval, written in brackets or drawn as a band. \
         It is the range that holds the true state of charge with about 95 % probability, given the \
         meter's accuracy and resolution, the temperature and its uncertainty, and how far units of \
         the type spread around the profile's curve (the GUM method, JCGM 100:2008, with coverage \
         factor 2). Intervals are cut at 0 % and 100 %.</p>\n\
         <p>A narrow interval means the reading pins the charge down. A wide one means it says \
         little: measure again after a full rest, add the temperature, or take hydrometer readings \
         where the cells can be opened. When an interval straddles a threshold, the action is less \
         certain than the estimate alone suggests; ranking uses the estimate.</p>\n\
         <p>Units are ranked by action, most urgent first (replace, recharge-now, remeasure, equalize, \
         capacity-test, recharge, serviceable), then by state of charge, lowest first. Every reason \
         names the rule that fired, the evidence and the rule's source.</p>\n</section>\n",
    );
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::report::fixture;
    use scraper::{Html as Page, Selector};

    #[test]
    fn snapshot_html() {
        insta::assert_snapshot!(page());
    }

    fn page() -> String {
        let (report, store) = fixture::report();
        Html.render(&report, &fixture::ctx(&store))
    }

    fn svgs(html: &str) -> Vec<&str> {
        let mut out = Vec::new();
        let mut rest = html;
        while let Some(i) = rest.find("<svg") {
            let end = rest[i..].find("</svg>").expect("unclosed svg") + i + "</svg>".len();
            out.push(&rest[i..end]);
            rest = &rest[end..];
        }
        out
    }

    #[test]
    fn has_every_section_in_order() {
        let html = page();
        let doc = Page::parse_document(&html);
        assert!(doc.errors.is_empty(), "HTML parse errors: {:?}", doc.errors);
        let sel = Selector::parse("section[id]").unwrap();
        let ids: Vec<&str> = doc
            .select(&sel)
            .filter_map(|s| s.value().attr("id"))
            .collect();
        assert_eq!(
            ids,
            [
                "header",
                "summary",
                "actions",
                "float",
                "charts",
                "data-quality",
                "cautions",
                "how-to-read"
            ]
        );
    }

    #[test]
    fn every_svg_is_well_formed_and_accessible() {
        let html = page();
        let all = svgs(&html);
        // Fixture: one distribution, one string, three histories (B-02, B-03,
        // C4; B-04 has no rested reading), and two profiles' freezing charts.
        assert_eq!(all.len(), 7, "charts drawn");
        for svg in all {
            let doc = roxmltree::Document::parse(svg).unwrap_or_else(|e| panic!("{e}\n{svg}"));
            let kids: Vec<_> = doc
                .root_element()
                .children()
                .filter(|n| n.is_element())
                .collect();
            assert_eq!(kids[0].tag_name().name(), "title");
            assert_eq!(kids[1].tag_name().name(), "desc");
        }
        // The chart ids derive from titles; they must be unique on the page.
        let doc = Page::parse_document(&html);
        let sel = Selector::parse("[id]").unwrap();
        let mut ids: Vec<&str> = doc
            .select(&sel)
            .filter_map(|e| e.value().attr("id"))
            .collect();
        let n = ids.len();
        ids.sort_unstable();
        ids.dedup();
        assert_eq!(ids.len(), n, "duplicate element ids");
    }

    #[test]
    fn references_nothing_outside_itself() {
        let html = page();
        assert!(html.contains(&format!(
            "http-equiv=\"Content-Security-Policy\" content=\"{CSP}\""
        )));
        let lower = html.to_ascii_lowercase();
        for bad in [
            "http://",
            "https://",
            "<script",
            "@import",
            "@font-face",
            "<link",
            "<iframe",
        ] {
            assert!(!lower.contains(bad), "page contains {bad}");
        }
        let mut rest = lower.as_str();
        while let Some(i) = rest.find("url(") {
            assert!(
                rest[i + 4..].starts_with('#'),
                "external url(: {}",
                &rest[i..i + 20]
            );
            rest = &rest[i + 4..];
        }
        let doc = Page::parse_document(&html);
        let sel = Selector::parse("[src], [href], [xlink\\:href]").unwrap();
        for e in doc.select(&sel) {
            for (k, v) in e.value().attrs() {
                if k == "src" || k.ends_with("href") {
                    assert!(v.starts_with("data:") || v.starts_with('#'), "{k}={v}");
                }
            }
        }
    }

    #[test]
    fn print_stylesheet_is_there() {
        let html = page();
        assert!(html.contains("@media print"));
        assert!(html.contains("@page { size: A4"));
        assert!(html.contains("break-inside: avoid"));
    }

    #[test]
    fn data_is_escaped_and_shown() {
        let (mut report, store) = fixture::report();
        report.units[0].unit_id = "<img src=x onerror=alert(1)>".into();
        report.units[0].reasons[0].detail = "a </section><script>".into();
        let html = Html.render(&report, &fixture::ctx(&store));
        assert!(!html.contains("<img") && !html.contains("<script"));
        assert!(html.contains("&lt;img src=x onerror=alert(1)&gt;"));
        let doc = Page::parse_document(&html);
        let sel = Selector::parse("section[id]").unwrap();
        assert_eq!(doc.select(&sel).count(), 8);
        for svg in svgs(&html) {
            roxmltree::Document::parse(svg).unwrap();
        }
    }

    #[test]
    fn actions_list_units_needing_action_with_rejects_and_cautions() {
        let html = page();
        let doc = Page::parse_document(&html);
        let units = Selector::parse("#actions article.unit h3").unwrap();
        let titles: Vec<String> = doc.select(&units).map(|e| e.text().collect()).collect();
        let (report, _) = fixture::report();
        let want: Vec<&UnitReport> = needing_action(&report).collect();
        assert_eq!(titles.len(), want.len());
        for (t, u) in titles.iter().zip(want) {
            // The action word is printed in the badge, not only its colour.
            assert!(
                t.contains(&u.unit_id) && t.contains(u.action.as_str()),
                "{t}"
            );
        }
        let rows = Selector::parse("#data-quality tbody tr").unwrap();
        let rejected: Vec<String> = doc.select(&rows).map(|e| e.text().collect()).collect();
        assert_eq!(rejected.len(), 2);
        assert!(rejected[0].contains("21"), "{}", rejected[0]);
        let cautions = Selector::parse("#cautions .caution h3").unwrap();
        let names: Vec<String> = doc.select(&cautions).map(|e| e.text().collect()).collect();
        assert!(names.contains(&"Frozen battery".to_string()));
        assert_eq!(names.last().map(String::as_str), Some("Who decides"));
    }

    fn float_page() -> String {
        let (report, store) = fixture::float_report();
        Html.render(&report, &fixture::ctx(&store))
    }

    #[test]
    fn float_section_is_one_line_without_float_readings() {
        let html = page();
        let doc = Page::parse_document(&html);
        let sel = Selector::parse("#float > *").unwrap();
        let kids: Vec<String> = doc
            .select(&sel)
            .map(|e| e.value().name().to_string())
            .collect();
        assert_eq!(kids, ["h2", "p"]);
        assert!(html.contains("No reading in this report was taken on float charge."));
    }

    #[test]
    fn the_unit_list_says_why_units_on_float_have_no_soc() {
        let html = float_page();
        assert!(
            html.contains(
                "<p class=\"note\">4 units on float: their state of charge is not read from a float voltage; \
                 see <a href=\"#float\">Strings on float</a>.</p>"
            ),
            "{html}"
        );
        assert!(!html.contains("need action there"));
    }

    #[test]
    fn snapshot_float_section() {
        let html = float_page();
        let start = html.find("<section id=\"float\">").unwrap();
        let end = html[start..].find("</section>").unwrap() + start + "</section>".len();
        insta::assert_snapshot!(&html[start..end]);
    }

    #[test]
    fn float_section_lists_strings_and_flagged_units_with_words_not_colour() {
        let html = float_page();
        let doc = Page::parse_document(&html);
        assert!(doc.errors.is_empty(), "HTML parse errors: {:?}", doc.errors);
        let strings = Selector::parse("#float article.float-string h3").unwrap();
        let titles: Vec<String> = doc.select(&strings).map(|e| e.text().collect()).collect();
        // Escaped in the source, shown as written.
        assert_eq!(titles, ["East <UPS> room / U|1 remeasure"]);
        let rows = Selector::parse("#float tbody tr").unwrap();
        let rows: Vec<String> = doc.select(&rows).map(|e| e.text().collect()).collect();
        assert_eq!(rows.len(), 2, "only the flagged blocks: {rows:?}");
        // Most urgent first; the action word is in the badge.
        assert!(rows[0].starts_with("E44") && rows[0].contains("replace"));
        assert!(rows[0].contains("thermal-runaway-risk"));
        assert!(rows[1].starts_with("E22") && rows[1].contains("capacity-test"));
        assert!(rows[1].contains("float-low") && rows[1].contains("float-deviation"));
        // Every reason names its source.
        let reasons = Selector::parse("#float ul.reasons li").unwrap();
        let src = Selector::parse(".source").unwrap();
        let mut n = 0;
        for li in doc.select(&reasons) {
            let s: String = li.select(&src).flat_map(|e| e.text()).collect();
            assert!(s.starts_with("Source: ") && s.len() > 10, "{s}");
            n += 1;
        }
        assert_eq!(n, 5, "two string reasons, one for E4, two for E2");
        // The actions section points to the float section, inside the page.
        let link = Selector::parse("#actions a[href=\"#float\"]").unwrap();
        assert_eq!(doc.select(&link).count(), 1);
        let cautions = Selector::parse("#cautions .caution h3").unwrap();
        let names: Vec<String> = doc.select(&cautions).map(|e| e.text().collect()).collect();
        assert!(names.contains(&"Thermal runaway".to_string()), "{names:?}");
    }

    #[test]
    fn float_page_references_nothing_outside_itself() {
        let lower = float_page().to_ascii_lowercase();
        for bad in ["http://", "https://", "<script", "<link", "@import"] {
            assert!(!lower.contains(bad), "page contains {bad}");
        }
    }

    #[test]
    fn deterministic() {
        assert_eq!(page(), page());
    }

    #[test]
    fn history_charts_are_capped_and_the_rest_counted() {
        let (mut report, store) = fixture::report();
        let template = report.units[0].clone();
        for i in 0..15 {
            let mut u = template.clone();
            u.unit_id = format!("X{i:02}");
            report.units.push(u);
        }
        let html = Html.render(&report, &fixture::ctx(&store));
        let n = html.matches("State of charge over time: ").count();
        // Each chart names its title twice (<title> and the visible title).
        assert_eq!(n, 2 * MAX_HISTORY_CHARTS);
        let html_fx = page();
        assert_eq!(
            html_fx.matches("State of charge over time: ").count(),
            2 * 3
        );
        // Fixture: 3 units with history + 15 copies = 18 candidates.
        assert!(
            html.contains("6 more units needing action not drawn"),
            "cap note"
        );
    }
}
