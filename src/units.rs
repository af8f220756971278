//! Physical quantities in plans: engineering notation with SI prefixes and unit checking.
//!
//! A quantity is either a plain number in SI base units (`0.001`) or a string with an
//! optional SI prefix and an optional unit symbol (`"1 mA"`, `"2.2k"`, `"100 mV"`, `"5V"`).
//! A unit symbol that does not fit the key (a current given in volts, say) is an error.

/// Volts.
pub type Volt = f64;
/// Amperes.
pub type Ampere = f64;
/// Ohms.
pub type Ohm = f64;
/// Hertz.
pub type Hertz = f64;
/// Farads.
pub type Farad = f64;
/// Seconds.
pub type Second = f64;

/// Boltzmann constant, J/K (CODATA 2018, exact by the 2019 SI definition).
pub const BOLTZMANN: f64 = 1.380_649e-23;
/// Elementary charge, C (CODATA 2018, exact by the 2019 SI definition).
pub const ELEMENTARY_CHARGE: f64 = 1.602_176_634e-19;
/// Offset between degrees Celsius and kelvin.
pub const ZERO_CELSIUS_K: f64 = 273.15;

/// Thermal voltage φT = kT/q at a temperature in degrees Celsius.
pub fn thermal_voltage(temperature_c: f64) -> Volt {
    BOLTZMANN * (temperature_c + ZERO_CELSIUS_K) / ELEMENTARY_CHARGE
}

/// The physical dimension a plan key expects, with the unit symbols it accepts.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Unit {
    /// Current, amperes.
    Ampere,
    /// Voltage, volts.
    Volt,
    /// Resistance, ohms.
    Ohm,
    /// Frequency, hertz.
    Hertz,
    /// Capacitance, farads.
    Farad,
    /// Time, seconds.
    Second,
    /// Energy in electron-volts (band gaps).
    ElectronVolt,
    /// A plain ratio; `%` is accepted.
    Ratio,
    /// A plain number with no unit and no percentage (β, exponents, coefficients).
    Number,
    /// A temperature in degrees Celsius; `°C` is accepted, SI prefixes are not.
    Celsius,
    /// A level in decibels (dB, dBc); SI prefixes and percentages are not accepted.
    Decibel,
}

impl Unit {
    /// Unit symbols accepted after the optional prefix, first one canonical.
    pub fn symbols(self) -> &'static [&'static str] {
        match self {
            Unit::Ampere => &["A"],
            Unit::Volt => &["V"],
            Unit::Ohm => &["Ω", "ohm", "ohms", "Ohm", "Ohms", "R"],
            Unit::Hertz => &["Hz"],
            Unit::Farad => &["F"],
            Unit::Second => &["s"],
            Unit::ElectronVolt => &["eV"],
            Unit::Ratio | Unit::Number => &[],
            Unit::Celsius => &["°C", "degC", "C"],
            Unit::Decibel => &["dB", "dBc"],
        }
    }

    /// Human description with examples, used in error messages.
    pub fn describe(self) -> &'static str {
        match self {
            Unit::Ampere => "a current in amperes, e.g. 0.001, \"1 mA\", \"250uA\"",
            Unit::Volt => "a voltage in volts, e.g. 0.1, \"100 mV\", \"5V\"",
            Unit::Ohm => "a resistance in ohms, e.g. 2000, \"2k\", \"2.2 kΩ\", \"470 ohm\"",
            Unit::Hertz => "a frequency in hertz, e.g. 1000, \"1 kHz\", \"2.5MHz\"",
            Unit::Farad => "a capacitance in farads, e.g. 1e-12, \"1 pF\", \"200f\"",
            Unit::Second => "a time in seconds, e.g. 1e-11, \"10 ps\", \"1 ns\"",
            Unit::ElectronVolt => "an energy in electron-volts, e.g. 1.11, \"1.11 eV\"",
            Unit::Ratio => "a plain number or a percentage, e.g. 0.01, \"1%\"",
            Unit::Number => "a plain number, e.g. 100",
            Unit::Celsius => "a temperature in °C, e.g. 27, \"-40 °C\"",
            Unit::Decibel => "a level in dB (dBc for distortion), e.g. -60, \"-60 dBc\"",
        }
    }

    /// Canonical symbol for printing values.
    pub fn symbol(self) -> &'static str {
        self.symbols().first().copied().unwrap_or("")
    }
}

