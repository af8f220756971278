//! `points.csv`: one row per drive point, for spreadsheets and scripts.

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
