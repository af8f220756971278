//! Saturation in the budget: a line whose amplitude or answer falls in saturation is judged on
//! the saturated figure and its record says so; the collector-base margin is a budget line of
//! its own, honoured by sizing; Monte Carlo counts the runs that saturate.

use linbudget::report::Region;
use linbudget::Plan;

/// A 3.3 V stage whose collectors sit 0.75 V above the bases at zero input: a 150 mV drive
/// forward-biases the collector-base junction of the side it turns on.
const LOW_SUPPLY: &str = "name: low-supply
stages:
  - name: pair
    tail_current: 1 mA
    load_resistance: 2.2k
    supply: 3.3 V
    input_common_mode: 1.45 V
    transistor: {beta: 100, reverse_beta: 2}
drive:
  amplitudes: [5 mV, 150 mV]
";

fn evaluate(text: &str) -> linbudget::Report {
    Plan::from_yaml(text, "plan.yaml")
        .expect("a valid plan")
        .evaluate()
        .expect("it evaluates")
}

/// The budget's HD3 at a saturating amplitude is the clipped waveform's (the same figure as the
/// drive point's, well above the unsaturated pair's tanh value), with a negative collector-base
/// margin in its record; P1dB found in saturation carries its region too, and a
/// collector_base_margin line fails where the margin is negative.
#[test]
fn lines_in_saturation_are_judged_on_the_saturated_figure_and_say_so() {
    let report = evaluate(&format!(
        "{LOW_SUPPLY}budget:
  - {{metric: hd3, at: 150 mV, max: -40}}
  - {{metric: hd3, at: 5 mV, max: -40}}
  - {{metric: p1db, min: 10 mV}}
  - {{metric: collector_base_margin, at: 150 mV, min: 0.2 V}}
  - {{metric: collector_base_margin, at: 5 mV, min: 0.2 V}}
"
    ));
    let point = |a: f64| {
        report
            .points
            .iter()
            .find(|p| p.amplitude_v == a)
            .expect("the drive point")
    };
    let (hard, soft) = (point(0.15), point(0.005));
    assert_eq!(hard.region, Region::Saturating);
    assert!(hard.collector_base_margin_v < 0.0);
    assert_eq!(soft.region, Region::ForwardActive);
    assert!(soft.collector_base_margin_v > 0.2);

    let hd3 = &report.budget[0];
    assert_eq!(hd3.region, Region::Saturating);
    assert!(hd3.collector_base_margin_v < 0.0);
    assert_eq!(hd3.value, hard.harmonic(3));
    // The unsaturated pair's HD3 at 150 mV is 20·log10 of the tanh series' third-harmonic
    // ratio, about −27 dBc at v̂ = 5.8 φT (textbook large-signal pair, from memory); clipping
    // raises it. The margin and verdict follow the saturated figure.
    assert!(hd3.value.unwrap() > -27.0 && !hd3.pass);
    assert_eq!(report.budget[1].region, Region::ForwardActive);
    assert!(report.budget[1].pass);

    let p1db = &report.budget[2];
    let intercept = &report.intercepts[0];
    assert_eq!(p1db.value, intercept.p1db_v);
    assert_eq!(p1db.region, intercept.p1db_region);
    assert_eq!(
        p1db.collector_base_margin_v,
        intercept.p1db_collector_base_margin_v
    );

    let (margin_hard, margin_soft) = (&report.budget[3], &report.budget[4]);
    assert_eq!(margin_hard.margin_unit, "V");
    assert_eq!(margin_hard.value, Some(hard.collector_base_margin_v));
    assert!(!margin_hard.pass && margin_hard.margin.unwrap() < -0.2);
    assert!(margin_soft.pass);
    assert!((margin_soft.margin.unwrap() - (soft.collector_base_margin_v - 0.2)).abs() < 1e-12);
    assert!(!report.met());
}

/// Sizing honours a collector_base_margin line: more emitter degeneration lowers the swing of
/// the collector currents at a given drive, so the least R_E meeting the margin is where the
/// margin crosses its limit; every trial records its least margin.
#[test]
fn sizing_meets_a_collector_base_margin_line() {
    let report = evaluate(&format!(
        "{LOW_SUPPLY}budget:
  - {{metric: collector_base_margin, at: 150 mV, min: 0.1 V}}
sizing:
  emitter_resistance: {{from: 0, to: 2k}}
"
    ));
    let sizing = &report.sizing[0];
    assert!(sizing.met, "{sizing:?}");
    assert_eq!(sizing.binding_metric, "collector_base_margin");
    let least = sizing.collector_base_margin_v.unwrap();
    assert!((0.1..0.12).contains(&least), "least margin {least}");
    for trial in &sizing.scan {
        // Values whose tail node would sit below the tail source's compliance cannot bias:
        // they are not solved and carry no margin.
        let Some(margin) = trial.margins[0] else {
            assert!(trial.tail_headroom_v.unwrap() < 0.0, "{trial:?}");
            continue;
        };
        let recorded = trial.collector_base_margin_v.unwrap();
        assert!((margin - (recorded - 0.1)).abs() < 1e-12);
        if trial.emitter_resistance_ohm < sizing.emitter_resistance_ohm.unwrap() {
            assert!(margin < 0.0, "{trial:?}");
        }
    }
}

/// Monte Carlo: every run records its collector-base margin; a stage on the edge of
/// saturation counts the runs that cross it, and the margin's distribution is reported.
#[test]
fn monte_carlo_counts_saturating_runs() {
    let report = evaluate(
        "name: population
stages:
  - name: pair
    tail_current: 1 mA
    load_resistance: 2.2k
    supply: 3.3 V
    input_common_mode: 1.58 V
    mismatch_sigma: {load_resistance: 3%}
drive:
  amplitudes: [30 mV]
monte_carlo: {runs: 200, seed: 3}
",
    );
    let runs = &report.yield_[0];
    let margins = report
        .monte_carlo
        .iter()
        .find(|m| m.metric == "collector_base_margin")
        .expect("the margin's distribution");
    assert_eq!(margins.unit, "V");
    // At 30 mV the on side carries I·(1 + tanh(v̂/2φT))/2 ≈ 0.76 mA (tanh law of the pair,
    // common practice), so its collector sits near 3.3 V − 2.2 kΩ·0.76 mA ≈ 1.62 V, 44 mV above
    // its peak base voltage of 1.595 V. The mismatch draws move the P side's load only (the M
    // side keeps the nominal margin): a 3 % σ of R_L is ±50 mV of collector voltage, so about
    // a fifth of the runs saturate (normal tail beyond 0.9 σ).
    let (p05, p95) = (margins.p05.unwrap(), margins.p95.unwrap());
    assert!(p05 < 0.0 && p95 > 0.0, "margin spread {p05}…{p95}");
    assert!(
        runs.saturating_runs > 10 && runs.saturating_runs < 190,
        "{runs:?}"
    );
    assert!(runs.least_collector_base_margin_v <= p05);
}
