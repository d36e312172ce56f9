//! Physical quantities as types, and the parsers for how people type them.
//!
//! Every value that crosses a module boundary carries its unit in its type
//! (`Volts`, `Celsius`, `SocPercent`, …) so that a cell voltage can never be
//! passed where a unit voltage or a specific gravity is expected by accident
//! of argument order. The wrapped `f64` is public: arithmetic inside a module is
//! plain, the type is the label at the seam.

use serde::{Deserialize, Serialize};
use std::fmt;

macro_rules! quantity {
    ($(#[$m:meta])* $name:ident, $unit:expr) => {
        $(#[$m])*
        #[derive(Clone, Copy, Debug, PartialEq, PartialOrd, Default, Serialize, Deserialize)]
        #[serde(transparent)]
        pub struct $name(pub f64);

        impl $name {
            /// The bare number, in the unit the type names.
            pub fn value(self) -> f64 {
                self.0
            }
            /// True when the number is neither NaN nor infinite.
            pub fn is_finite(self) -> bool {
                self.0.is_finite()
            }
        }

        impl fmt::Display for $name {
            fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
                match f.precision() {
                    Some(p) => write!(f, "{:.*}{}", p, self.0, $unit),
                    None => write!(f, "{}{}", self.0, $unit),
                }
            }
        }
    };
}

quantity!(
    /// Electric potential difference in volts.
    Volts, " V");
quantity!(
    /// Electric potential difference in millivolts.
    Millivolts, " mV");
quantity!(
    /// Temperature in degrees Celsius.
    Celsius, " °C");
quantity!(
    /// A temperature difference in kelvin (equal to a difference in °C).
    Kelvins, " K");
quantity!(
    /// Elapsed time in hours.
    Hours, " h");
quantity!(
    /// State of charge in percent of full charge (0–100).
    SocPercent, " %");
quantity!(
    /// Specific gravity of the electrolyte, referred to water (dimensionless ratio).
    /// Unless a name says otherwise it is SG 25/25: the solution at 25 °C over water at 25 °C.
    SpecificGravity, "");
quantity!(
    /// Molality in mol of H2SO4 per kg of water.
    MolPerKg, " mol/kg");
quantity!(
    /// Mass fraction of solute, 0–1 (kg H2SO4 per kg solution).
    MassFraction, "");
quantity!(
    /// Density in kg/m³.
    KgPerM3, " kg/m³");
quantity!(
    /// A temperature coefficient in millivolts per kelvin.
    MillivoltsPerKelvin, " mV/K");
quantity!(
    /// Amperes.
    Amperes, " A");
quantity!(
    /// Ampere-hours of capacity.
    AmpHours, " Ah");
quantity!(
    /// Milliohms.
    Milliohms, " mΩ");

impl Volts {
    /// The same potential in millivolts.
    pub fn to_millivolts(self) -> Millivolts {
        Millivolts(self.0 * 1000.0)
    }
}

impl Millivolts {
    /// The same potential in volts.
    pub fn to_volts(self) -> Volts {
        Volts(self.0 / 1000.0)
    }
}

impl Celsius {
    /// Convert from degrees Fahrenheit.
    pub fn from_fahrenheit(deg_f: f64) -> Celsius {
        Celsius((deg_f - 32.0) * 5.0 / 9.0)
    }
    /// The same temperature in degrees Fahrenheit.
    pub fn to_fahrenheit(self) -> f64 {
        self.0 * 9.0 / 5.0 + 32.0
    }
    /// Thermodynamic temperature in kelvin.
    pub fn to_kelvin(self) -> f64 {
        self.0 + 273.15
    }
    /// Difference `self − other`.
    pub fn minus(self, other: Celsius) -> Kelvins {
        Kelvins(self.0 - other.0)
    }
}

impl Hours {
    /// From minutes.
    pub fn from_minutes(minutes: f64) -> Hours {
        Hours(minutes / 60.0)
    }
    /// In minutes.
    pub fn to_minutes(self) -> f64 {
        self.0 * 60.0
    }
    /// As a chrono duration (rounded to the second).
    pub fn to_duration(self) -> chrono::Duration {
        chrono::Duration::seconds((self.0 * 3600.0).round() as i64)
    }
}

/// A value typed on the command line or in a file could not be read.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum UnitError {
    /// A temperature was given as a bare number.
    #[error("temperature '{0}' has no unit: write it like -4C, 25F or 12.5C")]
    TemperatureWithoutUnit(String),
    /// A temperature could not be read at all.
    #[error("temperature '{0}' is not understood: expected a number followed by C or F, like -4C or 25F")]
    BadTemperature(String),
    /// A duration could not be read.
    #[error("rest time '{0}' is not understood: expected a number with m, h or d (40m, 6h, 2d, 1h30m) or 'unknown'")]
    BadDuration(String),
    /// A duration was negative.
    #[error("rest time '{0}' is negative: a rest time counts from the end of the last charge or discharge")]
    NegativeDuration(String),
    /// A number could not be read.
    #[error("'{value}' is not a number (expected {expected})")]
    BadNumber {
        /// What was typed.
        value: String,
        /// What was expected.
        expected: String,
    },
    /// A meter accuracy could not be read.
    #[error("meter accuracy '{0}' is not understood: expected PERCENT%+COUNTS, like 0.5%+2")]
    BadMeter(String),
}

