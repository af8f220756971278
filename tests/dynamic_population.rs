//! Monte Carlo of stages with capacitance, and order independence of the dynamic engine.

use linbudget::Plan;
use serde_json::Value;

/// A stage with every capacitance and a drawn saturation-current and load mismatch
/// (invented values).
fn plan(capacitive: bool, runs: u64, seed: u64, frequencies: &str, amplitudes: &str) -> String {
    let charges = if capacitive {
        "    load_capacitance: 0.5 pF\n    tail_capacitance: 1 pF\n"
    } else {
        ""
    };
    let junctions = if capacitive {
        "      transit_time: 10 ps\n      emitter_junction_capacitance: 80 fF\n      collector_junction_capacitance: 40 fF\n"
    } else {
        ""
    };
    // No population when `runs` is 0.
    let population = if runs > 0 {
        format!("monte_carlo:\n  runs: {runs}\n  seed: {seed}\n")
    } else {
        String::new()
    };
    format!(
        "name: population
temperatures_c: [27]
stages:
  - name: pair
    tail_current: 2 mA
    load_resistance: 1k
    emitter_resistance: 50
    source_resistance: 50
{charges}    transistor:
      saturation_current: 1e-16
      beta: 100
      base_resistance: 80
{junctions}    mismatch_sigma:
      saturation_current: 0.02
      load_resistance: 0.005
drive:
  amplitudes: {amplitudes}
  frequencies: {frequencies}
{population}"
    )
}

fn report(yaml: &str) -> Value {
    let plan = Plan::from_yaml(yaml, "population.yaml").expect("valid plan");
    serde_json::to_value(plan.evaluate().expect("evaluates")).expect("serialises")
}

fn median(report: &Value, metric: &str, frequency_hz: f64) -> f64 {
    report["monte_carlo"]
        .as_array()
        .expect("a population")
        .iter()
        .find(|r| r["metric"] == metric && r["frequency_hz"].as_f64() == Some(frequency_hz))
        .and_then(|r| r["median"].as_f64())
        .unwrap_or_else(|| panic!("no {metric} median at {frequency_hz} Hz"))
}

#[test]
fn capacitive_population_at_low_frequency_matches_the_static_offset_law() {
    // Reference: the memoryless population of the same stage (capacitances removed), whose
    // runs are solved with the exact static transfer and its offset law φT·ln(1 + δ). At
    // 1 kHz every charge current is ~10⁻⁶ of the resistive ones, so the two populations —
    // drawn with the same dies — must agree; 0.2 dB on the median HD2 (the stated bar).
    let capacitive = report(&plan(true, 200, 5, "[1 kHz]", "[50 mV]"));
    let memoryless = report(&plan(false, 200, 5, "[1 kHz]", "[50 mV]"));
    for metric in ["hd2", "hd3"] {
        let (a, b) = (
            median(&capacitive, metric, 1e3),
            median(&memoryless, metric, 1e3),
        );
        assert!((a - b).abs() < 0.2, "{metric}: {a} vs {b} dBc");
    }
    // The population is not degenerate: mismatch gives a finite HD2 well above the floor.
    assert!(median(&capacitive, "hd2", 1e3) > -120.0);
}

#[test]
fn capacitive_population_is_the_same_for_the_same_seed_and_differs_for_another() {
    let yaml = plan(true, 40, 9, "[1 kHz, 20 MHz]", "[50 mV]");
    let first = report(&yaml);
    let second = report(&yaml);
    assert_eq!(first["monte_carlo"], second["monte_carlo"]);
    assert_eq!(first["yield"], second["yield"]);
    let other = report(&plan(true, 40, 10, "[1 kHz, 20 MHz]", "[50 mV]"));
    assert_ne!(first["monte_carlo"], other["monte_carlo"]);
    // At 20 MHz the population is its own (the capacitances shift HD3 away from the 1 kHz
    // value): the records are per frequency, not copies.
    assert_ne!(
        median(&first, "hd3", 1e3),
        median(&first, "hd3", 20e6),
        "per-frequency records"
    );
}

#[test]
fn figures_do_not_depend_on_the_order_of_the_drive_points() {
    // Warm starts and caches must never change a figure beyond the stated 0.002 dB: the same
    // points listed in two orders give the same records.
    let forward = report(&plan(
        true,
        0,
        1,
        "[1 MHz, 20 MHz]",
        "[5 mV, 50 mV, 150 mV]",
    ));
    let reverse = report(&plan(
        true,
        0,
        1,
        "[20 MHz, 1 MHz]",
        "[150 mV, 50 mV, 5 mV]",
    ));
    let key = |r: &Value| {
        (
            r["frequency_hz"].as_f64().unwrap().to_bits(),
            r["amplitude_v"].as_f64().unwrap().to_bits(),
        )
    };
    let points = |report: &Value| {
        let mut v: Vec<Value> = report["points"].as_array().unwrap().clone();
        v.sort_by_key(key);
        v
    };
    let (a, b) = (points(&forward), points(&reverse));
    assert_eq!(a.len(), 6);
    assert_eq!(a.len(), b.len());
    for (p, q) in a.iter().zip(&b) {
        for field in ["gain_db", "hd2_dbc", "hd3_dbc", "hd5_dbc", "thd_dbc"] {
            match (p[field].as_f64(), q[field].as_f64()) {
                (Some(x), Some(y)) => assert!((x - y).abs() <= 0.002, "{field}: {x} vs {y}"),
                (x, y) => assert_eq!(x, y, "{field}"),
            }
        }
    }
    let intercepts = |report: &Value| {
        let mut v: Vec<(u64, f64)> = report["intercepts"]
            .as_array()
            .unwrap()
            .iter()
            .map(|r| {
                (
                    r["frequency_hz"].as_f64().unwrap().to_bits(),
                    r["p1db_v"].as_f64().unwrap(),
                )
            })
            .collect();
        v.sort_by_key(|p| p.0);
        v
    };
    for ((_, x), (_, y)) in intercepts(&forward).iter().zip(intercepts(&reverse).iter()) {
        assert!((20.0 * (x / y).log10()).abs() <= 0.002, "P1dB {x} vs {y}");
    }
}
