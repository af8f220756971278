//! Writes `specs/tide-logger-bench.csv`, the invented bench sweep of the demo plan
//! `specs/tide-logger-bench-fit.yaml`: a fictional tide-gauge logger's input pair as it might
//! come back from first silicon.
//!
//! The "silicon" is the plan's stage with a systematic error the fit should find — emitter
//! resistors 20 % above their drawn value, a tail current 4 % low and a saturation-current
//! mismatch of +0.6 % — measured with Gaussian bench noise: 0.1 dB on the gain, 0.3 dB on
//! HD2 and HD3, 20 µV on the offset. Harmonics below the analyser's −105 dBc floor are left
//! empty, and the offset is measured once per temperature (at the smallest drive).
//!
//! Run: `cargo run --release --example tide-logger-bench > specs/tide-logger-bench.csv`
//! (seeded: the same file every time).

use linbudget::{Drive, Mismatch, Plan, Stage, Transistor};
use rand::SeedableRng;
use rand_distr::{Distribution, Normal};

fn main() -> Result<(), Box<dyn std::error::Error>> {
    let silicon = Stage::new("input-pair", 0.96e-3, 3.3e3)
        .emitter_resistance(1.2 * 150.0)
        .supply(5.0)
        .input_common_mode(1.5)
        .transistor(
            Transistor::default()
                .beta(110.0)
                .early_voltage(70.0)
                .base_resistance(120.0),
        )
        .mismatch(Mismatch::default().saturation_current(0.006));
    let amplitudes: Vec<f64> = (0..16)
        .map(|i| 5e-3 * 40f64.powf(i as f64 / 15.0))
        .collect();
    let temperatures = vec![-20.0, 27.0, 85.0];
    let report = Plan::new(
        "tide-logger-silicon",
        vec![silicon],
        Drive::new(amplitudes.clone()),
    )
    .temperatures_c(temperatures)
    .evaluate()?;

    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(2026);
    let gain_noise = Normal::new(0.0, 0.1)?;
    let harmonic_noise = Normal::new(0.0, 0.3)?;
    let offset_noise = Normal::new(0.0, 20e-6)?;
    let analyser_floor_dbc = -105.0;
    println!(
        "# Invented bench sweep of the tide-logger input pair (see tide-logger-bench-generator.rs)"
    );
    println!("temperature_c,frequency_hz,amplitude_v,gain_db,hd2_dbc,hd3_dbc,offset_v,die");
    for point in &report.points {
        let measured = |level: Option<f64>, noise: f64| match level {
            Some(dbc) if dbc + noise > analyser_floor_dbc => format!("{:.2}", dbc + noise),
            _ => String::new(),
        };
        let gain = point.gain_db + gain_noise.sample(&mut rng);
        let hd2 = measured(point.harmonic(2), harmonic_noise.sample(&mut rng));
        let hd3 = measured(point.harmonic(3), harmonic_noise.sample(&mut rng));
        let offset = if point.amplitude_v == amplitudes[0] {
            let stage = report
                .stages
                .iter()
                .find(|s| s.temperature_c == point.temperature_c)
                .ok_or("no operating point")?;
            format!(
                "{:.3} mV",
                1e3 * (stage.input_offset_v + offset_noise.sample(&mut rng))
            )
        } else {
            String::new()
        };
        println!(
            "{},{} Hz,{:.3} mV,{gain:.2},{hd2},{hd3},{offset},A7",
            point.temperature_c,
            point.frequency_hz,
            1e3 * point.amplitude_v
        );
    }
    Ok(())
}
