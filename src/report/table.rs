//! The terminal table: ranked units, the summary by action and by site, then
//! data quality with every kept rejected row.
//!
//! Lines are at most [`MAX_COLUMNS`] characters (long fields and reasons are
//! cut with "…"). Colour (ANSI escapes) is added only when the context asks for
//! it, and never carries meaning alone: the action word is always printed.
//! Control characters in the data (an escape sequence in a unit id, say) are
//! shown as `?` so input cannot drive the terminal.

use super::{
    actions_present, float_current_text, float_soc_status, float_temp_spread_text,
    float_unit_reading, float_units_flagged, float_units_note, location, needing_action,
    report_cautions, soc_text, truncate, FleetFormat, ReportContext, FLOAT_INTRO,
};
use crate::correct::Action;
use crate::fleet::analysis::FleetReport;
use crate::safety::caution_text;
use std::fmt::Write as _;

/// The widest line the table writes, in characters.
pub const MAX_COLUMNS: usize = 120;

/// The terminal table format.
#[derive(Clone, Copy, Debug, Default)]
pub struct Table;

const RESET: &str = "\x1b[0m";
const BOLD: &str = "\x1b[1m";

/// Column widths: rank, unit, where, profile, action, SOC; flags take the rest.
const WIDTHS: [usize; 6] = [4, 14, 22, 18, 13, 19];

fn action_colour(a: Action) -> &'static str {
    match a {
        Action::Replace | Action::RechargeNow => "\x1b[1;31m",
        Action::Remeasure | Action::Equalize | Action::CapacityTest => "\x1b[33m",
        Action::Recharge => "\x1b[36m",
        Action::Serviceable => "\x1b[32m",
    }
}

/// Input text made safe for a terminal: control characters become `?`.
fn clean(text: &str) -> String {
    text.chars()
        .map(|c| if c.is_control() { '?' } else { c })
        .collect()
}

fn pad(text: &str, width: usize) -> String {
    let t = truncate(&clean(text), width);
    let n = t.chars().count();
    format!("{t}{}", " ".repeat(width.saturating_sub(n)))
}

/// As many whole flags as fit in `width`, then "+N" for the rest; true when
/// some did not fit (the caller then prints the full list on its own line).
fn fit_flags(flags: &[String], width: usize) -> (String, bool) {
    if flags.is_empty() {
        return ("-".into(), false);
    }
    let all = clean(&flags.join(", "));
    if all.chars().count() <= width {
        return (all, false);
    }
    let mut shown = String::new();
    for (i, f) in flags.iter().enumerate() {
        let rest = format!(" +{}", flags.len() - i - 1);
        let candidate = if shown.is_empty() {
            clean(f)
        } else {
            format!("{shown}, {}", clean(f))
        };
        if candidate.chars().count() + rest.chars().count() > width {
            let more = format!("+{}", flags.len() - i);
            return if shown.is_empty() {
                (more, true)
            } else {
                (format!("{shown} {more}"), true)
            };
        }
        shown = candidate;
    }
    (shown, true)
}

struct Out {
    buf: String,
    colour: bool,
}

impl Out {
    fn line(&mut self, text: &str) {
        self.buf.push_str(truncate(text, MAX_COLUMNS).trim_end());
        self.buf.push('\n');
    }
    fn heading(&mut self, text: &str) {
        if self.colour {
            let _ = writeln!(self.buf, "{BOLD}{text}{RESET}");
        } else {
            self.line(text);
        }
    }
    fn blank(&mut self) {
        self.buf.push('\n');
    }
    /// Words wrapped to the line width after `indent` spaces.
    fn wrapped(&mut self, indent: usize, text: &str) {
        self.hanging(indent, indent, text);
    }
    /// Words wrapped to the line width, the first line after `first` spaces and
    /// the rest after `rest`, so a list item's continuation stands out.
    fn hanging(&mut self, first: usize, rest: usize, text: &str) {
        let mut line = " ".repeat(first);
        for word in clean(text).split_whitespace() {
            if line.trim().is_empty() {
                line.push_str(word);
            } else if line.chars().count() + 1 + word.chars().count() <= MAX_COLUMNS {
                line.push(' ');
                line.push_str(word);
            } else {
                self.line(&line);
                line = format!("{}{word}", " ".repeat(rest));
            }
        }
        if !line.trim().is_empty() {
            self.line(&line);
        }
    }
}

