//! The safety cautions restvolt prints beside its recommendations.
//!
//! This table is the single source of the short texts in code; `SAFETY.md` at
//! the top of the repository is the long form. Each caution names the
//! `SAFETY.md` heading that explains it, and the tests read `SAFETY.md` to make
//! sure every heading and every cited source is really there, so the two cannot
//! drift apart silently.
//!
//! Every recommendation is an aid: the battery maker's instructions, local codes
//! and licensed practice govern, which is why every list of cautions ends with
//! [`Caution::General`].

use serde::Serialize;

/// A hazard the person doing the recommended work must be warned about.
///
/// The variant order is the order cautions are printed in; `General` is last on
/// purpose, so a sorted list always ends with the "defer to the maker" note.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, PartialOrd, Ord, Serialize)]
#[serde(rename_all = "kebab-case")]
pub enum Caution {
    /// Hydrogen from charging; ventilation, no sparks.
    Hydrogen,
    /// Sulfuric acid; eye and skin protection, eyewash.
    Acid,
    /// Short circuits, arc flash and shock on series strings; tools and jewellery.
    ShortCircuit,
    /// Heavy cells; mechanical handling.
    Lifting,
    /// A possibly frozen battery; never charge it.
    Frozen,
    /// VRLA thermal runaway.
    ThermalRunaway,
    /// Equalizing (controlled overcharge) cautions.
    Equalizing,
    /// Taking electrolyte samples with a hydrometer.
    Hydrometer,
    /// Disposal and recycling of spent batteries.
    Disposal,
    /// The maker's instructions, local codes and licensed practice govern.
    General,
}

impl Caution {
    /// Every caution, in print order.
    pub const ALL: [Caution; 10] = [
        Caution::Hydrogen,
        Caution::Acid,
        Caution::ShortCircuit,
        Caution::Lifting,
        Caution::Frozen,
        Caution::ThermalRunaway,
        Caution::Equalizing,
        Caution::Hydrometer,
        Caution::Disposal,
        Caution::General,
    ];
}

/// The printed form of one caution.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize)]
pub struct CautionText {
    /// Which caution this is.
    pub caution: Caution,
    /// A short title, a few words.
    pub title: &'static str,
    /// One or two sentences saying what to do.
    pub text: &'static str,
    /// Where the advice comes from: `citation (label)` entries separated by
    /// `"; "`, labels as in REFERENCES (published, from memory, common practice).
    pub source: &'static str,
    /// The `## ` heading in SAFETY.md that gives the long form.
    pub safety_md_section: &'static str,
}

const HYDROGEN: CautionText = CautionText {
    caution: Caution::Hydrogen,
    title: "Hydrogen",
    text: "Charging makes hydrogen, explosive in air from 4 % by volume. Ventilate; no flames or \
           sparks; switch the charger off before making or breaking any connection, never at a \
           terminal of a gassing battery.",
    source: "IEC 62485-2:2010 (published); 4 % by volume (published); common practice",
    safety_md_section: "Hydrogen and ventilation",
};

const ACID: CautionText = CautionText {
    caution: Caution::Acid,
    title: "Acid",
    text: "Wear a face shield over goggles, acid-resistant gloves and apron; have an eyewash or \
           drench within reach. Neutralise spills as the maker's safety data sheet says.",
    source: "OSHA 29 CFR 1910.151(c) (published); 29 CFR 1926.441(a) (published); \
             ANSI Z358.1 (published)",
    safety_md_section: "Acid and eye protection",
};

const SHORT_CIRCUIT: CautionText = CautionText {
    caution: Caution::ShortCircuit,
    title: "Short circuit and arc flash",
    text: "A battery can drive thousands of amperes into a short, and series strings reach \
           dangerous DC voltages. Remove jewellery, use insulated tools, cover other terminals; \
           on large strings do the NFPA 70E Article 320 risk assessment first.",
    source: "NFPA 70E Article 320 (published); common practice",
    safety_md_section: "Short circuits and arc flash",
};

const LIFTING: CautionText = CautionText {
    caution: Caution::Lifting,
    title: "Heavy cells",
    text: "Cells and blocks are heavy: use mechanical handling, lift by the case or the maker's \
           lifting points, never by the terminals, and keep them upright.",
    source: "OSHA 29 CFR 1910.178(g) (published); common practice",
    safety_md_section: "Lifting heavy cells",
};

