//! `points.csv`: one row per drive point, for spreadsheets and scripts.

use super::Report;

/// Renders the drive points as CSV (dB figures empty below the analysis floor).
pub fn points_csv(report: &Report) -> Result<Vec<u8>, csv::Error> {
    let mut writer = csv::Writer::from_writer(Vec::new());
    let orders: Vec<String> = report
        .points
        .first()
        .map(|p| p.harmonics.keys().cloned().collect())
        .unwrap_or_default();
    let mut sorted_orders = orders.clone();
    sorted_orders.sort_by_key(|k| {
        k.trim_start_matches("hd")
            .trim_end_matches("_dbc")
            .parse::<usize>()
            .unwrap_or(0)
    });
    let mut header = vec![
        "stage".to_string(),
        "temperature_c".into(),
        "frequency_hz".into(),
        "amplitude_v".into(),
        "fundamental_v".into(),
        "gain_db".into(),
    ];
    header.extend(sorted_orders.iter().cloned());
    header.extend(
        ["thd_dbc", "im3_dbc", "im2_dbc", "single_ended_hd2_dbc", "single_ended_hd3_dbc", "samples", "forward_active"]
            .map(String::from),
    );
    writer.write_record(&header)?;
    let cell = |v: Option<f64>| v.map(|x| format!("{x}")).unwrap_or_default();
    for p in &report.points {
        let mut row = vec![
            p.stage.clone(),
            p.temperature_c.to_string(),
            p.frequency_hz.to_string(),
            p.amplitude_v.to_string(),
            p.fundamental_v.to_string(),
            p.gain_db.to_string(),
        ];
        row.extend(sorted_orders.iter().map(|k| cell(p.harmonics.get(k).copied().flatten())));
        row.push(cell(p.thd_dbc));
        row.push(cell(p.im3_dbc.flatten()));
        row.push(cell(p.im2_dbc.flatten()));
        row.push(cell(p.single_ended_hd2_dbc));
        row.push(cell(p.single_ended_hd3_dbc));
        row.push(p.samples.to_string());
        row.push(p.forward_active.to_string());
        writer.write_record(&row)?;
    }
    writer.into_inner().map_err(|e| e.into_error().into())
}