impl FleetFormat for Table {
    fn render(&self, report: &FleetReport, ctx: &ReportContext) -> String {
        let mut o = Out {
            buf: String::new(),
            colour: ctx.colour,
        };
        let s = &report.summary;
        o.heading(&format!("Fleet report: {}", clean(&ctx.fleet_name)));
        let period = s
            .period
            .as_ref()
            .map_or("no dated readings".to_string(), |[a, b]| {
                format!("{a} to {b}")
            });
        o.line(&format!(
            "Period {period}; {}; generated {}",
            super::plural(s.units, "unit", "units"),
            clean(&ctx.generated_at)
        ));
        o.line(&format!("Profiles: {}", clean(&s.profiles.join(", "))));
        o.blank();

        o.heading("RANKED UNITS (most urgent first; SOC with its 95 % interval)");
        let names = [
            "rank",
            "unit",
            "site / string / #",
            "profile",
            "action",
            "SOC % [95 %]",
        ];
        let flags_width = MAX_COLUMNS - WIDTHS.iter().map(|w| w + 1).sum::<usize>();
        let mut head = String::new();
        for (n, w) in names.iter().zip(WIDTHS) {
            head.push_str(&pad(n, w));
            head.push(' ');
        }
        head.push_str("flags");
        o.line(&head);
        for u in &report.units {
            let action = pad(u.action.as_str(), WIDTHS[4]);
            let action = if ctx.colour {
                format!("{}{action}{RESET}", action_colour(u.action))
            } else {
                action
            };
            let (flags, overflow) = fit_flags(&u.flags, flags_width);
            let row = format!(
                "{:>4} {} {} {} {action} {} {}",
                u.rank,
                pad(&u.unit_id, WIDTHS[1]),
                pad(&location(u), WIDTHS[2]),
                pad(&u.profile, WIDTHS[3]),
                pad(&soc_text(u), WIDTHS[5]),
                flags
            );
            // The row is at most MAX_COLUMNS visible characters by construction;
            // escapes would make `line` cut it, so push it as it is.
            o.buf.push_str(row.trim_end());
            o.buf.push('\n');
            if overflow {
                o.wrapped(7, &format!("flags: {}", u.flags.join(", ")));
            }
            if u.action != Action::Serviceable {
                for r in &u.reasons {
                    o.line(&format!("     - {}: {}", clean(&r.rule), clean(&r.detail)));
                }
            }
        }
        if report.units.is_empty() {
            o.line("  (no units)");
        }
        if let Some(note) = float_units_note(report, "STRINGS ON FLOAT") {
            o.wrapped(2, &note);
        }
        o.blank();

        float_strings(&mut o, report);

        o.heading("SUMMARY BY ACTION");
        for (a, n) in actions_present(report) {
            o.line(&format!(
                "  {} {n:>5}  {}",
                pad(a.as_str(), 13),
                a.meaning()
            ));
        }
        o.blank();
        o.heading("SUMMARY BY SITE");
        for (site, counts) in &s.by_site {
            let (total, parts) = super::site_actions(counts);
            o.line(&format!("  {} {total:>5} units: {}", pad(site, 24), parts));
        }
        o.blank();

        o.heading("DATA QUALITY");
        o.line(&format!(
            "  rows read {}, accepted {}, rejected {}",
            s.rows_read, s.rows_accepted, s.rows_rejected
        ));
        o.line(&format!(
            "  duplicate readings {}, readings with too little rest {}",
            s.duplicate_readings, s.short_rest_readings
        ));
        if !report.rejected.is_empty() {
            o.line("  rejected rows (file:line reason):");
            for r in &report.rejected {
                o.line(&format!(
                    "    {}:{} {}",
                    clean(&r.file),
                    r.line,
                    clean(&r.reason)
                ));
            }
        }
        let kept = report.rejected.len() as u64;
        if s.rows_rejected > kept {
            o.line(&format!(
                "    … and {} more rejected rows, counted but not kept",
                s.rows_rejected - kept
            ));
        }
        for n in &report.notices {
            o.wrapped(2, &format!("notice: {n}"));
        }
        if needing_action(report).next().is_some() {
            o.blank();
            o.heading("CAUTIONS (long form in SAFETY.md)");
            let titles: Vec<&str> = report_cautions(report)
                .into_iter()
                .map(|c| caution_text(c).title)
                .collect();
            o.wrapped(2, &titles.join("; "));
        }
        o.buf
    }
}