const FROZEN: CautionText = CautionText {
    caution: Caution::Frozen,
    title: "Frozen battery",
    text: "Never charge a frozen battery. Let it thaw at room temperature, inspect the case for \
           cracks, bulging and leaks, and scrap it if damaged.",
    source: "US Army ordnance course OD1002 (published); TM 5-1185 Table III (published); \
             common practice",
    safety_md_section: "Frozen batteries",
};

const THERMAL_RUNAWAY: CautionText = CautionText {
    caution: Caution::ThermalRunaway,
    title: "Thermal runaway",
    text: "A VRLA unit much hotter than ambient, or a float current rising at constant voltage, \
           can be running away. Take it off charge only if that is safe (charger off or breaker \
           away from the battery), ventilate, keep clear until it has cooled.",
    source: "VRLA makers' manuals (published); common practice",
    safety_md_section: "Thermal runaway in VRLA",
};

const EQUALIZING: CautionText = CautionText {
    caution: Caution::Equalizing,
    title: "Equalizing",
    text: "Equalizing gasses heavily and heats the cells: ventilate more, check levels, watch \
           temperatures. Not for VRLA or gel unless the maker allows it.",
    source: "IEC 62485-2:2010 (published); IEEE Std 450 §4.4 (published); \
             FIST 3-6 §1.2C (published); common practice",
    safety_md_section: "Charging and equalizing",
};

const HYDROMETER: CautionText = CautionText {
    caution: Caution::Hydrometer,
    title: "Hydrometer",
    text: "A hydrometer drips acid: wear full eye and skin protection, keep the nozzle over the \
           cell and return the electrolyte to the same cell. Do not open VRLA units.",
    source: "REFERENCES §2 (published); common practice",
    safety_md_section: "Hydrometer use",
};

const DISPOSAL: CautionText = CautionText {
    caution: Caution::Disposal,
    title: "Disposal",
    text: "Spent lead-acid batteries are hazardous waste unless recycled: return them to a seller \
           or licensed recycler; never drain the acid or bin them.",
    source: "40 CFR 266 Subpart G (published); 40 CFR 273 (published); common practice",
    safety_md_section: "Disposal and recycling",
};

const GENERAL: CautionText = CautionText {
    caution: Caution::General,
    title: "Who decides",
    text: "restvolt's recommendations are aids: defer to the maker's instructions, local codes \
           and licensed practice.",
    source: "REFERENCES §6 (published)",
    safety_md_section: "Scope and who decides",
};

static ALL_CAUTIONS: [CautionText; 10] = [
    HYDROGEN,
    ACID,
    SHORT_CIRCUIT,
    LIFTING,
    FROZEN,
    THERMAL_RUNAWAY,
    EQUALIZING,
    HYDROMETER,
    DISPOSAL,
    GENERAL,
];

/// The printed text of one caution.
pub fn caution_text(c: Caution) -> &'static CautionText {
    // A match rather than an index: exhaustive, and cannot panic.
    match c {
        Caution::Hydrogen => &HYDROGEN,
        Caution::Acid => &ACID,
        Caution::ShortCircuit => &SHORT_CIRCUIT,
        Caution::Lifting => &LIFTING,
        Caution::Frozen => &FROZEN,
        Caution::ThermalRunaway => &THERMAL_RUNAWAY,
        Caution::Equalizing => &EQUALIZING,
        Caution::Hydrometer => &HYDROMETER,
        Caution::Disposal => &DISPOSAL,
        Caution::General => &GENERAL,
    }
}

/// Every caution's text, in print order (the order of [`Caution::ALL`]).
pub fn all_cautions() -> &'static [CautionText] {
    &ALL_CAUTIONS
}

/// A kind of hands-on work a recommendation leads to.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, PartialOrd, Ord, Serialize)]
#[serde(rename_all = "kebab-case")]
pub enum WorkKind {
    /// Meter probes on terminals (rest voltage, remeasure).
    Measure,
    /// Drawing electrolyte with a hydrometer.
    Hydrometer,
    /// A normal charge or recharge.
    Charge,
    /// An equalizing charge.
    Equalize,
    /// A capacity (discharge) test.
    CapacityTest,
    /// Taking a battery out and putting a new one in.
    Replace,
    /// The battery may be frozen.
    Frozen,
    /// The unit is hot: possible thermal runaway.
    HotUnit,
}

