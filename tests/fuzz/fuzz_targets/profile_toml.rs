//! The profile loader on arbitrary text: a profile is loaded or refused with
//! a message, never a panic; and a profile that loads must work everywhere a
//! profile is used (curve look-ups in both directions, the corrector).
#![no_main]

use libfuzzer_sys::fuzz_target;
use restvolt::correct::{assess, After, Reading, Setup};
use restvolt::profile::Profile;
use restvolt::rules::Rules;
use restvolt::units::{Celsius, Hours, SocPercent, SpecificGravity, Volts};

fuzz_target!(|data: &[u8]| {
    let Ok(text) = std::str::from_utf8(data) else {
        return;
    };
    let Ok(p) = Profile::from_toml(text, "fuzz.toml") else {
        return;
    };
    let n = f64::from(p.cells());
    for soc in [0.0, 37.5, 100.0] {
        let v = p.curve().volts_at(SocPercent(soc));
        let back = p.soc_from_ocv25(v).soc.0;
        assert!((0.0..=100.0).contains(&back), "{soc} % → {v:?} → {back} %");
        for t in [-30.0, 25.0, 50.0] {
            assert!(p.ocv_per_cell_at(SocPercent(soc), Celsius(t)).0.is_finite());
        }
    }
    for per_cell in [0.5, 1.95, 2.1, 2.6] {
        let reading = Reading {
            volts: Some(Volts(per_cell * n)),
            sg: if p.hydrometer_usable() {
                vec![SpecificGravity(1.2)]
            } else {
                Vec::new()
            },
            temperature: Some(Celsius(-10.0)),
            rest: Some(Hours(1.0)),
            after: After::Charge,
            ..Reading::default()
        };
        if let Ok(a) = assess(&p, &reading, &Setup::default(), &Rules::default()) {
            let [lo, hi] = a.soc_interval_percent;
            assert!(0.0 <= lo && lo <= a.soc_percent && a.soc_percent <= hi && hi <= 100.0);
        }
    }
});
