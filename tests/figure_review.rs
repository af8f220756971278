//! What a reviewer checks on the transfer, two-tone, sizing, spectrum and harmonics figures
//! of stages that saturate or rest in high-level injection: each figure's key says what is
//! drawn and is true to report.json. The checks read the figures' prepared data (axes, legend
//! entries, verdict rows, notes) and the report, not pixels.

use linbudget::plots::key::Swatch;
use linbudget::plots::{self, Sketch};
use linbudget::report::{Region, Report, StageRecord};
use linbudget::run::{run, RunOptions, DEFAULT_MAX_WORK};
use std::fs;
use std::sync::OnceLock;

/// A degenerated pair on a low supply that saturates before its steering edges (and stops
/// biasing at large R_E), and a pair biased past its forward knee current: an IM3 line between two sweep
/// amplitudes, a collector-base margin line in volts, an HD2 line a matched pair meets by a
/// margin far off any dB axis, and sizing. No Monte Carlo (kept fast; see the yield plan).
const REGIONS_PLAN: &str = "name: gannet-figure-review
temperatures_c: [-10, 60]
stages:
  - name: clip-pair
    tail_current: 1 mA
    load_resistance: 2.2k
    emitter_resistance: 400
    supply: 3.3 V
    input_common_mode: 1.9 V
    transistor: {beta: 110, base_resistance: 150}
  - name: hot-pair
    tail_current: 1 mA
    load_resistance: 1k
    emitter_resistance: 40
    supply: 5 V
    input_common_mode: 2.5 V
    transistor: {beta: 90, forward_knee_current: 0.2 mA, base_resistance: 100}
drive:
  amplitudes: [5 mV, 40 mV, 150 mV]
  frequencies: [10 kHz]
  two_tone_spacing: 1 kHz
budget:
  - {metric: hd2, at: 40 mV, max: -60}
  - {metric: hd3, at: 40 mV, max: -40}
  - {metric: im3, at: 80 mV, max: -30}
  - {metric: collector_base_margin, at: 40 mV, min: 200 mV}
  - {metric: gain, min: 10}
sizing:
  emitter_resistance: {from: 0, to: 2k}
";

/// A forward-active pair with mismatch, a Monte Carlo population and a yield line.
const YIELD_PLAN: &str = "name: gannet-yield-review
temperatures_c: [27]
stages:
  - name: quiet-pair
    tail_current: 400 uA
    load_resistance: 5k
    emitter_resistance: 100
    supply: 5 V
    input_common_mode: 2.5 V
    transistor: {beta: 120, base_resistance: 100}
    mismatch_sigma: {saturation_current: 4%}
drive:
  amplitudes: [2 mV, 20 mV]
  frequencies: [1 kHz]
monte_carlo: {runs: 40, seed: 7}
budget:
  - {metric: hd2, at: 20 mV, max: -75}
  - {metric: hd3, at: 20 mV, max: -50}
  - {metric: yield, min: 99.9%}
sizing:
  emitter_resistance: {from: 0, to: 1k}
";

/// The regions plan's report, run once for every test of this file.
fn regions() -> &'static Report {
    static REPORT: OnceLock<Report> = OnceLock::new();
    REPORT.get_or_init(|| report_of(REGIONS_PLAN))
}

fn report_of(plan_text: &str) -> Report {
    let dir = tempfile::tempdir().unwrap();
    let plan = dir.path().join("plan.yaml");
    fs::write(&plan, plan_text).unwrap();
    let options = RunOptions {
        plan,
        out: dir.path().join("out"),
        json: false,
        quiet: true,
        max_work: DEFAULT_MAX_WORK,
        figures: false,
        as_planned: false,
        overrides: Vec::new(),
    };
    run(&options, &|_| {}).expect("the plan runs").report
}

fn sketch<'a>(sketches: &'a [Sketch], stem: &str) -> &'a Sketch {
    sketches
        .iter()
        .find(|s| s.stem() == stem)
        .unwrap_or_else(|| panic!("a figure {stem}"))
}

fn labels(sketch: &Sketch) -> Vec<String> {
    sketch
        .key()
        .legend
        .iter()
        .map(|e| e.label.clone())
        .collect()
}