/// The float section: nothing at all when no reading was on float.
fn float_strings(o: &mut Out, report: &FleetReport) {
    if report.float_strings.is_empty() {
        return;
    }
    o.heading("STRINGS ON FLOAT (no state of charge is read from a float voltage)");
    o.wrapped(2, FLOAT_INTRO);
    for s in &report.float_strings {
        let profile = s.per_unit.first().map_or("-", |c| c.profile.as_str());
        o.line(&format!(
            "  {}: {} unit{}, profile {}, string action {}",
            clean(&s.string),
            s.units,
            if s.units == 1 { "" } else { "s" },
            clean(profile),
            s.action.as_str()
        ));
        o.hanging(
            4,
            6,
            &format!(
                "float {:.3} V/cell average, spread {:.3} V/cell; temperature spread {}; float current {}",
                s.average_volts_per_cell,
                s.spread_volts_per_cell,
                float_temp_spread_text(s),
                float_current_text(s)
            ),
        );
        for r in &s.reasons {
            reason(o, 4, r);
        }
        o.hanging(4, 6, &format!("state of charge: {}", float_soc_status(s)));
        o.wrapped(6, &s.state_of_charge_note);
        let mut flagged = float_units_flagged(s).peekable();
        if flagged.peek().is_none() {
            o.line("    no unit raised a float flag");
        }
        for c in flagged {
            let place = c.position.map(|p| format!(" #{p}")).unwrap_or_default();
            o.hanging(
                4,
                6,
                &format!(
                    "{}{place} {}: {}; flags {}",
                    c.unit_id,
                    c.action.as_str(),
                    float_unit_reading(c),
                    c.flags
                        .iter()
                        .map(|f| f.code.as_str())
                        .collect::<Vec<_>>()
                        .join(", ")
                ),
            );
            for r in &c.reasons {
                reason(o, 6, r);
            }
        }
        for n in &s.notes {
            o.hanging(4, 6, &format!("note: {n}"));
        }
    }
    o.blank();
}

