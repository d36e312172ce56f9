//! Markdown for a ticket or wiki page: a heading, the summary by action and by
//! site, a table of the units needing action with their reasons
//! (`rule: detail — source`), data quality, and the cautions for the actions
//! present.
//!
//! Text from the data is escaped for Markdown tables and inline HTML, so a
//! unit id like `A|B` or `<x>` shows as written. Reasons in one cell are
//! separated by `<br>`, which the common Markdown renderers (CommonMark with
//! GitHub tables) accept inside a table cell.

use super::{
    actions_present, caution_actions, float_current_text, float_soc_status, float_temp_spread_text,
    float_unit_reading, float_units_flagged, float_units_note, location, needing_action,
    report_cautions, soc_text, FleetFormat, ReportContext, FLOAT_INTRO,
};
use crate::fleet::analysis::FleetReport;
use crate::safety::caution_text;
use std::fmt::Write as _;

/// The Markdown format.
#[derive(Clone, Copy, Debug, Default)]
pub struct Markdown;

/// Text safe inside a Markdown table cell and as inline text: backslash
/// escapes for Markdown punctuation, entities for HTML, spaces for line breaks.
pub fn escape(text: &str) -> String {
    let mut out = String::with_capacity(text.len());
    for c in text.chars() {
        match c {
            '\\' | '|' | '*' | '_' | '`' | '[' | ']' | '#' | '~' => {
                out.push('\\');
                out.push(c);
            }
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '&' => out.push_str("&amp;"),
            '\n' | '\r' | '\t' => out.push(' '),
            c if c.is_control() => {}
            c => out.push(c),
        }
    }
    out
}

impl FleetFormat for Markdown {
    fn render(&self, report: &FleetReport, ctx: &ReportContext) -> String {
        let mut m = String::new();
        let s = &report.summary;
        // Writing to a String cannot fail; the results are ignored for that reason.
        let _ = writeln!(m, "# Fleet report: {}\n", escape(&ctx.fleet_name));
        let period = s
            .period
            .as_ref()
            .map_or("no dated readings".to_string(), |[a, b]| {
                format!("{a} to {b}")
            });
        let _ = writeln!(
            m,
            "Period {period} · {} · generated {} · profiles: {}\n",
            super::plural(s.units, "unit", "units"),
            escape(&ctx.generated_at),
            escape(&s.profiles.join(", "))
        );

        m.push_str("## Summary by action\n\n| action | units | meaning |\n|---|---:|---|\n");
        for (a, n) in actions_present(report) {
            let _ = writeln!(m, "| {} | {n} | {} |", a.as_str(), a.meaning());
        }
        m.push_str("\n| site | units | by action |\n|---|---:|---|\n");
        for (site, counts) in &s.by_site {
            let (total, parts) = super::site_actions(counts);
            let _ = writeln!(m, "| {} | {total} | {} |", escape(site), parts);
        }

        m.push_str("\n## Units needing action\n\n");
        let mut any = false;
        for u in needing_action(report) {
            if !any {
                m.push_str(
                    "| rank | unit | site / string / # | profile | action | SOC % [95 %] | reasons |\n\
                     |---:|---|---|---|---|---|---|\n",
                );
                any = true;
            }
            let reasons: Vec<String> = u
                .reasons
                .iter()
                .map(|r| {
                    format!(
                        "{}: {} — {}",
                        escape(&r.rule),
                        escape(&r.detail),
                        escape(&r.source)
                    )
                })
                .collect();
            let _ = writeln!(
                m,
                "| {} | {} | {} | {} | **{}** | {} | {} |",
                u.rank,
                escape(&u.unit_id),
                escape(&location(u)),
                escape(&u.profile),
                u.action.as_str(),
                soc_text(u),
                reasons.join("<br>")
            );
        }
        if !any {
            m.push_str("No unit needs action.\n");
        }
        if let Some(note) = float_units_note(report, "*Strings on float*") {
            let _ = writeln!(m, "\n{note}.");
        }
        m.push_str(
            "\nSOC is the state of charge at the latest reading, with its 95 % interval \
             in brackets.\n",
        );
        float_strings(&mut m, report);

        m.push_str("\n## Data quality\n\n");
        let _ = writeln!(
            m,
            "- Rows read {}, accepted {}, rejected {}",
            s.rows_read, s.rows_accepted, s.rows_rejected
        );
        let _ = writeln!(m, "- Duplicate readings: {}", s.duplicate_readings);
        let _ = writeln!(
            m,
            "- Readings with too little rest: {}",
            s.short_rest_readings
        );
        for n in &report.notices {
            let _ = writeln!(m, "- Notice: {}", escape(n));
        }
        if !report.rejected.is_empty() {
            m.push_str("\n| file | line | reason |\n|---|---:|---|\n");
            for r in &report.rejected {
                let _ = writeln!(
                    m,
                    "| {} | {} | {} |",
                    escape(&r.file),
                    r.line,
                    escape(&r.reason)
                );
            }
            let kept = report.rejected.len() as u64;
            if s.rows_rejected > kept {
                let _ = writeln!(
                    m,
                    "\n{} more rejected rows were counted but not kept.",
                    s.rows_rejected - kept
                );
            }
        }

        m.push_str("\n## Cautions\n\n");
        let present: Vec<&str> = caution_actions(report)
            .into_iter()
            .map(|a| a.as_str())
            .collect();
        let _ = writeln!(
            m,
            "Before the work these actions call for ({}). The long form of each is in SAFETY.md.\n",
            present.join(", ")
        );
        for c in report_cautions(report) {
            let t = caution_text(c);
            let _ = writeln!(
                m,
                "- **{}**: {} Sources: {}. (SAFETY.md: “{}”)",
                t.title, t.text, t.source, t.safety_md_section
            );
        }
        m
    }
}