/// A typed value as quoted in a message: trimmed, and cut to 40 characters
/// so that a runaway field (a file without line ends) cannot flood the terminal.
pub fn clip(raw: &str) -> String {
    const MAX_CHARS: usize = 40;
    let t = raw.trim();
    match t.char_indices().nth(MAX_CHARS) {
        Some((i, _)) => format!("{}… ({} bytes)", &t[..i], t.len()),
        None => t.to_string(),
    }
}

/// Text that is not UTF-8: where the first bad byte is and what it suggests.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
#[error("{what}")]
pub struct NotUtf8 {
    /// 1-based line of the first byte that is not UTF-8.
    pub line: u64,
    /// What was found, with a guess at the encoding.
    pub what: String,
}

/// The bytes of a text file as UTF-8, without a leading byte-order mark.
/// UTF-16 (byte-order mark or NUL bytes) and Latin-1 / Windows-1252 bytes are
/// refused rather than guessed, naming the line of the first bad byte.
pub fn utf8_text(bytes: &[u8]) -> Result<&str, NotUtf8> {
    let utf16 = |what: &str| NotUtf8 {
        line: 1,
        what: what.to_string(),
    };
    if bytes.starts_with(&[0xFF, 0xFE]) {
        return Err(utf16(
            "the file is UTF-16 (little-endian byte-order mark), not UTF-8",
        ));
    }
    if bytes.starts_with(&[0xFE, 0xFF]) {
        return Err(utf16(
            "the file is UTF-16 (big-endian byte-order mark), not UTF-8",
        ));
    }
    let body = bytes.strip_prefix(&[0xEF, 0xBB, 0xBF]).unwrap_or(bytes);
    let line_of = |at: usize| body[..at].iter().filter(|&&b| b == b'\n').count() as u64 + 1;
    if let Some(at) = body.iter().position(|&b| b == 0) {
        return Err(NotUtf8 {
            line: line_of(at),
            what:
                "the file contains NUL bytes: it is UTF-16 without a byte-order mark, or not text"
                    .into(),
        });
    }
    std::str::from_utf8(body).map_err(|e| {
        let at = e.valid_up_to();
        let byte = body.get(at).copied().unwrap_or(0);
        NotUtf8 {
            line: line_of(at),
            what: format!(
                "the text is not valid UTF-8: byte 0x{byte:02X} (it looks like Latin-1 or Windows-1252, e.g. an accented letter or a degree sign)"
            ),
        }
    })
}