fn cautions_of(kind: WorkKind) -> &'static [Caution] {
    use Caution as C;
    // Why each: probes and connections can spark or short; anything that opens or
    // gasses cells brings acid and hydrogen; a new battery means lifting the old
    // one and disposing of it; a frozen case may be cracked and leaking acid.
    match kind {
        WorkKind::Measure => &[C::Hydrogen, C::ShortCircuit],
        WorkKind::Hydrometer => &[C::Hydrometer, C::Acid, C::Hydrogen],
        WorkKind::Charge => &[C::Hydrogen, C::Acid, C::ShortCircuit],
        WorkKind::Equalize => &[C::Equalizing, C::Hydrogen, C::Acid, C::ShortCircuit],
        WorkKind::CapacityTest => &[C::ShortCircuit, C::Hydrogen, C::Acid],
        WorkKind::Replace => &[C::Lifting, C::ShortCircuit, C::Acid, C::Disposal],
        WorkKind::Frozen => &[C::Frozen, C::Acid],
        WorkKind::HotUnit => &[C::ThermalRunaway, C::Hydrogen, C::Acid],
    }
}

/// The cautions for a set of jobs: sorted, without repeats, and always ending
/// with [`Caution::General`] (defer to the maker's instructions, local codes and
/// licensed practice), even for an empty list.
pub fn cautions_for_work(kinds: &[WorkKind]) -> Vec<Caution> {
    let mut out: Vec<Caution> = kinds
        .iter()
        .flat_map(|k| cautions_of(*k).iter().copied())
        .chain(std::iter::once(Caution::General))
        .collect();
    out.sort();
    out.dedup();
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    const SAFETY_MD: &str = include_str!("../SAFETY.md");

    /// The body of a `## ` section of SAFETY.md, up to the next `## ` heading.
    fn section_body(heading: &str) -> Option<&'static str> {
        let marker = format!("\n## {heading}\n");
        let start = SAFETY_MD.find(&marker)? + marker.len();
        let rest = &SAFETY_MD[start..];
        Some(match rest.find("\n## ") {
            Some(end) => &rest[..end],
            None => rest,
        })
    }

    #[test]
    fn every_caution_section_exists_in_safety_md() {
        for c in all_cautions() {
            assert!(
                section_body(c.safety_md_section).is_some(),
                "SAFETY.md has no heading '## {}' for {:?}",
                c.safety_md_section,
                c.caution
            );
        }
    }

    #[test]
    fn every_cited_source_appears_in_its_safety_md_section() {
        // The short text and the long form must name the same sources.
        for c in all_cautions() {
            let body = section_body(c.safety_md_section).unwrap_or_default();
            for entry in c.source.split("; ") {
                let (citation, label) = match entry.find(" (") {
                    Some(i) => (&entry[..i], Some(&entry[i + 2..entry.len() - 1])),
                    None => (entry, None),
                };
                if let Some(label) = label {
                    assert!(
                        ["published", "from memory", "common practice"].contains(&label),
                        "{:?}: unknown source label '{label}'",
                        c.caution
                    );
                }
                // SAFETY.md wraps lines, so compare with whitespace collapsed.
                let flat: String = body.split_whitespace().collect::<Vec<_>>().join(" ");
                assert!(
                    flat.contains(citation),
                    "{:?}: source '{citation}' not cited in SAFETY.md section '{}'",
                    c.caution,
                    c.safety_md_section
                );
            }
        }
    }

    #[test]
    fn every_safety_md_section_has_a_sources_line() {
        // SAFETY.md promises that every section names its sources.
        let headings: Vec<&str> = SAFETY_MD
            .lines()
            .filter_map(|l| l.strip_prefix("## "))
            .collect();
        assert!(
            headings.len() >= 10,
            "SAFETY.md lost sections: {headings:?}"
        );
        for h in headings {
            let body = section_body(h).unwrap_or_default();
            assert!(body.contains("Sources:"), "section '{h}' names no sources");
        }
    }

    #[test]
    fn table_has_each_caution_once_in_enum_order() {
        let listed: Vec<Caution> = all_cautions().iter().map(|t| t.caution).collect();
        assert_eq!(listed, Caution::ALL.to_vec());
        for c in Caution::ALL {
            assert_eq!(caution_text(c).caution, c);
            assert_eq!(caution_text(c), &all_cautions()[c as usize]);
            assert!(!caution_text(c).title.is_empty() && !caution_text(c).text.is_empty());
        }
        // The ALL array must really cover every variant: this match stops
        // compiling when a variant is added, reminding to extend ALL.
        for c in Caution::ALL {
            match c {
                Caution::Hydrogen
                | Caution::Acid
                | Caution::ShortCircuit
                | Caution::Lifting
                | Caution::Frozen
                | Caution::ThermalRunaway
                | Caution::Equalizing
                | Caution::Hydrometer
                | Caution::Disposal
                | Caution::General => {}
            }
        }
    }

    #[test]
    fn key_facts_in_the_short_texts() {
        // 4 % LEL of hydrogen: IEC 62485-2 / REFERENCES §6 (published).
        assert!(caution_text(Caution::Hydrogen)
            .text
            .contains("4 % by volume"));
        // Never charge a frozen battery: OD1002, REFERENCES §3 (published).
        assert!(caution_text(Caution::Frozen)
            .text
            .contains("Never charge a frozen battery"));
        // Equalizing not for VRLA/gel unless the maker allows: REFERENCES §5 (published).
        assert!(caution_text(Caution::Equalizing)
            .text
            .contains("VRLA or gel"));
        // Return electrolyte to the same cell (common practice).
        assert!(caution_text(Caution::Hydrometer).text.contains("same cell"));
        // Defer to maker, codes, licensed practice: REFERENCES §6 (published).
        let g = caution_text(Caution::General).text;
        assert!(g.contains("maker's instructions") && g.contains("local codes"));
        assert!(g.contains("licensed practice"));
    }

    #[test]
    fn work_lists_are_sorted_unique_and_end_with_general() {
        assert_eq!(cautions_for_work(&[]), vec![Caution::General]);
        let all = [
            WorkKind::Measure,
            WorkKind::Hydrometer,
            WorkKind::Charge,
            WorkKind::Equalize,
            WorkKind::CapacityTest,
            WorkKind::Replace,
            WorkKind::Frozen,
            WorkKind::HotUnit,
        ];
        for k in all {
            let v = cautions_for_work(&[k, k]);
            assert_eq!(v.last(), Some(&Caution::General), "{k:?}");
            assert!(v.windows(2).all(|w| w[0] < w[1]), "{k:?}: {v:?}");
        }
        // Every caution is reachable from some work.
        assert_eq!(cautions_for_work(&all), Caution::ALL.to_vec());
    }

    #[test]
    fn work_maps_to_the_hazards_it_brings() {
        // Equalizing gasses heavily: SAFETY.md "Charging and equalizing" (published).
        assert_eq!(
            cautions_for_work(&[WorkKind::Equalize]),
            vec![
                Caution::Hydrogen,
                Caution::Acid,
                Caution::ShortCircuit,
                Caution::Equalizing,
                Caution::General
            ]
        );
        // Frozen: never charge, a cracked case leaks acid (OD1002, published).
        assert_eq!(
            cautions_for_work(&[WorkKind::Frozen]),
            vec![Caution::Acid, Caution::Frozen, Caution::General]
        );
        // Replace: lifting and disposal (OSHA 1910.178(g); 40 CFR 266/273, published).
        let r = cautions_for_work(&[WorkKind::Replace]);
        assert!(r.contains(&Caution::Lifting) && r.contains(&Caution::Disposal));
        // A hot unit: thermal runaway (VRLA makers' manuals, published).
        assert!(cautions_for_work(&[WorkKind::HotUnit]).contains(&Caution::ThermalRunaway));
        // Merging two jobs de-duplicates shared cautions.
        let both = cautions_for_work(&[WorkKind::Charge, WorkKind::Measure]);
        assert_eq!(
            both,
            vec![
                Caution::Hydrogen,
                Caution::Acid,
                Caution::ShortCircuit,
                Caution::General
            ]
        );
    }

    #[test]
    fn cautions_serialize_kebab_case() {
        let j = serde_json::to_string(&[Caution::ThermalRunaway, Caution::ShortCircuit])
            .unwrap_or_default();
        assert_eq!(j, r#"["thermal-runaway","short-circuit"]"#);
    }
}
