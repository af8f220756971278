//! Numbers as people read them in tables and figures: true minus signs, SI prefixes, °C.

/// A number with a true minus sign.
pub fn num(value: f64, decimals: usize) -> String {
    let s = format!("{value:.decimals$}");
    if let Some(rest) = s.strip_prefix('-') {
        if rest.chars().all(|c| c == '0' || c == '.') {
            rest.to_owned()
        } else {
            format!("\u{2212}{rest}")
        }
    } else {
        s
    }
}

/// A quantity with an SI prefix and a true minus sign.
pub fn si(value: f64, unit: &str) -> String {
    crate::units::format_si(value, unit).replace('-', "\u{2212}")
}

/// "27 °C" style temperature label.
pub fn celsius(t: f64) -> String {
    format!("{} °C", num(t, if t.fract() == 0.0 { 0 } else { 1 }))
}
