//! `points.csv`: one row per drive point — stage, process corner, temperature, frequency and
//! amplitude — for spreadsheets and scripts.

use super::{Harmonics, Report};

/// Streams the drive points as CSV into `sink` (buffered by the CSV writer; dB figures empty
/// below the analysis floor).
///
/// Numbers are written in their shortest round-trip form, so a script reading the table gets
/// back exactly the values of `report.json`.
pub fn write_points_csv<W: std::io::Write>(report: &Report, sink: W) -> Result<(), csv::Error> {
    let mut writer = csv::Writer::from_writer(sink);
    let highest = report
        .points
        .iter()
        .map(|p| p.harmonics.highest_order())
        .max()
        .unwrap_or(1);
    let mut header: Vec<String> = [
        "stage",
        "corner",
        "temperature_c",
        "frequency_hz",
        "amplitude_v",
        "fundamental_v",
        "gain_db",
    ]
    .map(String::from)
    .to_vec();
    header.extend((2..=highest).map(|k| Harmonics::field_name(k).into_owned()));
    header.extend(
        [
            "thd_dbc",
            "im3_dbc",
            "im2_dbc",
            "single_ended_hd2_dbc",
            "single_ended_hd3_dbc",
            "samples",
            "region",
            "collector_base_margin_v",
        ]
        .map(String::from),
    );
    writer.write_record(&header)?;
    let mut text = ryu::Buffer::new();
    let mut number = |writer: &mut csv::Writer<W>, value: Option<f64>| match value {
        Some(v) if v.is_finite() => writer.write_field(text.format_finite(v)),
        Some(v) => writer.write_field(v.to_string()),
        None => writer.write_field(""),
    };
    for p in &report.points {
        writer.write_field(&p.stage)?;
        writer.write_field(&p.corner)?;
        for value in [
            p.temperature_c,
            p.frequency_hz,
            p.amplitude_v,
            p.fundamental_v,
            p.gain_db,
        ] {
            number(&mut writer, Some(value))?;
        }
        for order in 2..=highest {
            number(&mut writer, p.harmonic(order))?;
        }
        for value in [
            p.thd_dbc,
            p.im3_dbc.flatten(),
            p.im2_dbc.flatten(),
            p.single_ended_hd2_dbc,
            p.single_ended_hd3_dbc,
        ] {
            number(&mut writer, value)?;
        }
        writer.write_field(p.samples.to_string())?;
        writer.write_field(p.region.name())?;
        number(&mut writer, Some(p.collector_base_margin_v))?;
        writer.write_record(None::<&[u8]>)?;
    }
    writer.flush()?;
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    fn point(corner: &str) -> super::super::PointRecord {
        serde_json::from_value(serde_json::json!({
            "stage": "s", "temperature_c": -40.0, "frequency_hz": 100.0,
            "amplitude_v": 0.02, "fundamental_v": 0.2, "gain_db": 20.0,
            "hd2_dbc": null, "hd3_dbc": -60.5, "thd_dbc": -60.5,
            "single_ended_fundamental_v": 0.1, "single_ended_hd2_dbc": null,
            "single_ended_hd3_dbc": -60.5, "samples": 64, "region": "forward-active",
            "collector_base_margin_v": 1.0, "min_current_fraction": 0.3, "corner": corner,
        }))
        .unwrap()
    }

    /// Points that differ only by corner are distinct rows: the key (stage, corner,
    /// temperature, frequency, amplitude) is unique, so a spreadsheet can tell them apart.
    #[test]
    fn every_row_names_its_corner() {
        let report: Report = serde_json::from_value(serde_json::json!({
            "plan": "p", "points": [], "intercepts": [], "monte_carlo": [], "yield": [],
            "budget": [], "sizing": [], "stages": [], "warnings": [], "met": true,
            "caution": "", "analysis": {"analysis_floor_dbc": -200.0, "thd_harmonics": 9,
            "convergence_db": 0.001, "steering_fraction": 0.95, "version": "0"}
        }))
        .unwrap();
        let report = Report {
            points: vec![point("typical"), point("slow"), point("fast")],
            ..report
        };
        let mut text = Vec::new();
        write_points_csv(&report, &mut text).unwrap();
        let mut reader = csv::Reader::from_reader(text.as_slice());
        let header = reader.headers().unwrap().clone();
        assert_eq!(&header[0], "stage");
        assert_eq!(&header[1], "corner");
        let keys: std::collections::BTreeSet<String> = reader
            .records()
            .map(|r| {
                let r = r.unwrap();
                (0..5)
                    .map(|i| r[i].to_owned())
                    .collect::<Vec<_>>()
                    .join(",")
            })
            .collect();
        assert_eq!(keys.len(), 3, "{keys:?}");
    }
}