/// `rule → action: detail — source`, escaped.
fn reason(r: &crate::correct::Reason) -> String {
    format!(
        "{} → {}: {} — {}",
        escape(&r.rule),
        r.action.as_str(),
        escape(&r.detail),
        escape(&r.source)
    )
}

/// The float section: nothing at all when no reading was on float.
fn float_strings(m: &mut String, report: &FleetReport) {
    if report.float_strings.is_empty() {
        return;
    }
    let _ = writeln!(m, "\n## Strings on float\n\n{FLOAT_INTRO}\n");
    m.push_str(
        "| string | profile | units | average V/cell (spread) | temperature spread | float current | string action | state of charge |\n\
         |---|---|---:|---|---|---|---|---|\n",
    );
    for s in &report.float_strings {
        let profile = s.per_unit.first().map_or("-", |c| c.profile.as_str());
        let _ = writeln!(
            m,
            "| {} | {} | {} | {:.3} ({:.3}) | {} | {} | **{}** | {} |",
            escape(&s.string),
            escape(profile),
            s.units,
            s.average_volts_per_cell,
            s.spread_volts_per_cell,
            escape(&float_temp_spread_text(s)),
            escape(&float_current_text(s)),
            s.action.as_str(),
            escape(&float_soc_status(s))
        );
    }
    for s in &report.float_strings {
        let _ = writeln!(m, "\n### {}\n", escape(&s.string));
        for r in &s.reasons {
            let _ = writeln!(m, "- {}", reason(r));
        }
        let _ = writeln!(m, "- {}", escape(&s.state_of_charge_note));
        for n in &s.notes {
            let _ = writeln!(m, "- Note: {}", escape(n));
        }
        let flagged: Vec<_> = float_units_flagged(s).collect();
        if flagged.is_empty() {
            m.push_str("\nNo unit raised a float flag.\n");
            continue;
        }
        m.push_str(
            "\n| unit | # | reading | flags | action | reasons |\n|---|---:|---|---|---|---|\n",
        );
        for c in flagged {
            let codes: Vec<&str> = c.flags.iter().map(|f| f.code.as_str()).collect();
            let reasons: Vec<String> = c.reasons.iter().map(reason).collect();
            let _ = writeln!(
                m,
                "| {} | {} | {} | {} | **{}** | {} |",
                escape(&c.unit_id),
                c.position.map(|p| p.to_string()).unwrap_or_default(),
                escape(&float_unit_reading(c)),
                codes.join(", "),
                c.action.as_str(),
                reasons.join("<br>")
            );
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::correct::Action;
    use crate::report::fixture;

    fn out() -> String {
        let (report, store) = fixture::report();
        Markdown.render(&report, &fixture::ctx(&store))
    }

    #[test]
    fn snapshot_markdown() {
        insta::assert_snapshot!(out());
    }

    #[test]
    fn only_units_needing_action_are_in_the_action_table() {
        let md = out();
        let (report, _) = fixture::report();
        let section =
            &md[md.find("## Units needing action").unwrap()..md.find("## Data quality").unwrap()];
        for u in &report.units {
            let row = format!("| {} | {} |", u.rank, u.unit_id);
            assert_eq!(
                section.contains(&row),
                u.action != Action::Serviceable,
                "{}",
                u.unit_id
            );
        }
    }

    #[test]
    fn escapes_table_breakers_and_html() {
        assert_eq!(escape("a|b<c>&\n*"), "a\\|b&lt;c&gt;&amp; \\*");
        let md = out();
        // The fixture's site "North <Depot>" must not become an HTML tag.
        assert!(md.contains("North &lt;Depot&gt;") && !md.contains("<Depot>"));
    }

    fn float_out() -> String {
        let (report, store) = fixture::float_report();
        Markdown.render(&report, &fixture::ctx(&store))
    }

    #[test]
    fn snapshot_float_section() {
        let md = float_out();
        let section =
            &md[md.find("## Strings on float").unwrap()..md.find("## Data quality").unwrap()];
        insta::assert_snapshot!(section);
    }

    #[test]
    fn float_section_only_when_there_are_float_readings() {
        assert!(!out().contains("Strings on float"));
        let md = float_out();
        // The string "U|1" at "East <UPS> room" must neither split a table row
        // nor become an HTML tag.
        assert!(
            md.contains("| East &lt;UPS&gt; room / U\\|1 | agm | 4 |"),
            "{md}"
        );
        assert!(!md.contains("<UPS>"));
        // Only the flagged blocks get a row in the per-unit table.
        let section = &md[md.find("## Strings on float").unwrap()..];
        assert!(section.contains("| E4 | 4 |") && section.contains("| E2 | 2 |"));
        assert!(!section.contains("| E1 | 1 |") && !section.contains("| E3 | 3 |"));
        // The hot block's caution reaches the caution list, and its action the sentence.
        assert!(md.contains("- **Thermal runaway**"));
        assert!(md.contains("call for (replace, remeasure, capacity-test, serviceable)"));
        // The unit list says why its four float blocks have no SOC.
        assert!(md.contains(
            "\n4 units on float: their state of charge is not read from a float voltage; see *Strings on float*.\n"
        ));
        assert!(!out().contains("on float:"));
    }

    #[test]
    fn cautions_match_the_actions_present() {
        let md = out();
        // Charging makes hydrogen (IEC 62485-2, published, via safety.rs); the
        // fixture has recharge-now units, so the hydrogen caution must be there,
        // and the maker's-instructions note always ends the list.
        assert!(md.contains("- **Hydrogen**"));
        assert!(md
            .trim_end()
            .ends_with("(SAFETY.md: “Scope and who decides”)"));
        // No unit is to be replaced, so the lifting caution is absent.
        assert!(!md.contains("**Heavy cells**"));
    }
}
