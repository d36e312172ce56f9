//! One [`UnitReport`] written as the report's units array holds it, without
//! going through serde.
//!
//! A large fleet's JSON is almost all unit objects (50,000 units make 70 MB),
//! and serde spent most of its time on the way to the bytes: a formatter call
//! and an escaping scan for every key, an indent loop for every line. Here
//! the keys and indents are literals, strings are scanned once for the few
//! bytes JSON escapes, and numbers go through serde_json's own formatter, so
//! the output is serde's byte for byte (the tests compare them, for every
//! byte that a string can hold and for whole reports).

use crate::fleet::analysis::{FleetReason, UnitReport};
use serde_json::ser::{CompactFormatter, Formatter};
use std::io::{self, Write};

/// A unit object as serde's pretty output has it one level inside the
/// report's `units` array (its lines indented by six spaces, its closing
/// brace by four), without the separator before it.
pub(super) fn write_unit(out: &mut Vec<u8>, u: &UnitReport) -> io::Result<()> {
    // Taken apart without `..`: a new field stops the build here until it
    // is written (in declaration order, as serde writes it).
    let UnitReport {
        rank,
        unit_id,
        site,
        string,
        position,
        profile,
        action,
        soc_percent,
        soc_interval_percent,
        ocv_per_cell_25c_volts,
        flags,
        reasons,
        sg_mean_25c,
        readings,
        latest_at,
        trend_percent_per_30_days,
        trend_readings,
        days_below_recharge,
        peer_deviation_mv,
        peer_z,
        ohmic_rise_percent,
        coldest_celsius,
        freezing_point_celsius,
        heat_ageing_factor,
        history: _,
        latest_temperature: _,
    } = u;
    out.extend_from_slice(b"{\n      \"rank\": ");
    CompactFormatter.write_u64(out, *rank as u64)?;
    key(out, "unit_id");
    text(out, unit_id);
    key(out, "site");
    opt_text(out, site.as_deref());
    key(out, "string");
    opt_text(out, string.as_deref());
    key(out, "position");
    match position {
        Some(p) => CompactFormatter.write_u32(out, *p)?,
        None => out.extend_from_slice(b"null"),
    }
    key(out, "profile");
    text(out, profile);
    key(out, "action");
    text(out, action.as_str());
    key(out, "soc_percent");
    opt_number(out, *soc_percent)?;
    key(out, "soc_interval_percent");
    match soc_interval_percent {
        Some(ends) => list(out, ends, |out, x| number(out, *x))?,
        None => out.extend_from_slice(b"null"),
    }
    key(out, "ocv_per_cell_25c_volts");
    opt_number(out, *ocv_per_cell_25c_volts)?;
    key(out, "flags");
    list(out, flags, |out, f| {
        text(out, f);
        Ok(())
    })?;
    key(out, "reasons");
    list(out, reasons, |out, r| {
        reason(out, r);
        Ok(())
    })?;
    key(out, "sg_mean_25c");
    opt_number(out, *sg_mean_25c)?;
    key(out, "readings");
    CompactFormatter.write_u64(out, *readings)?;
    key(out, "latest_at");
    text(out, latest_at);
    key(out, "trend_percent_per_30_days");
    opt_number(out, *trend_percent_per_30_days)?;
    key(out, "trend_readings");
    CompactFormatter.write_i64(out, *trend_readings)?;
    for (name, value) in [
        ("days_below_recharge", days_below_recharge),
        ("peer_deviation_mv", peer_deviation_mv),
        ("peer_z", peer_z),
        ("ohmic_rise_percent", ohmic_rise_percent),
        ("coldest_celsius", coldest_celsius),
        ("freezing_point_celsius", freezing_point_celsius),
        ("heat_ageing_factor", heat_ageing_factor),
    ] {
        key(out, name);
        opt_number(out, *value)?;
    }
    out.extend_from_slice(b"\n    }");
    Ok(())
}

/// A list as a unit's field: `[]` when empty, else its items on lines of
/// their own eight spaces in, the closing bracket six.
fn list<T>(
    out: &mut Vec<u8>,
    items: &[T],
    item: impl Fn(&mut Vec<u8>, &T) -> io::Result<()>,
) -> io::Result<()> {
    if items.is_empty() {
        out.extend_from_slice(b"[]");
        return Ok(());
    }
    for (i, x) in items.iter().enumerate() {
        out.extend_from_slice(if i == 0 {
            b"[\n        "
        } else {
            b",\n        "
        });
        item(out, x)?;
    }
    out.extend_from_slice(b"\n      ]");
    Ok(())
}

