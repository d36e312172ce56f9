//! Freezing point of battery acid from its SG 25/25.
//!
//! Linear interpolation of US Army TM 5-1185 Table III (REFERENCES §3,
//! published), with pure water (SG 1.000, 0 °C) as the first point.

use super::{check_sg, finite, Checked, ElectrolyteError};
use crate::units::{Celsius, SpecificGravity};

/// (SG 25/25, freezing point °C), US Army TM 5-1185 Table III (published).
const TABLE: [(f64, f64); 6] = [
    (1.000, 0.0),
    (1.100, -7.0),
    (1.150, -15.0),
    (1.200, -27.0),
    (1.250, -52.0),
    (1.280, -68.0),
];

/// Freezing point at SG 25/25 `sg25`, marked `extrapolated` beyond the table.
///
/// SG outside 1.000..=1.400 is refused. The table ends at 1.280 (−68 °C);
/// above it, up to 1.400, the table's lowest value −68 °C is returned with
/// `extrapolated: true`. It is not a bound: from memory, the acid–water
/// freezing curve has its lowest point near SG 1.29–1.30 and rises again for
/// stronger acid, so for SG well above 1.30 the true freezing point is higher.
pub fn freezing_point_checked(sg25: SpecificGravity) -> Result<Checked<Celsius>, ElectrolyteError> {
    let sg = check_sg(sg25)?;
    let last = TABLE[TABLE.len() - 1];
    if sg >= last.0 {
        return Ok(Checked {
            value: Celsius(last.1),
            extrapolated: sg > last.0,
        });
    }
    let celsius = TABLE
        .windows(2)
        .find(|pair| sg <= pair[1].0)
        .map(|pair| {
            let ((s0, t0), (s1, t1)) = (pair[0], pair[1]);
            t0 + (t1 - t0) * (sg - s0) / (s1 - s0)
        })
        .unwrap_or(last.1);
    Ok(Checked {
        value: Celsius(finite(celsius, "freezing point")?),
        extrapolated: false,
    })
}

/// Freezing point at SG 25/25 `sg25` (1.000..=1.400), interpolated in US Army
/// TM 5-1185 Table III. Above the table's end at 1.280 this returns −68 °C;
/// see [`freezing_point_checked`] for the flag and why that is not a bound.
pub fn freezing_point(sg25: SpecificGravity) -> Result<Celsius, ElectrolyteError> {
    freezing_point_checked(sg25).map(|c| c.value)
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_abs_diff_eq;

    #[test]
    fn army_table_points() {
        // published: US Army TM 5-1185 Table III (REFERENCES §3), ±3 °C.
        for (sg, celsius) in [
            (1.000, 0.0),
            (1.100, -7.0),
            (1.150, -15.0),
            (1.200, -27.0),
            (1.250, -52.0),
            (1.280, -68.0),
        ] {
            assert_abs_diff_eq!(
                freezing_point(SpecificGravity(sg)).unwrap().0,
                celsius,
                epsilon = 3.0
            );
        }
    }

    #[test]
    fn between_points_and_monotonic() {
        // published table (§3): 1.225 lies between −27 °C (1.200) and −52 °C (1.250).
        let mid = freezing_point(SpecificGravity(1.225)).unwrap().0;
        assert!(mid < -27.0 && mid > -52.0, "{mid}");
        let mut previous = f64::INFINITY;
        for i in 0..=28 {
            let t = freezing_point(SpecificGravity(1.0 + 0.01 * f64::from(i)))
                .unwrap()
                .0;
            assert!(t <= previous);
            previous = t;
        }
    }

    #[test]
    fn beyond_the_table() {
        let c = freezing_point_checked(SpecificGravity(1.30)).unwrap();
        assert!(c.extrapolated);
        assert_abs_diff_eq!(c.value.0, -68.0, epsilon = 1e-12); // documented: table's last value
        assert!(
            !freezing_point_checked(SpecificGravity(1.2))
                .unwrap()
                .extrapolated
        );
        assert!(freezing_point(SpecificGravity(0.99)).is_err());
        assert!(freezing_point(SpecificGravity(1.41)).is_err());
        assert!(freezing_point(SpecificGravity(f64::NAN)).is_err());
    }
}
