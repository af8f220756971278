//! Criterion benchmarks of the single-tone sweep engine: the symmetric quarter-period path
//! against the general sample-by-sample path, for a degenerated and an undegenerated pair, and
//! the general forward-active solve (β, base resistance, the Early effect and a finite tail
//! resistance, as in `benches/sweep-4096-general.yaml`). Figures are recorded in
//! benches/README.md.

use criterion::{criterion_group, criterion_main, Criterion};
use linbudget::model::circuit::StageCircuit;
use linbudget::solve::memoryless::{single_tone, single_tone_general};
use linbudget::solve::spectrum::FftCache;
use linbudget::solve::transfer::StaticSolver;
use linbudget::Plan;
use std::hint::black_box;

fn solver(stage: &str) -> StaticSolver {
    let text = format!(
        "name: b\nstages:\n  - {{name: s, tail_current: 1 mA, load_resistance: 2k, {stage}}}\ndrive: {{amplitudes: [1 mV]}}\n"
    );
    let plan = Plan::from_yaml(&text, "bench.yaml").expect("bench plan");
    StaticSolver::new(StageCircuit::new(&plan.stages[0], 27.0))
}

/// 64 log-spaced amplitudes from 1 mV to 1 V, like the 4,096-point sweep thinned out.
fn amplitudes() -> Vec<f64> {
    (0..64)
        .map(|i| 1e-3 * 1e3f64.powf(i as f64 / 63.0))
        .collect()
}

fn sweeps(c: &mut Criterion) {
    let cache = FftCache::default();
    for (label, r_e) in [("degenerated", "200"), ("undegenerated", "0")] {
        let s = solver(&format!("emitter_resistance: {r_e}"));
        c.bench_function(&format!("sweep64/{label}/symmetric"), |b| {
            b.iter(|| {
                for a in amplitudes() {
                    black_box(single_tone(&s, &cache, a, 40).expect("tone"));
                }
            })
        });
        c.bench_function(&format!("sweep64/{label}/general"), |b| {
            b.iter(|| {
                for a in amplitudes() {
                    black_box(single_tone_general(&s, &cache, a, 40).expect("tone"));
                }
            })
        });
    }
}

fn general_solve(c: &mut Criterion) {
    let cache = FftCache::default();
    let s = solver(
        "emitter_resistance: 200, tail_resistance: 50k, supply: 5 V, input_common_mode: 1.5 V, transistor: {beta: 110, early_voltage: 70 V, base_resistance: 120}",
    );
    c.bench_function("sweep64/early-effect/general", |b| {
        b.iter(|| {
            for a in amplitudes() {
                black_box(single_tone(&s, &cache, a, 40).expect("tone"));
            }
        })
    });
}

criterion_group! {
    name = benches;
    config = Criterion::default().sample_size(10);
    targets = sweeps, general_solve
}
criterion_main!(benches);
