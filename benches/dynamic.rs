//! Time of one drive point's periodic steady state (single tone and two tones) for a stage
//! with every capacitance, at 10 MHz.

use criterion::{criterion_group, criterion_main, Criterion};
use linbudget::model::circuit::StageCircuit;
use linbudget::solve::dynamic::DynamicEngine;
use linbudget::solve::response::ResponseEngine;
use linbudget::solve::spectrum::FftCache;
use linbudget::Plan;
use std::hint::black_box;
use std::sync::Arc;

const PLAN: &str = "name: bench
temperatures_c: [27]
stages:
  - name: wideband
    tail_current: 2 mA
    load_resistance: 1k
    emitter_resistance: 50
    source_resistance: 50
    load_capacitance: 0.5 pF
    tail_capacitance: 1 pF
    transistor:
      saturation_current: 1e-16
      beta: 100
      early_voltage: 40 V
      base_resistance: 80
      transit_time: 10 ps
      emitter_junction_capacitance: 80 fF
      collector_junction_capacitance: 40 fF
drive:
  amplitudes: [50 mV]
  frequencies: [10 MHz]
";

fn steady_state(c: &mut Criterion) {
    let plan = Plan::from_yaml(PLAN, "bench.yaml").expect("bench plan");
    let circuit = StageCircuit::new(&plan.stages[0], 27.0);
    let engine = DynamicEngine::new(circuit, Arc::new(FftCache::default()));
    let mut group = c.benchmark_group("dynamic_steady_state");
    group.sample_size(20);
    group.bench_function("tone_50mV_10MHz_9_harmonics", |b| {
        b.iter(|| engine.tone(black_box(0.05), 10e6, 9).expect("solves"))
    });
    group.bench_function("tone_50mV_10MHz_40_harmonics", |b| {
        b.iter(|| engine.tone(black_box(0.05), 10e6, 40).expect("solves"))
    });
    group.bench_function("two_tone_50mV_10MHz_1MHz_spacing", |b| {
        b.iter(|| engine.two_tone(black_box(0.05), 10e6, 1e6).expect("solves"))
    });
    group.finish();
}

criterion_group!(benches, steady_state);
criterion_main!(benches);