/// A reason object, eight spaces in.
fn reason(out: &mut Vec<u8>, r: &FleetReason) {
    let FleetReason {
        rule,
        action,
        detail,
        source,
    } = r;
    out.extend_from_slice(b"{\n          \"rule\": ");
    text(out, rule);
    out.extend_from_slice(b",\n          \"action\": ");
    text(out, action.as_str());
    out.extend_from_slice(b",\n          \"detail\": ");
    text(out, detail);
    out.extend_from_slice(b",\n          \"source\": ");
    text(out, source);
    out.extend_from_slice(b"\n        }");
}

/// The separator and key of a unit's next field (`name` needs no escaping).
fn key(out: &mut Vec<u8>, name: &str) {
    out.extend_from_slice(b",\n      \"");
    out.extend_from_slice(name.as_bytes());
    out.extend_from_slice(b"\": ");
}

/// A number as serde_json writes an `f64`: its shortest form, `null` when
/// it is not finite.
fn number(out: &mut Vec<u8>, x: f64) -> io::Result<()> {
    if x.is_finite() {
        CompactFormatter.write_f64(out, x)
    } else {
        out.write_all(b"null")
    }
}

fn opt_number(out: &mut Vec<u8>, x: Option<f64>) -> io::Result<()> {
    match x {
        Some(x) => number(out, x),
        None => out.write_all(b"null"),
    }
}

fn opt_text(out: &mut Vec<u8>, s: Option<&str>) {
    match s {
        Some(s) => text(out, s),
        None => out.extend_from_slice(b"null"),
    }
}

/// What JSON escapes, as serde_json escapes it: the quote, the backslash
/// and the control characters U+0000–U+001F, five of them by a letter and
/// the rest as `\u00XX` in lower-case hex. Nothing else (not U+007F, nor
/// anything beyond ASCII) is escaped.
const ESCAPE: [u8; 256] = {
    let mut t = [0u8; 256];
    let mut b = 0;
    while b < 0x20 {
        t[b] = b'u';
        b += 1;
    }
    t[0x08] = b'b';
    t[0x09] = b't';
    t[0x0a] = b'n';
    t[0x0c] = b'f';
    t[0x0d] = b'r';
    t[b'"' as usize] = b'"';
    t[b'\\' as usize] = b'\\';
    t
};

/// Whether `bytes` holds a byte JSON escapes: below 0x20, a quote or a
/// backslash. Without an early exit, so that the compiler tests many bytes
/// at once; the strings are short, and nearly all need nothing.
fn needs_escape(bytes: &[u8]) -> bool {
    bytes.iter().fold(false, |any, &b| {
        any | (b < 0x20) | (b == b'"') | (b == b'\\')
    })
}

/// A string in quotes, escaped.
fn text(out: &mut Vec<u8>, s: &str) {
    let bytes = s.as_bytes();
    out.reserve(bytes.len() + 2);
    out.push(b'"');
    if !needs_escape(bytes) {
        out.extend_from_slice(bytes);
        out.push(b'"');
        return;
    }
    let mut start = 0;
    let mut i = 0;
    while i < bytes.len() {
        let b = bytes[i];
        let escape = ESCAPE[b as usize];
        i += 1;
        if escape == 0 {
            continue;
        }
        out.extend_from_slice(&bytes[start..i - 1]);
        start = i;
        if escape == b'u' {
            const HEX: &[u8; 16] = b"0123456789abcdef";
            out.extend_from_slice(&[
                b'\\',
                b'u',
                b'0',
                b'0',
                HEX[(b >> 4) as usize],
                HEX[(b & 0xf) as usize],
            ]);
        } else {
            out.extend_from_slice(&[b'\\', escape]);
        }
    }
    out.extend_from_slice(&bytes[start..]);
    out.push(b'"');
}

#[cfg(test)]
mod tests {
    use super::{needs_escape, text, write_unit};
    use crate::fleet::analysis::FleetReason;
    use crate::report::fixture;

    /// serde's bytes for a unit, as the report's array holds it.
    fn serde_unit(u: &crate::fleet::analysis::UnitReport) -> String {
        let mut out = Vec::new();
        super::super::write_nested(&mut out, u, 2).unwrap();
        String::from_utf8(out).unwrap()
    }