/// Read a decimal number, accepting a decimal comma (`12,41`) as field data
/// from spreadsheets often has, and the Unicode minus sign.
pub fn parse_decimal(raw: &str, expected: &str) -> Result<f64, UnitError> {
    let text = raw.trim().replace('\u{2212}', "-");
    let normalised = if text.contains(',') && !text.contains('.') && text.matches(',').count() == 1
    {
        text.replace(',', ".")
    } else {
        text.clone()
    };
    let bad = || UnitError::BadNumber {
        value: clip(raw),
        expected: expected.to_string(),
    };
    // Rust accepts "inf", "NaN" and "infinity": field data never means those.
    if normalised.is_empty()
        || normalised
            .chars()
            .any(|c| !(c.is_ascii_digit() || matches!(c, '.' | '-' | '+' | 'e' | 'E')))
    {
        return Err(bad());
    }
    let value: f64 = normalised.parse().map_err(|_| bad())?;
    if value.is_finite() {
        Ok(value)
    } else {
        Err(bad())
    }
}

/// Parse a temperature with its unit: `-4C`, `−4 °C`, `25F`, `77°F`.
/// A bare number is refused, because 25 could be either.
pub fn parse_temperature(raw: &str) -> Result<Celsius, UnitError> {
    let text = raw.trim().replace('\u{2212}', "-").replace('°', "");
    let text = text.trim();
    let (number, unit) = match text.char_indices().last() {
        Some((i, c)) if c.is_ascii_alphabetic() => (&text[..i], c.to_ascii_uppercase()),
        Some(_) => {
            return if parse_decimal(text, "a temperature").is_ok() {
                Err(UnitError::TemperatureWithoutUnit(clip(raw)))
            } else {
                Err(UnitError::BadTemperature(clip(raw)))
            }
        }
        None => return Err(UnitError::BadTemperature(clip(raw))),
    };
    let value = parse_decimal(number.trim(), "a temperature")
        .map_err(|_| UnitError::BadTemperature(clip(raw)))?;
    match unit {
        'C' => Ok(Celsius(value)),
        'F' => Ok(Celsius::from_fahrenheit(value)),
        _ => Err(UnitError::BadTemperature(clip(raw))),
    }
}

/// A number from the input, for a message that refuses it: as written
/// normally, unless it is so large or so small that it would run to hundreds
/// of digits (`1e300` written out is 301), then in scientific notation to
/// four significant digits. A precision (`{:.1}`) applies to the normal form.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Shown(pub f64);

impl fmt::Display for Shown {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let v = self.0;
        if v.is_finite() && v != 0.0 && !(1e-6..1e9).contains(&v.abs()) {
            // Four significant digits, trailing zeros dropped: 1e300, 1.667e299.
            let text = format!("{v:.3e}");
            let (mantissa, exponent) = text.split_once('e').unwrap_or((&text, "0"));
            let mantissa = mantissa.trim_end_matches('0').trim_end_matches('.');
            write!(f, "{mantissa}e{exponent}")
        } else if let Some(p) = f.precision() {
            write!(f, "{v:.p$}")
        } else {
            write!(f, "{v}")
        }
    }
}

/// A number written to the nearest whole number exactly as `{:.0}` writes
/// it (ties to even, `-0` for a negative that rounds to zero, tested against
/// the standard formatter), without its exact-decimal conversion: several
/// hundred instructions a number, and a fleet report writes three for every
/// unit judged serviceable. No width or padding is applied.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Whole(pub f64);

impl fmt::Display for Whole {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let r = self.0.round_ties_even();
        if r.abs() < 9.0e15 {
            if r == 0.0 && self.0.is_sign_negative() {
                f.write_str("-0")
            } else {
                write!(f, "{}", r as i64)
            }
        } else {
            write!(f, "{:.0}", self.0)
        }
    }
}

