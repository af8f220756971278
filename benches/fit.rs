//! Criterion benchmark of the fit to bench data: three parameters (emitter resistance, tail
//! current, saturation-current mismatch) of a memoryless pair fitted to 200 measured points
//! (4 temperatures × 50 amplitudes, gain, HD2 and HD3 each: 600 values) from a start 20 %
//! off. Two stages: β only (the reduced one-unknown solve) and β with the Early effect (the
//! nested solve). Figures are recorded in benches/README.md.

use criterion::{criterion_group, criterion_main, Criterion};
use linbudget::model::measurement::{
    BenchFigure, BenchPoint, FitParameter, FitSettings, Measurements,
};
use linbudget::solve::spectrum::FftCache;
use linbudget::study::fit::fit_stage;
use linbudget::{Drive, Mismatch, Plan, Stage, Transistor};
use rand::SeedableRng;
use rand_distr::{Distribution, Normal};
use std::hint::black_box;
use std::sync::Arc;

fn plan(transistor: Transistor) -> Plan {
    let truth = Stage::new("pair", 0.96e-3, 3.3e3)
        .emitter_resistance(180.0)
        .supply(5.0)
        .input_common_mode(1.5)
        .transistor(transistor)
        .mismatch(Mismatch::default().saturation_current(0.006));
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(7);
    let noise = Normal::new(0.0, 0.2).unwrap();
    let mut points = Vec::new();
    for t in [-40.0, 0.0, 40.0, 85.0] {
        let solved = truth.at(t).unwrap();
        for i in 0..50 {
            let a = 0.01 * 15f64.powf(i as f64 / 49.0);
            let tone = solved.tone(a, 1e3).unwrap();
            let values = [
                (BenchFigure::Gain, tone.gain_db()),
                (BenchFigure::Harmonic(2), tone.hd_dbc(2).unwrap()),
                (BenchFigure::Harmonic(3), tone.hd_dbc(3).unwrap()),
            ]
            .into_iter()
            .map(|(f, v)| (f, v + noise.sample(&mut rng)))
            .collect();
            points.push(BenchPoint {
                row: points.len() as u64 + 2,
                temperature_c: t,
                frequency_hz: 1e3,
                amplitude_v: a,
                corner: None,
                die: None,
                values,
            });
        }
    }
    let nominal = truth
        .clone()
        .emitter_resistance(150.0)
        .tail_current(1e-3)
        .mismatch(Mismatch::default());
    let parameter = |key: &str, from, to| FitParameter {
        key: key.into(),
        from,
        to,
    };
    Plan::new("bench", vec![nominal], Drive::new(vec![0.01]))
        .measurements(Measurements {
            stage: "pair".into(),
            file: "synthetic".into(),
            points,
        })
        .fit(FitSettings {
            parameters: vec![
                parameter("emitter_resistance", 50.0, 400.0),
                parameter("tail_current", 0.7e-3, 1.3e-3),
                parameter("mismatch.saturation_current", -0.03, 0.03),
            ],
            metrics: vec![
                BenchFigure::Gain,
                BenchFigure::Harmonic(2),
                BenchFigure::Harmonic(3),
            ],
            weights: Vec::new(),
        })
}

fn fits(c: &mut Criterion) {
    let mut group = c.benchmark_group("fit 3 parameters to 200 points");
    group.sample_size(10);
    for (label, transistor) in [
        ("beta only", Transistor::default().beta(110.0)),
        (
            "beta and Early effect",
            Transistor::default().beta(110.0).early_voltage(70.0),
        ),
    ] {
        let plan = plan(transistor);
        let settings = plan.fit.clone().unwrap();
        group.bench_function(label, |b| {
            b.iter(|| {
                let cache = Arc::new(FftCache::default());
                black_box(fit_stage(&plan, &settings, 0, &cache, &|_| {}).unwrap())
            })
        });
    }
    group.finish();
}

criterion_group!(benches, fits);
criterion_main!(benches);