fn prefix_scale(prefix: char) -> Option<f64> {
    Some(match prefix {
        'a' => 1e-18,
        'f' => 1e-15,
        'p' => 1e-12,
        'n' => 1e-9,
        'u' | 'µ' | 'μ' => 1e-6,
        'm' => 1e-3,
        'k' | 'K' => 1e3,
        'M' => 1e6,
        'G' => 1e9,
        'T' => 1e12,
        _ => return None,
    })
}

/// Splits a leading decimal number (sign, digits, point, exponent) from its suffix.
fn split_number(text: &str) -> Option<(f64, &str)> {
    let bytes = text.as_bytes();
    let mut end = 0;
    if end < bytes.len() && (bytes[end] == b'+' || bytes[end] == b'-') {
        end += 1;
    }
    let digits_start = end;
    while end < bytes.len() && (bytes[end].is_ascii_digit() || bytes[end] == b'.') {
        end += 1;
    }
    if end == digits_start {
        return None;
    }
    // An exponent only counts when digits follow it, so "1e" is not read as a number.
    if end < bytes.len() && (bytes[end] == b'e' || bytes[end] == b'E') {
        let mut probe = end + 1;
        if probe < bytes.len() && (bytes[probe] == b'+' || bytes[probe] == b'-') {
            probe += 1;
        }
        let exp_digits = probe;
        while probe < bytes.len() && bytes[probe].is_ascii_digit() {
            probe += 1;
        }
        if probe > exp_digits {
            end = probe;
        }
    }
    let value: f64 = text[..end].parse().ok()?;
    Some((value, &text[end..]))
}

/// Parses a quantity string such as `"2.2 kΩ"` for a key expecting `unit`.
///
/// Returns the value in SI base units, or a sentence saying what is wrong.
pub fn parse_quantity(text: &str, unit: Unit) -> Result<f64, String> {
    let trimmed = text.trim();
    let lowered = trimmed.to_ascii_lowercase();
    if matches!(
        lowered.as_str(),
        "inf" | ".inf" | "+inf" | "+.inf" | "infinity"
    ) {
        return Ok(f64::INFINITY);
    }
    let Some((number, suffix)) = split_number(trimmed) else {
        return Err(format!(
            "\"{trimmed}\" is not a number with an optional SI prefix and unit"
        ));
    };
    let suffix = suffix.trim_start();
    if suffix.is_empty() {
        return Ok(number);
    }
    if unit == Unit::Ratio {
        return if suffix == "%" {
            Ok(number / 100.0)
        } else {
            Err(format!("\"{suffix}\" is not accepted after a ratio"))
        };
    }
    if unit.symbols().contains(&suffix) {
        return Ok(number);
    }
    if matches!(unit, Unit::Number | Unit::Celsius | Unit::Decibel) {
        return Err(format!(
            "\"{suffix}\" is not accepted here (expected {})",
            unit.describe()
        ));
    }
    let mut chars = suffix.chars();
    let first = chars.next().unwrap_or(' ');
    let rest = chars.as_str();
    if let Some(scale) = prefix_scale(first) {
        if rest.is_empty() || unit.symbols().contains(&rest) {
            return Ok(number * scale);
        }
    }
    Err(format!(
        "unit \"{suffix}\" does not fit here (expected {} with an optional SI prefix a f p n u m k M G T)",
        if unit.symbol().is_empty() { "no unit" } else { unit.symbol() }
    ))
}