/// `value` as [`Shown`] with `decimals` places, or with up to three more (then
/// in full) where fewer would make it read as `limit` or beyond: a charge of
/// 74.6 % against a 75 % threshold is written `74.6`, not `75`, so that
/// "below 75 %" never stands beside a number that reads as 75.
pub fn shown_beside(value: f64, limit: f64, decimals: usize) -> String {
    let side = value.partial_cmp(&limit);
    let text = |d: usize| format!("{:.d$}", Shown(value));
    (decimals..=decimals + 3)
        .map(text)
        .find(|t| t.parse::<f64>().ok().and_then(|x| x.partial_cmp(&limit)) == side)
        .unwrap_or_else(|| Shown(value).to_string())
}

/// Parse a rest duration: `40m`, `6h`, `2d`, `1h30m`, `90min`, `1.5h`, or
/// `unknown` (returns `None`). A bare number is refused.
pub fn parse_duration(raw: &str) -> Result<Option<Hours>, UnitError> {
    let text = raw.trim().to_ascii_lowercase();
    if text == "unknown" || text == "?" {
        return Ok(None);
    }
    if text.starts_with('-') || text.starts_with('\u{2212}') {
        return Err(UnitError::NegativeDuration(clip(raw)));
    }
    let bad = || UnitError::BadDuration(clip(raw));
    let mut total_hours = 0.0;
    let mut number = String::new();
    let mut chars = text.chars().peekable();
    let mut parts = 0;
    while let Some(c) = chars.next() {
        if c.is_ascii_digit() || c == '.' || c == ',' {
            number.push(if c == ',' { '.' } else { c });
            continue;
        }
        if c.is_whitespace() {
            continue;
        }
        let mut word = String::from(c);
        while let Some(&n) = chars.peek() {
            if n.is_ascii_alphabetic() {
                word.push(n);
                chars.next();
            } else {
                break;
            }
        }
        let value: f64 = number.parse().map_err(|_| bad())?;
        number.clear();
        let factor = match word.as_str() {
            "s" | "sec" | "secs" => 1.0 / 3600.0,
            "m" | "min" | "mins" | "minute" | "minutes" => 1.0 / 60.0,
            "h" | "hr" | "hrs" | "hour" | "hours" => 1.0,
            "d" | "day" | "days" => 24.0,
            _ => return Err(bad()),
        };
        total_hours += value * factor;
        parts += 1;
    }
    if !number.is_empty() || parts == 0 || !total_hours.is_finite() {
        return Err(bad());
    }
    Ok(Some(Hours(total_hours)))
}

/// Choose the delimiter of a CSV export (`,`, `;` or tab): the one that
/// occurs most often outside quotes in the header line, comma on a tie.
/// Spreadsheets in decimal-comma locales export with `;`.
pub fn detect_delimiter(header: &[u8]) -> u8 {
    let mut counts = [0usize; 3];
    let mut quoted = false;
    for &b in header {
        match b {
            b'"' => quoted = !quoted,
            b'\n' | b'\r' if !quoted => break,
            b',' if !quoted => counts[0] += 1,
            b';' if !quoted => counts[1] += 1,
            b'\t' if !quoted => counts[2] += 1,
            _ => {}
        }
    }
    let best = (0..3).max_by_key(|&i| (counts[i], 3 - i)).unwrap_or(0);
    [b',', b';', b'\t'][best]
}

/// A handheld meter's stated DC-volts accuracy: ±(percent of reading + counts of the last digit).
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
pub struct MeterAccuracy {
    /// Percent-of-reading term.
    pub percent_of_reading: f64,
    /// Number of counts of the display resolution.
    pub counts: f64,
}

impl MeterAccuracy {
    /// The half-width of the stated accuracy band for a reading, in volts.
    pub fn half_width(self, reading: Volts, resolution: Volts) -> Volts {
        Volts(reading.0.abs() * self.percent_of_reading / 100.0 + self.counts * resolution.0)
    }
}

impl fmt::Display for MeterAccuracy {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(
            f,
            "±({}% + {} counts)",
            self.percent_of_reading, self.counts
        )
    }
}

