//! Standard cell potential from standard Gibbs energies of formation.
//!
//! E° = −ΔrG° / (n·F). Values: CRC Handbook of Chemistry and Physics,
//! thermodynamic tables, 25 °C (REFERENCES §1.2).

use super::ElectrolyteError;
use crate::units::Volts;

/// Faraday constant, C/mol (REFERENCES §1.2).
pub const FARADAY_C_PER_MOL: f64 = 96485.332;

/// A chemical species with its standard Gibbs energy of formation at 25 °C.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Species {
    /// Formula with phase, e.g. `PbSO4(s)`.
    pub name: &'static str,
    /// ΔfG° at 25 °C, kJ/mol (0 for elements in their standard state and for H⁺(aq)).
    pub delta_g_formation_kj_per_mol: f64,
}

/// A balanced reaction: stoichiometric coefficients with species, and the
/// number of electrons transferred per reaction as written.
#[derive(Clone, Debug, PartialEq)]
pub struct Reaction {
    /// Human-readable name.
    pub name: &'static str,
    /// (coefficient, species) on the left.
    pub reactants: Vec<(f64, Species)>,
    /// (coefficient, species) on the right.
    pub products: Vec<(f64, Species)>,
    /// Electrons transferred per reaction as written (n).
    pub electrons: f64,
}

impl Reaction {
    /// ΔrG° = Σ ν·ΔfG°(products) − Σ ν·ΔfG°(reactants), kJ/mol.
    pub fn delta_g_reaction_kj_per_mol(&self) -> f64 {
        let sum = |side: &[(f64, Species)]| -> f64 {
            side.iter()
                .map(|(nu, s)| nu * s.delta_g_formation_kj_per_mol)
                .sum()
        };
        sum(&self.products) - sum(&self.reactants)
    }
}

/// E° = −ΔrG°/(nF), with a typed error for a reaction without electrons or
/// with a non-finite energy.
pub fn try_standard_potential(r: &Reaction) -> Result<Volts, ElectrolyteError> {
    let invalid = |reason: &str| ElectrolyteError::InvalidReaction {
        reaction: r.name.to_string(),
        reason: reason.to_string(),
    };
    if !(r.electrons.is_finite() && r.electrons > 0.0) {
        return Err(invalid("the number of electrons must be a positive number"));
    }
    let delta_g_j_per_mol = r.delta_g_reaction_kj_per_mol() * 1000.0;
    let volts = -delta_g_j_per_mol / (r.electrons * FARADAY_C_PER_MOL);
    if volts.is_finite() {
        Ok(Volts(volts))
    } else {
        Err(invalid(
            "a Gibbs energy or coefficient is not a finite number",
        ))
    }
}

/// E° = −ΔrG°/(nF), F = 96485.332 C/mol.
///
/// For a malformed reaction (electrons not positive, or a non-finite energy)
/// this returns NaN volts; use [`try_standard_potential`] to get a typed error
/// instead. The two built-in reactions are always well formed.
pub fn standard_potential(r: &Reaction) -> Volts {
    try_standard_potential(r).unwrap_or(Volts(f64::NAN))
}

const PB: Species = Species {
    name: "Pb(s)",
    delta_g_formation_kj_per_mol: 0.0,
};
const PBO2: Species = Species {
    name: "PbO2(s)",
    delta_g_formation_kj_per_mol: -217.3,
};
const PBSO4: Species = Species {
    name: "PbSO4(s)",
    delta_g_formation_kj_per_mol: -813.0,
};
const H2O: Species = Species {
    name: "H2O(l)",
    delta_g_formation_kj_per_mol: -237.1,
};
const H_PLUS: Species = Species {
    name: "H+(aq)",
    delta_g_formation_kj_per_mol: 0.0,
};
const SULFATE: Species = Species {
    name: "SO4^2-(aq)",
    delta_g_formation_kj_per_mol: -744.5,
};
const BISULFATE: Species = Species {
    name: "HSO4-(aq)",
    delta_g_formation_kj_per_mol: -755.9,
};

/// Pb + PbO2 + 2 H⁺ + 2 SO4²⁻ → 2 PbSO4 + 2 H2O, n = 2 (CRC ΔfG°, §1.2).
pub fn lead_acid_reaction_sulfate() -> Reaction {
    Reaction {
        name: "lead-acid cell, sulfate form",
        reactants: vec![(1.0, PB), (1.0, PBO2), (2.0, H_PLUS), (2.0, SULFATE)],
        products: vec![(2.0, PBSO4), (2.0, H2O)],
        electrons: 2.0,
    }
}

/// Pb + PbO2 + 2 H⁺ + 2 HSO4⁻ → 2 PbSO4 + 2 H2O, n = 2 (CRC ΔfG°, §1.2).
/// Closer to battery acid, where bisulfate dominates.
pub fn lead_acid_reaction_bisulfate() -> Reaction {
    Reaction {
        name: "lead-acid cell, bisulfate form",
        reactants: vec![(1.0, PB), (1.0, PBO2), (2.0, H_PLUS), (2.0, BISULFATE)],
        products: vec![(2.0, PBSO4), (2.0, H2O)],
        electrons: 2.0,
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_abs_diff_eq;

    #[test]
    fn sulfate_form_is_2_041_volts() {
        // published CRC ΔfG° → E° = 2.041 V ± 0.002 (REFERENCES §1.2).
        assert_abs_diff_eq!(
            standard_potential(&lead_acid_reaction_sulfate()).0,
            2.041,
            epsilon = 0.002
        );
    }

    #[test]
    fn bisulfate_form_is_near_bode_constant() {
        // published CRC ΔfG° → 1.923 V (REFERENCES §1.2), near the 1.922 V constant of §1.1.
        let e = standard_potential(&lead_acid_reaction_bisulfate()).0;
        assert_abs_diff_eq!(e, 1.923, epsilon = 0.001);
        assert_abs_diff_eq!(e, 1.922, epsilon = 0.002);
    }

    #[test]
    fn malformed_reactions_give_typed_errors() {
        let mut r = lead_acid_reaction_sulfate();
        r.electrons = 0.0;
        assert!(matches!(
            try_standard_potential(&r),
            Err(ElectrolyteError::InvalidReaction { .. })
        ));
        r.electrons = 2.0;
        r.products[0].1.delta_g_formation_kj_per_mol = f64::NAN;
        assert!(try_standard_potential(&r).is_err());
    }
}