fn stage_record<'a>(report: &'a Report, stage: &str, temperature_c: f64) -> &'a StageRecord {
    report
        .stages
        .iter()
        .find(|s| s.stage == stage && s.temperature_c == temperature_c)
        .unwrap()
}

/// A temperature as the figures write it: `−10 °C`.
fn degrees(t: f64) -> String {
    format!("{t} °C").replace('-', "−")
}

/// Linear interpolation of `(x, y)` samples (ascending x) at `x`.
fn interpolate(samples: &[(f64, f64)], x: f64) -> f64 {
    let k = samples
        .windows(2)
        .position(|w| w[0].0 <= x && x <= w[1].0)
        .expect("x inside the samples");
    let (a, b) = (samples[k], samples[k + 1]);
    a.1 + (x - a.0) / (b.0 - a.0) * (b.1 - a.1)
}

#[test]
fn transfer_steering_edges_lie_on_a_drawn_curve() {
    let report = regions();
    let sketches = plots::sketches(report);
    let record = stage_record(report, "clip-pair", -10.0);
    let split: Vec<(f64, f64)> = record
        .transfer
        .iter()
        .map(|t| (t.input_v, t.emitter_split))
        .collect();
    let collector: Vec<(f64, f64)> = record
        .transfer
        .iter()
        .map(|t| (t.input_v, t.normalised_current))
        .collect();
    // 95 % steering (the report's definition) is an emitter split of 2·0.95 − 1 = 0.9 at
    // each edge; the samples are 1/200 of the span apart, so interpolation is good to 2e-3.
    let level = 2.0 * report.analysis.steering_fraction - 1.0;
    for (edge, sign) in [(record.steering_low_v, -1.0), (record.steering_high_v, 1.0)] {
        let at = interpolate(&split, edge);
        assert!((at - sign * level).abs() < 2e-3, "split {at} at {edge} V");
    }
    // Where both sides are forward-active (no Early voltage, an ideal tail), each collector
    // current is α = β/(β + 1) of its emitter current, and the emitters share the tail
    // current: (I_CP − I_CM)/I_tail = α·(I_EP − I_EM)/(I_EP + I_EM) (common practice).
    let alpha = 110.0 / 111.0;
    let mut forward_active = 0;
    for t in &record.transfer {
        if t.base_collector_v.iter().all(|v| *v < -0.1) {
            forward_active += 1;
            assert!(
                (t.normalised_current - alpha * t.emitter_split).abs() < 1e-4,
                "at {} V: {} vs α·{}",
                t.input_v,
                t.normalised_current,
                t.emitter_split
            );
        }
    }
    assert!(forward_active > 10);
    // The stage saturates: the collector curve falls short of ±0.9 at the steering edges, so
    // the figure draws the split the edges are defined on, and its key says so.
    let short_of_level = level - interpolate(&collector, record.steering_high_v);
    assert!(short_of_level > 0.05, "{short_of_level}");
    let transfer = sketch(&sketches, "transfer-clip-pair");
    let keys = labels(transfer);
    assert!(
        keys.iter().any(
            |l| l.starts_with("emitter-current split (I_EP − I_EM)/(I_EP + I_EM)")
                && l.contains("steering edges are where it crosses ±0.9")
        ),
        "{keys:?}"
    );
    assert!(
        keys.iter()
            .any(|l| l.contains("95 % of the emitter current")),
        "{keys:?}"
    );
}

#[test]
fn an_im3_line_between_sweep_amplitudes_is_drawn_and_said_to_be() {
    let report = regions();
    let sketches = plots::sketches(report);
    let two_tone = sketch(&sketches, "two-tone-clip-pair");
    assert!(two_tone
        .key()
        .verdicts
        .iter()
        .any(|v| v.line == "IM3 ≤ −30 dBc at 80 mV"));
    let notes = two_tone.key().notes.join(" ");
    assert!(
        notes.contains("The IM3 line at 80 mV is not a sweep amplitude")
            && notes.contains("between 40 mV and 150 mV"),
        "{notes}"
    );
    // The report holds the value solved at 80 mV, which the marker shows.
    assert!(report
        .budget
        .iter()
        .any(|b| b.metric == "im3" && b.at_v == Some(0.08) && b.value.is_some()));
}

