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

/// A value a person wrote (a plan setting) with an SI prefix, trailing zeros dropped and a
/// true minus sign: `1 MHz`, `10 kΩ`, `2.2 kΩ`, `20 mV`.
pub fn si_exact(value: f64, unit: &str) -> String {
    crate::units::format_si_trimmed(value, unit, 4).replace('-', "\u{2212}")
}

/// A computed value with an SI prefix, three significant figures, trailing zeros dropped and
/// a true minus sign: `381 mV`, `5.5 V`.
pub fn si_short(value: f64, unit: &str) -> String {
    crate::units::format_si_trimmed(value, unit, 3).replace('-', "\u{2212}")
}

/// The trade's name of a metric or figure as the report names it (`hd3` → HD3, `thd` → THD,
/// `input_noise` → input noise), for tables and figures.
pub fn metric_label(name: &str) -> String {
    match name {
        "thd" | "im3" | "im2" | "iip3" | "oip3" | "iip2" | "sfdr" | "snr" => name.to_uppercase(),
        "p1db" => "P1dB".into(),
        "gain" => "gain".into(),
        "steering_range" => "steering range".into(),
        "input_noise" => "input noise".into(),
        "offset" => "input offset".into(),
        other => match other.strip_prefix("hd") {
            Some(order) if order.parse::<usize>().is_ok() => format!("HD{order}"),
            _ => other.replace('_', " "),
        },
    }
}

/// A quantity of a budget line in its unit as people write it: dB levels to one decimal
/// (`−60 dBc`, `20.5 dB`), volts and noise densities with SI prefixes (`300 mV`, `12 nV/√Hz`).
pub fn level(value: f64, unit: &str) -> String {
    if unit == crate::report::YIELD_UNIT {
        return format!("{} %", num(100.0 * value, 1));
    }
    if unit.starts_with("dB") {
        let text = num(value, 1);
        let text = text.strip_suffix(".0").map(str::to_owned).unwrap_or(text);
        format!("{text} {unit}")
    } else {
        si_short(value, unit)
    }
}

/// A budget limit as read aloud: `≤ −60 dBc`, `≥ 300 mV`.
pub fn limit_text(kind: &str, limit: f64, unit: &str) -> String {
    format!(
        "{} {}",
        if kind == "max" { "≤" } else { "≥" },
        level(limit, unit)
    )
}

/// "27 °C" style temperature label.
pub fn celsius(t: f64) -> String {
    format!("{} °C", num(t, if t.fract() == 0.0 { 0 } else { 1 }))
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Tables and figures use the trade's names, never the plan's code case.
    #[test]
    fn metrics_carry_their_trade_names() {
        assert_eq!(metric_label("hd3"), "HD3");
        assert_eq!(metric_label("thd"), "THD");
        assert_eq!(metric_label("im3"), "IM3");
        assert_eq!(metric_label("p1db"), "P1dB");
        assert_eq!(metric_label("input_noise"), "input noise");
        assert_eq!(metric_label("steering_range"), "steering range");
    }

    #[test]
    fn limits_read_as_written() {
        assert_eq!(limit_text("max", -60.0, "dBc"), "≤ \u{2212}60 dBc");
        assert_eq!(limit_text("min", 0.3, "V"), "≥ 300 mV");
        assert_eq!(limit_text("max", 12e-9, "V/√Hz"), "≤ 12 nV/√Hz");
        assert_eq!(si_exact(1e6, "Hz"), "1 MHz");
    }
}