/// A number for a message: at most six significant digits, trailing zeros dropped, in
/// scientific notation outside 1e-4…1e6 (`0.05`, `1.23457e-8`, `-1e-300`, `inf`).
pub fn short_number(value: f64) -> String {
    if value.is_nan() {
        return "NaN".into();
    }
    if value.is_infinite() {
        return if value > 0.0 { "inf" } else { "-inf" }.into();
    }
    if value == 0.0 {
        return "0".into();
    }
    let trim = |text: String| -> String {
        if text.contains('.') {
            text.trim_end_matches('0').trim_end_matches('.').to_owned()
        } else {
            text
        }
    };
    let magnitude = value.abs();
    if (1e-4..1e6).contains(&magnitude) {
        let whole_digits = magnitude.log10().floor() as i32 + 1;
        let decimals = (6 - whole_digits).max(0) as usize;
        let text = trim(format!("{value:.decimals$}"));
        // Rounding up to 1e6 (999999.7) would show seven digits: fall through to scientific.
        if text
            .trim_start_matches('-')
            .replace('.', "")
            .trim_start_matches('0')
            .len()
            <= 6
        {
            return text;
        }
    }
    let text = format!("{value:.5e}");
    match text.split_once('e') {
        Some((mantissa, exponent)) => format!("{}e{exponent}", trim(mantissa.to_owned())),
        None => text,
    }
}

/// Formats a value with an SI prefix and unit symbol, three significant figures.
pub fn format_si(value: f64, unit: &str) -> String {
    if !value.is_finite() {
        return format!("{value} {unit}");
    }
    if value == 0.0 {
        return format!("0 {unit}");
    }
    let prefixes = [
        (1e12, "T"),
        (1e9, "G"),
        (1e6, "M"),
        (1e3, "k"),
        (1.0, ""),
        (1e-3, "m"),
        (1e-6, "µ"),
        (1e-9, "n"),
        (1e-12, "p"),
        (1e-15, "f"),
        (1e-18, "a"),
    ];
    let magnitude = value.abs();
    let (scale, prefix) = prefixes
        .iter()
        .copied()
        .find(|(scale, _)| magnitude >= *scale * 0.999_5)
        .unwrap_or((1e-18, "a"));
    let scaled = value / scale;
    let digits = if scaled.abs() >= 99.95 {
        0
    } else if scaled.abs() >= 9.995 {
        1
    } else {
        2
    };
    format!("{scaled:.digits$} {prefix}{unit}")
}