#[test]
fn sizing_keeps_volts_off_the_db_axis_and_names_what_binds() {
    let report = regions();
    let sketches = plots::sketches(report);
    let sizing = sketch(&sketches, "sizing-clip-pair");
    // A margin in volts has an axis of its own (the fourth, after R_E, dB and gain), labelled
    // at both ends, and its key entry says where it is drawn.
    assert_eq!(sizing.axes().len(), 4);
    let volts_axis = &sizing.axes()[3];
    assert!(volts_axis.low < 0.0 && volts_axis.high > 0.0);
    let legend = &sizing.key().legend;
    let volts_entry = legend
        .iter()
        .find(|e| e.label.starts_with("collector base margin"))
        .expect("a collector-base margin entry");
    assert!(
        volts_entry.label.contains("lower panel"),
        "{}",
        volts_entry.label
    );
    // Its swatch is not a dB line's (it used to share the THD colour).
    for other in legend.iter().filter(|e| e.label.contains("dBc at")) {
        assert_ne!(other.swatch, volts_entry.swatch, "{}", other.label);
    }
    // A matched pair's HD2 is below the analysis floor at every R_E: its margin (limit less
    // floor, 140 dB) is off the dB axis, and the key says so rather than showing a phantom.
    let hd2 = legend
        .iter()
        .find(|e| e.label.starts_with("HD2 margin"))
        .unwrap();
    assert!(hd2.label.contains("off scale: above"), "{}", hd2.label);
    // Each temperature's row names the binding line's own margin in its own unit.
    for record in report.sizing.iter().filter(|s| s.stage == "clip-pair") {
        let margin = record.binding_margin.expect("a binding margin");
        // Sizing refines the least value until the binding margin is within about 1e-9 dB
        // of the guard band (zero here): the margin named is that line's, not another's.
        assert!(margin.abs() < 1e-6, "{margin}");
        let row = sizing
            .key()
            .verdicts
            .iter()
            .find(|v| v.line.starts_with(&degrees(record.temperature_c)))
            .expect("a row per temperature");
        let name = linbudget::report::text::metric_label(&record.binding_metric);
        assert!(
            row.detail.starts_with(&format!("binds: {name}")),
            "{}",
            row.detail
        );
        // The collector-base margin binds (in volts) while every dB line has room: the row
        // gives that margin in mV and the least dB margin as what it is.
        assert_eq!(record.binding_metric, "collector_base_margin");
        assert_eq!(record.binding_margin_unit, "V");
        assert!(
            row.detail.starts_with(&format!("binds: {name}, 0.0 mV")),
            "{}",
            row.detail
        );
        assert!(
            row.detail.contains(&format!(
                "least dB margin {} dB",
                format!("{:.1}", record.best_margin).replace('-', "−")
            )),
            "{}",
            row.detail
        );
    }
}

#[test]
fn shading_where_the_stage_cannot_bias_holds_no_curve() {
    let report = regions();
    let sketches = plots::sketches(report);
    let sizing = sketch(&sketches, "sizing-clip-pair");
    let records: Vec<_> = report
        .sizing
        .iter()
        .filter(|s| s.stage == "clip-pair")
        .collect();
    // Each temperature's first value that cannot bias; the shading starts at the last.
    let onsets: Vec<f64> = records
        .iter()
        .map(|r| {
            r.scan
                .iter()
                .find(|s| s.gain_db.is_none())
                .expect("a value too large to bias")
                .emitter_resistance_ohm
        })
        .collect();
    let shaded_from = onsets.iter().copied().fold(f64::NEG_INFINITY, f64::max);
    let entry = sizing
        .key()
        .legend
        .iter()
        .find(|e| e.label.contains("no temperature can bias"))
        .expect("a shading entry");
    let words = entry.label.clone();
    let named: f64 = words
        .trim_start_matches("from ")
        .split(' ')
        .next()
        .unwrap()
        .parse()
        .unwrap();
    let unit_scale = if words.contains(" kΩ") { 1e3 } else { 1.0 };
    assert!(
        (named * unit_scale - shaded_from).abs() <= 0.01 * shaded_from,
        "{words} vs {shaded_from}"
    );
    // No temperature has a curve inside the shading.
    for r in &records {
        assert!(r
            .scan
            .iter()
            .filter(|s| s.emitter_resistance_ohm >= shaded_from)
            .all(|s| s.margins.iter().all(|m| m.is_none())));
    }
    // Where a temperature stops biasing before that, the key names it.
    let stops = labels(sizing)
        .into_iter()
        .find(|l| l.starts_with("stops biasing"))
        .expect("the per-temperature onsets");
    assert!(
        stops.contains("−10 °C") && stops.contains("60 °C"),
        "{stops}"
    );
}

