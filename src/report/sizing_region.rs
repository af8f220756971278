//! The tables of a sizing region (tail current and emitter resistance), shared by
//! `summary.md`, `report.md` and `report.html`: the map row by row with the line closing each
//! side, and the Pareto fronts of supply current against noise and distortion.

use super::table::{Cell, Table};
use super::RegionRecord;

fn fixed(value: Option<f64>, decimals: usize) -> String {
    match value {
        Some(v) if v.is_finite() => format!("{v:.decimals$}"),
        _ => "—".into(),
    }
}

/// A line's name as a table shows it (`HD3`, `input noise`, `—` for none).
pub fn line_name(metric: Option<&str>) -> String {
    match metric {
        None => "— (range end)".into(),
        Some("collector_base_margin") => "collector-base margin".into(),
        Some(other) => super::text::metric_label(other),
    }
}

/// The tables of a sizing region: the map row by row (where R_E may lie at each current and
/// which line closes each side), and the two Pareto fronts.
pub fn region_tables(region: &RegionRecord) -> Vec<(String, Table)> {
    let si = crate::units::format_si;
    let unit = |i: usize| region.units.get(i).map(String::as_str).unwrap_or("");
    let first = region.variables.first().map(String::as_str).unwrap_or("");
    let second = region.variables.get(1).map(String::as_str);
    let mut out = Vec::new();
    fn symbol(key: Option<&str>) -> &str {
        match key {
            Some("tail_current") => "I_tail",
            Some("emitter_resistance") => "R_E",
            Some(other) => other,
            None => "",
        }
    }
    let step = |i: usize| {
        region
            .grid
            .get(i)
            .filter(|g| g.len() > 1)
            .map(|g| (g[1] - g[0]).abs())
    };
    let usable_title = match (second, step(1)) {
        (Some(key), Some(step)) => format!(
            "usable grid values of {} (grid step {})",
            symbol(Some(key)),
            si(step, unit(1))
        ),
        _ => "holds".into(),
    };
    let mut rows = Table::new([
        (symbol(Some(first)), true),
        (usable_title.as_str(), false),
        ("closed below by", false),
        ("closed above by", false),
    ]);
    for row in &region.rows {
        let spans = if row.spans.is_empty() {
            format!(
                "no grid value (the best limited by {})",
                line_name(row.limiting_metric.as_deref())
            )
        } else {
            row.spans
                .iter()
                .map(|sp| match second {
                    Some(_) => format!("{} – {}", si(sp.low, unit(1)), si(sp.high, unit(1))),
                    None => "yes".into(),
                })
                .collect::<Vec<_>>()
                .join(", ")
        };
        let below: Vec<String> = row
            .spans
            .iter()
            .map(|sp| line_name(sp.below.as_deref()))
            .collect();
        let above: Vec<String> = row
            .spans
            .iter()
            .map(|sp| line_name(sp.above.as_deref()))
            .collect();
        rows.push(vec![
            si(row.value, unit(0)).into(),
            if row.spans.is_empty() {
                Cell::verdict(false, "", &spans)
            } else {
                spans.into()
            },
            below.join(", ").into(),
            above.join(", ").into(),
        ]);
    }
    out.push((
        format!(
            "The region row by row, at grid resolution: at each grid value of {}, the grid values of {} where every line holds, and the line failing just outside each side (a window narrower than one grid step shows as none; the recommended design is refined between grid values).",
            symbol(Some(first)),
            symbol(second)
        ),
        rows,
    ));
    if !region.noise_front.is_empty() {
        let mut table = Table::new([
            ("I_tail", true),
            ("R_E", true),
            ("input noise (nV/√Hz)", true),
            ("noise margin (dB)", true),
        ]);
        for p in &region.noise_front {
            table.push(vec![
                si(p.tail_current_a, "A").into(),
                si(p.emitter_resistance_ohm, "Ω").into(),
                format!("{:.3}", 1e9 * p.value).into(),
                fixed(p.margin, 2).into(),
            ]);
        }
        out.push((
            "Pareto front of supply current against input noise: at each grid current, the lowest-noise design meeting every other line; a design is listed when no lower current reaches its noise.".into(),
            table,
        ));
    }
    if let Some(front) = region
        .distortion_front
        .as_ref()
        .filter(|f| !f.points.is_empty())
    {
        let at = front
            .at_v
            .map(|a| format!(" at {}", si(a, "V")))
            .unwrap_or_default();
        let heading = format!(
            "{}{at} ({})",
            super::text::metric_label(&front.metric),
            front.unit
        );
        let mut table = Table::new([
            ("I_tail", true),
            ("R_E", true),
            (heading.as_str(), true),
            ("margin (dB)", true),
        ]);
        for p in &front.points {
            table.push(vec![
                si(p.tail_current_a, "A").into(),
                si(p.emitter_resistance_ohm, "Ω").into(),
                if front.unit == "V" {
                    si(p.value, "V")
                } else {
                    format!("{:.2}", p.value)
                }
                .into(),
                fixed(p.margin, 2).into(),
            ]);
        }
        out.push((
            format!(
                "Pareto front of supply current against the binding distortion line ({}{at}): at each grid current, the best design meeting every other line.",
                super::text::metric_label(&front.metric)
            ),
            table,
        ));
    }
    out
}