    #[test]
    fn a_unit_is_written_as_serde_writes_it_whatever_its_values() {
        let (report, _) = fixture::report();
        let mut u = (*report.units[0]).clone();
        // Every optional value absent, then every one present and odd:
        // numbers serde writes as null, negative zero, exponents, strings
        // that need escaping, empty and one-element lists.
        let mut cases = vec![u.clone()];
        u.site = None;
        u.string = None;
        u.position = None;
        u.soc_percent = None;
        u.soc_interval_percent = None;
        u.ocv_per_cell_25c_volts = None;
        u.flags.clear();
        u.reasons.clear();
        u.sg_mean_25c = None;
        u.trend_percent_per_30_days = None;
        u.days_below_recharge = None;
        u.peer_deviation_mv = None;
        u.peer_z = None;
        u.ohmic_rise_percent = None;
        u.coldest_celsius = None;
        u.freezing_point_celsius = None;
        u.heat_ageing_factor = None;
        cases.push(u.clone());
        u.unit_id = "B\"7\\\n\u{1}\u{7f}é".into();
        u.site = Some(String::new());
        u.string = Some("S\t1".into());
        u.position = Some(u32::MAX);
        u.rank = usize::MAX;
        u.readings = u64::MAX;
        u.trend_readings = i64::MIN;
        u.soc_percent = Some(f64::NAN);
        u.soc_interval_percent = Some([f64::NEG_INFINITY, -0.0]);
        u.ocv_per_cell_25c_volts = Some(f64::INFINITY);
        u.flags = vec!["one".into()];
        u.reasons = vec![FleetReason {
            rule: "r\"".into(),
            action: crate::correct::Action::Replace,
            detail: "≈ 2.1 V\r\n".into(),
            source: "".into(),
        }];
        u.sg_mean_25c = Some(1e-7);
        u.trend_percent_per_30_days = Some(-1e300);
        u.days_below_recharge = Some(0.1 + 0.2);
        u.peer_deviation_mv = Some(f64::MIN_POSITIVE);
        u.peer_z = Some(123456789012345680.0);
        u.ohmic_rise_percent = Some(-0.0);
        u.coldest_celsius = Some(-40.0);
        u.freezing_point_celsius = Some(f64::MAX);
        u.heat_ageing_factor = Some(1.0);
        cases.push(u);
        for (i, u) in cases.iter().enumerate() {
            let mut got = Vec::new();
            write_unit(&mut got, u).unwrap();
            assert_eq!(String::from_utf8(got).unwrap(), serde_unit(u), "case {i}");
        }
    }

    #[test]
    fn strings_are_escaped_as_serde_json_escapes_them() {
        // Every ASCII byte alone, between others, and around characters
        // beyond ASCII; serde_json is the reference.
        let mut cases: Vec<String> = (0u8..0x80).map(|b| char::from(b).to_string()).collect();
        cases.extend((0u8..0x80).map(|b| format!("a{}b\u{b0}c", char::from(b))));
        // Each byte at each place of an eight-byte word, and words that
        // need nothing around it.
        for b in [0u8, 0x08, 0x1f, 0x20, b'"', b'\\', b'!', 0x7f] {
            for at in 0..8 {
                let mut s = "abcdefgh".to_string().into_bytes();
                s[at] = b;
                cases.push(format!("0123456{}89abcdef", String::from_utf8(s).unwrap()));
            }
        }
        cases.extend([
            String::new(),
            "≈ 2.1 V, §5 — \"quoted\" \\ back\u{7f}".to_string(),
            "\u{1f}\u{0}\r\n\t".to_string(),
        ]);
        for s in cases {
            let mut got = Vec::new();
            text(&mut got, &s);
            let want = serde_json::to_string(&s).unwrap();
            assert_eq!(String::from_utf8(got).unwrap(), want, "{s:?}");
        }
    }

    #[test]
    fn the_scan_finds_exactly_the_strings_to_escape() {
        let escaped = |b: u8| b < 0x20 || b == b'"' || b == b'\\';
        // Every byte value at every place of strings up to 40 bytes long.
        for len in 1..40 {
            for at in [0, len / 2, len - 1] {
                for b in 0u8..=255 {
                    let mut v = vec![b'a'; len];
                    v[at] = b;
                    assert_eq!(needs_escape(&v), escaped(b), "{b:#x} at {at} of {len}");
                }
            }
        }
        assert!(!needs_escape(b""));
        // Random bytes (beyond ASCII too), against the byte test.
        use rand::{Rng, SeedableRng};
        let mut rng = rand::rngs::StdRng::seed_from_u64(5);
        for _ in 0..20_000 {
            let len = rng.gen_range(0..64);
            let v: Vec<u8> = (0..len).map(|_| rng.gen_range(0x1c..=0xff)).collect();
            assert_eq!(needs_escape(&v), v.iter().any(|&b| escaped(b)), "{v:?}");
        }
    }
}