#[test]
fn figures_mark_the_operating_region_of_what_they_draw() {
    let report = regions();
    let sketches = plots::sketches(report);
    // Gummel–Poon knee: transport falls by q_b = ½(1 + √(1 + 4·I_CC/I_KF)); at 0.5 mA per
    // side against I_KF = 0.2 mA, q_b ≈ 2.2, far past the 1 % that names high injection, so
    // the hot pair is in high injection at rest; the clip pair (no knee) is forward-active.
    for t in [-10.0, 60.0] {
        assert_eq!(
            stage_record(report, "hot-pair", t).rest_region,
            Region::HighInjection
        );
        assert_eq!(
            stage_record(report, "clip-pair", t).rest_region,
            Region::ForwardActive
        );
    }
    let harmonics = labels(sketch(&sketches, "harmonics-hot-pair"));
    assert!(
        harmonics
            .iter()
            .any(|l| l.starts_with("high-level injection at every amplitude: already at bias")),
        "{harmonics:?}"
    );
    // The sized design saturates at a drive it was judged at: its row says so, as the record.
    let sizing = sketch(&sketches, "sizing-clip-pair");
    for record in report.sizing.iter().filter(|s| s.stage == "clip-pair") {
        let saturates = record.collector_base_margin_v.unwrap() < 0.0;
        let row = sizing
            .key()
            .verdicts
            .iter()
            .find(|v| v.line.starts_with(&degrees(record.temperature_c)))
            .unwrap();
        assert_eq!(
            row.detail.contains("saturates"),
            saturates,
            "{}",
            row.detail
        );
    }
    assert!(labels(sizing).iter().any(|l| l.starts_with("top bars")));
    // The spectrum and two-tone figures of a saturating drive say so.
    let spectrum = sketch(&sketches, "spectrum-clip-pair");
    let spectrum_points: Vec<_> = report
        .points
        .iter()
        .filter(|p| p.stage == "clip-pair")
        .collect();
    let notes = spectrum.key().notes.join(" ");
    let drawn_saturates = spectrum_points
        .iter()
        .filter(|p| {
            spectrum
                .title()
                .contains(&linbudget::report::text::si_exact(p.amplitude_v, "V"))
        })
        .any(|p| p.region == Region::Saturating);
    assert_eq!(notes.contains("saturating"), drawn_saturates, "{notes}");
    let two_tone = sketch(&sketches, "two-tone-clip-pair");
    let saturating_two_tone = spectrum_points
        .iter()
        .any(|p| p.two_tone_region == Some(Region::Saturating));
    assert!(saturating_two_tone);
    let entry = two_tone
        .key()
        .legend
        .iter()
        .find(|e| e.label.contains("saturating"))
        .expect("a saturation mark on the two-tone figure");
    // Not a band: a band would look like the fit region's.
    assert!(matches!(entry.swatch, Swatch::Line { .. }));
}

#[test]
fn the_sizing_figure_shows_the_yield_verdict_of_the_built_design() {
    let report = report_of(YIELD_PLAN);
    let sketches = plots::sketches(&report);
    let sizing = sketch(&sketches, "sizing-quiet-pair");
    let built = report
        .budget
        .iter()
        .find(|b| b.stage == "quiet-pair@sized" && b.metric == "yield")
        .expect("the built design's yield check");
    let row = sizing
        .key()
        .verdicts
        .iter()
        .find(|v| v.line.starts_with("yield ≥ 99.9 %"))
        .expect("a yield row");
    assert_eq!(row.pass, built.pass);
    assert!(row.line.contains("built R_E"), "{}", row.line);
    assert!(sizing
        .key()
        .notes
        .iter()
        .any(|n| n.contains("yield is judged on “quiet-pair@sized”")));
}