/// Parse `0.5%+2` (percent of reading plus counts); `0.5%` alone means no counts.
pub fn parse_meter(raw: &str) -> Result<MeterAccuracy, UnitError> {
    let text: String = raw.chars().filter(|c| !c.is_whitespace()).collect();
    let bad = || UnitError::BadMeter(clip(raw));
    let (pct, counts) = match text.split_once('%') {
        Some((p, rest)) => {
            let rest = rest.trim_start_matches('+');
            let counts = if rest.is_empty() {
                0.0
            } else {
                parse_decimal(rest, "counts").map_err(|_| bad())?
            };
            (parse_decimal(p, "percent").map_err(|_| bad())?, counts)
        }
        None => return Err(bad()),
    };
    if pct < 0.0 || counts < 0.0 || pct > 20.0 {
        return Err(bad());
    }
    Ok(MeterAccuracy {
        percent_of_reading: pct,
        counts,
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_relative_eq;

    #[test]
    fn numbers_in_messages_are_short_however_large() {
        let shown = |v: f64| Shown(v).to_string();
        assert_eq!(shown(12.45), "12.45");
        assert_eq!(shown(-300.0), "-300");
        assert_eq!(shown(0.0), "0");
        assert_eq!(shown(999_999_999.0), "999999999");
        assert_eq!(shown(1e9), "1e9");
        assert_eq!(shown(1e300), "1e300");
        assert_eq!(shown(-2.5e-9), "-2.5e-9");
        assert_eq!(shown(1e300 / 6.0), "1.667e299");
        assert_eq!(shown(f64::NAN), "NaN");
        assert!(shown(f64::MAX).len() < 30);
        assert_eq!(format!("{:.1}", Shown(-5.04)), "-5.0");
        assert_eq!(format!("{:.1}", Shown(1e300)), "1e300");
    }

    #[test]
    fn whole_numbers_are_written_as_the_standard_formatter_writes_them() {
        // Reference: the standard library's `{:.0}`.
        let mut values = vec![
            0.0,
            -0.0,
            0.5,
            1.5,
            2.5,
            -0.5,
            -1.5,
            -0.3,
            0.49999999999999994,
            74.5,
            75.5,
            99.99,
            100.0,
            1e15 + 0.5,
            4503599627370495.5,
            8.9e15,
            9.1e15,
            1e300,
            -1e300,
            f64::NAN,
            f64::INFINITY,
            f64::NEG_INFINITY,
            f64::MIN_POSITIVE,
            -f64::MIN_POSITIVE,
        ];
        let mut x = 0.123_f64;
        for _ in 0..20_000 {
            // A spread of magnitudes and signs, and the halves between them.
            x = (x * 7.31 + 0.17) % 250.0;
            values.extend([
                x - 125.0,
                (x * 2.0).round() / 2.0 - 60.0,
                x * 1e6,
                -x * 1e12,
            ]);
        }
        for v in values {
            assert_eq!(Whole(v).to_string(), format!("{v:.0}"), "{v:e}");
        }
    }

    #[test]
    fn a_number_beside_its_limit_never_reads_as_the_limit() {
        // A display rule of this project (nothing outside it to check against).
        assert_eq!(shown_beside(74.6, 75.0, 0), "74.6");
        assert_eq!(shown_beside(74.96, 75.0, 0), "74.96");
        assert_eq!(shown_beside(74.4, 75.0, 0), "74");
        assert_eq!(shown_beside(19.99999, 20.0, 0), "19.99999");
        assert_eq!(shown_beside(75.0, 75.0, 0), "75");
        assert_eq!(shown_beside(75.4, 75.0, 0), "75.4");
        assert_eq!(shown_beside(0.0504, 0.05, 3), "0.0504");
        assert_eq!(shown_beside(0.051, 0.05, 3), "0.051");
        assert_eq!(shown_beside(f64::NAN, 75.0, 0), "NaN");
    }

    #[test]
    fn temperatures_need_their_unit() {
        assert_relative_eq!(parse_temperature("-4C").unwrap().0, -4.0);
        assert_relative_eq!(parse_temperature("−4 °C").unwrap().0, -4.0);
        // 32 °F is the freezing point of water (definition of the scale).
        assert_relative_eq!(parse_temperature("32F").unwrap().0, 0.0);
        assert_relative_eq!(
            parse_temperature("80°F").unwrap().0,
            26.666_666,
            epsilon = 1e-5
        );
        assert_eq!(
            parse_temperature("25"),
            Err(UnitError::TemperatureWithoutUnit("25".into()))
        );
        assert!(parse_temperature("warm").is_err());
        assert!(parse_temperature("12K").is_err());
    }

    #[test]
    fn durations() {
        assert_relative_eq!(parse_duration("40m").unwrap().unwrap().0, 40.0 / 60.0);
        assert_relative_eq!(parse_duration("6h").unwrap().unwrap().0, 6.0);
        assert_relative_eq!(parse_duration("2d").unwrap().unwrap().0, 48.0);
        assert_relative_eq!(parse_duration("1h30m").unwrap().unwrap().0, 1.5);
        assert_eq!(parse_duration("unknown").unwrap(), None);
        assert!(parse_duration("6").is_err());
        assert!(parse_duration("-2h").is_err());
        assert!(parse_duration("h").is_err());
        assert!(parse_duration("3 weeks").is_err());
    }

    #[test]
    fn decimals_accept_a_comma_and_refuse_nan() {
        assert_relative_eq!(parse_decimal("12,41", "volts").unwrap(), 12.41);
        assert_relative_eq!(parse_decimal(" 12.41 ", "volts").unwrap(), 12.41);
        assert!(parse_decimal("NaN", "volts").is_err());
        assert!(parse_decimal("inf", "volts").is_err());
        assert!(parse_decimal("1,234,5", "volts").is_err());
        assert!(parse_decimal("", "volts").is_err());
    }

    #[test]
    fn clipped_values_and_text_encodings() {
        assert_eq!(clip("  12.4 "), "12.4");
        let long = "9".repeat(10_000_000);
        let c = clip(&long);
        assert!(c.len() < 100 && c.contains("10000000 bytes"), "{c}");
        assert!(parse_decimal(&long, "volts").unwrap_err().to_string().len() < 200);
        // A UTF-8 byte-order mark is EF BB BF (The Unicode Standard, §23.8); it is dropped.
        assert_eq!(utf8_text(b"\xEF\xBB\xBFa,b\n").unwrap(), "a,b\n");
        // FF FE starts little-endian UTF-16 (The Unicode Standard, §23.8).
        let e = utf8_text(b"\xFF\xFEa\x00").unwrap_err();
        assert!(e.line == 1 && e.what.contains("UTF-16"), "{e:?}");
        let e = utf8_text(b"a,b\n1,2\n\x00").unwrap_err();
        assert!(e.line == 3 && e.what.contains("NUL"), "{e:?}");
        // 0xE9 is é in Latin-1 (ISO/IEC 8859-1) and never a whole character in UTF-8.
        let e = utf8_text(b"a,b\ncaf\xE9,1\n").unwrap_err();
        assert!(e.line == 2 && e.what.contains("0xE9"), "{e:?}");
    }

    #[test]
    fn meter_accuracy() {
        let m = parse_meter("0.5%+2").unwrap();
        // REFERENCES §7: ±(0.5 % + 2 counts at 10 mV) at 12.6 V is ±0.083 V.
        assert_relative_eq!(
            m.half_width(Volts(12.6), Volts(0.01)).0,
            0.083,
            epsilon = 1e-9
        );
        assert!(parse_meter("0.5").is_err());
        assert_eq!(parse_meter("1%").unwrap().counts, 0.0);
    }
}