/// Formats a value with an SI prefix and unit symbol, up to `significant` significant figures
/// with trailing zeros dropped: `1 MHz`, `2.2 kΩ`, `455 kHz`. For values a person wrote (plan
/// settings), where "1.00 MHz" would suggest a precision nobody stated.
pub fn format_si_trimmed(value: f64, unit: &str, significant: usize) -> String {
    if !value.is_finite() || value == 0.0 {
        return format_si(value, unit);
    }
    let prefixes = [
        (1e12, "T"),
        (1e9, "G"),
        (1e6, "M"),
        (1e3, "k"),
        (1.0, ""),
        (1e-3, "m"),
        (1e-6, "µ"),
        (1e-9, "n"),
        (1e-12, "p"),
        (1e-15, "f"),
        (1e-18, "a"),
    ];
    let significant = significant.max(1) as i32;
    // Round to the significant figures first, so 999.96 becomes 1 k rather than 1000.
    let exponent = value.abs().log10().floor() as i32;
    let quantum = 10f64.powi(exponent - significant + 1);
    let rounded = (value / quantum).round() * quantum;
    let magnitude = rounded.abs();
    let (scale, prefix) = prefixes
        .iter()
        .copied()
        .find(|(scale, _)| magnitude >= *scale * (1.0 - 1e-12))
        .unwrap_or((1e-18, "a"));
    let scaled = rounded / scale;
    let integer_digits = (scaled.abs().log10().floor() as i32 + 1).max(1);
    let decimals = (significant - integer_digits).max(0) as usize;
    let mut text = format!("{scaled:.decimals$}");
    if text.contains('.') {
        text = text.trim_end_matches('0').trim_end_matches('.').to_owned();
    }
    format!("{text} {prefix}{unit}")
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn trimmed_formatting_drops_zeros_nobody_wrote() {
        assert_eq!(format_si_trimmed(1e6, "Hz", 4), "1 MHz");
        assert_eq!(format_si_trimmed(10e3, "Ω", 4), "10 kΩ");
        assert_eq!(format_si_trimmed(2200.0, "Ω", 4), "2.2 kΩ");
        assert_eq!(format_si_trimmed(455e3, "Hz", 4), "455 kHz");
        assert_eq!(format_si_trimmed(0.02, "V", 4), "20 mV");
        assert_eq!(format_si_trimmed(0.0020409, "V", 4), "2.041 mV");
        assert_eq!(format_si_trimmed(999.96, "Hz", 4), "1 kHz");
        assert_eq!(format_si_trimmed(-0.5e-3, "V", 3), "-500 µV");
        assert_eq!(format_si_trimmed(12e-9, "V/√Hz", 3), "12 nV/√Hz");
    }

    #[test]
    fn reads_prefixes_and_units() {
        let cases = [
            ("1 mA", Unit::Ampere, 1e-3),
            ("1m", Unit::Ampere, 1e-3),
            ("2.2k", Unit::Ohm, 2200.0),
            ("2.2 kΩ", Unit::Ohm, 2200.0),
            ("470 ohm", Unit::Ohm, 470.0),
            ("100 mV", Unit::Volt, 0.1),
            ("5V", Unit::Volt, 5.0),
            ("1 kHz", Unit::Hertz, 1e3),
            ("2.5MHz", Unit::Hertz, 2.5e6),
            ("1e-16", Unit::Ampere, 1e-16),
            ("10 ps", Unit::Second, 1e-11),
            ("1 pF", Unit::Farad, 1e-12),
            ("1%", Unit::Ratio, 0.01),
            ("-3 mV", Unit::Volt, -3e-3),
            ("250uA", Unit::Ampere, 250e-6),
        ];
        for (text, unit, expected) in cases {
            let got = parse_quantity(text, unit).unwrap();
            assert!(
                (got - expected).abs() <= 1e-15 * expected.abs(),
                "{text}: {got}"
            );
        }
        assert_eq!(parse_quantity(".inf", Unit::Ohm).unwrap(), f64::INFINITY);
    }

    #[test]
    fn rejects_units_that_do_not_fit() {
        assert!(parse_quantity("1 mV", Unit::Ampere).is_err());
        assert!(parse_quantity("2k volts", Unit::Ohm).is_err());
        assert!(parse_quantity("abc", Unit::Volt).is_err());
        assert!(parse_quantity("1 x", Unit::Ratio).is_err());
        // A dB limit, a temperature or a plain number never takes a percentage or a prefix.
        assert!(parse_quantity("1%", Unit::Decibel).is_err());
        assert!(parse_quantity("50%", Unit::Celsius).is_err());
        assert!(parse_quantity("1k", Unit::Number).is_err());
        assert_eq!(parse_quantity("-60 dBc", Unit::Decibel).unwrap(), -60.0);
        assert_eq!(parse_quantity("-40 °C", Unit::Celsius).unwrap(), -40.0);
    }

    #[test]
    fn thermal_voltage_at_room_temperature() {
        // kT/q at 300.15 K = 25.865 mV (CODATA 2018 constants; common practice "25.9 mV").
        assert!((thermal_voltage(27.0) - 0.025_865).abs() < 2e-6);
    }

    #[test]
    fn message_numbers_have_at_most_six_significant_digits() {
        let cases = [
            (0.050000000000000044, "0.05"),
            (-1e-300, "-1e-300"),
            (f64::from_bits(1e-8f64.to_bits() + 1), "1e-8"),
            (1.0833495206231025, "1.08335"),
            (123456789.0, "1.23457e8"),
            (999999.7, "1e6"),
            (0.000123456789, "0.000123457"),
            (2000.0, "2000"),
            (-273.15, "-273.15"),
            (0.0, "0"),
            (f64::INFINITY, "inf"),
        ];
        for (value, text) in cases {
            assert_eq!(short_number(value), text);
            let digits: String = text
                .split('e')
                .next()
                .unwrap()
                .chars()
                .filter(|c| c.is_ascii_digit())
                .collect();
            assert!(digits.trim_start_matches('0').len() <= 6, "{text}");
        }
    }

    #[test]
    fn formats_with_prefixes() {
        assert_eq!(format_si(0.001, "A"), "1.00 mA");
        assert_eq!(format_si(2200.0, "Ω"), "2.20 kΩ");
        assert_eq!(format_si(0.0762, "V"), "76.2 mV");
    }
}