/// One reason in full, wrapped: a float section names every source.
fn reason(o: &mut Out, indent: usize, r: &crate::correct::Reason) {
    o.hanging(
        indent,
        indent + 2,
        &format!(
            "- {} → {}: {} (source: {})",
            r.rule,
            r.action.as_str(),
            r.detail,
            r.source
        ),
    );
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::report::fixture;

    fn table(colour: bool) -> String {
        let (report, store) = fixture::report();
        let mut ctx = fixture::ctx(&store);
        ctx.colour = colour;
        Table.render(&report, &ctx)
    }

    #[test]
    fn snapshot_table_without_colour() {
        insta::assert_snapshot!(table(false));
    }

    #[test]
    fn lines_fit_and_plain_has_no_escapes() {
        let plain = table(false);
        assert!(!plain.contains('\x1b'));
        for l in plain.lines() {
            assert!(l.chars().count() <= MAX_COLUMNS, "{} chars: {l}", l.len());
        }
    }

    #[test]
    fn colour_keeps_the_words_and_the_width() {
        let coloured = table(true);
        assert!(coloured.contains("\x1b["));
        // Stripping the escapes gives the same words as the plain table.
        let mut stripped = String::new();
        let mut chars = coloured.chars();
        while let Some(c) = chars.next() {
            if c == '\x1b' {
                for d in chars.by_ref() {
                    if d == 'm' {
                        break;
                    }
                }
            } else {
                stripped.push(c);
            }
        }
        for l in stripped.lines() {
            assert!(l.chars().count() <= MAX_COLUMNS, "{l}");
        }
        assert!(stripped.contains("recharge-now") && stripped.contains("serviceable"));
    }

    #[test]
    fn ranked_rows_in_rank_order_and_rejects_with_lines() {
        let t = table(false);
        let (report, _) = fixture::report();
        let mut at = 0;
        for u in &report.units {
            let i = t[at..]
                .find(&format!(" {} ", u.unit_id))
                .unwrap_or_else(|| panic!("{} after byte {at}", u.unit_id));
            at += i;
        }
        // The fixture's line 21 has volts "twelve" (rejected by ingest).
        assert!(t.contains("demo.csv:21 column `volts`"));
    }

    #[test]
    fn flags_that_do_not_fit_are_counted_and_listed() {
        let flags: Vec<String> = ["deep-discharge", "sulfation-risk", "x"]
            .map(String::from)
            .into();
        assert_eq!(
            fit_flags(&flags, 24),
            ("deep-discharge +2".to_string(), true)
        );
        assert_eq!(
            fit_flags(&flags, 40),
            ("deep-discharge, sulfation-risk, x".to_string(), false)
        );
        assert_eq!(fit_flags(&flags, 3), ("+3".to_string(), true));
        assert_eq!(fit_flags(&[], 3), ("-".to_string(), false));
    }

    /// The float section of a table: from its heading to the next one.
    fn float_section(t: &str) -> &str {
        let start = t.find("STRINGS ON FLOAT (").expect("float section");
        let end = t[start..].find("SUMMARY BY ACTION").expect("next heading") + start;
        &t[start..end]
    }

    #[test]
    fn snapshot_float_section() {
        let (report, store) = fixture::float_report();
        let t = Table.render(&report, &fixture::ctx(&store));
        for l in t.lines() {
            assert!(l.chars().count() <= MAX_COLUMNS, "{l}");
        }
        insta::assert_snapshot!(float_section(&t));
    }

    #[test]
    fn no_float_section_without_float_readings() {
        let t = table(false);
        assert!(!t.contains("STRINGS ON FLOAT") && !t.contains("on float:"));
    }

    #[test]
    fn float_units_are_ranked_pointed_to_and_bring_cautions() {
        let (report, store) = fixture::float_report();
        let t = Table.render(&report, &fixture::ctx(&store));
        // E4 (13 K over the room) is ranked first and E2 (floating low) is
        // listed with its own finding; the four blocks on float show no SOC,
        // and the line after the list says why.
        let ranked = &t[..t.find("STRINGS ON FLOAT (").expect("float section")];
        assert!(ranked.contains("   1 E4 "), "{ranked}");
        assert!(ranked.contains("float-low: 2.210 V per cell"), "{ranked}");
        assert!(
            ranked.contains(
                "4 units on float: their state of charge is not read from a float voltage; see STRINGS ON FLOAT"
            ),
            "{ranked}"
        );
        assert!(!t.contains("need action there"));
        let cautions = &t[t.find("CAUTIONS").expect("cautions shown")..];
        assert!(cautions.contains("Thermal runaway"), "{cautions}");
    }

    #[test]
    fn control_characters_cannot_reach_the_terminal() {
        let (mut report, store) = fixture::report();
        report.units[0].unit_id = "evil\x1b]0;title\x07".into();
        let out = Table.render(&report, &fixture::ctx(&store));
        assert!(!out.contains('\x1b') && !out.contains('\x07'));
        assert!(out.contains("evil?]0;title?"));
        let (mut report, store) = fixture::float_report();
        report.float_strings[0].string = "bad\x1b[2J".into();
        report.float_strings[0].per_unit[1].reasons[0].detail = "x\x1b]0;t\x07".into();
        let out = Table.render(&report, &fixture::ctx(&store));
        assert!(!out.contains('\x1b') && !out.contains('\x07'));
        assert!(out.contains("bad?[2J"));
    }
}
