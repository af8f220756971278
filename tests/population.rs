//! Corners, mismatch Monte Carlo and temperature laws checked against outside references.

use linbudget::measure::small_signal::offset_voltage;
use linbudget::model::circuit::StageCircuit;
use linbudget::solve::transfer::StaticSolver;
use linbudget::study::montecarlo::{draw_mismatch, quantile, run_rng, wilson_interval, Z_95};
use linbudget::{Mismatch, Plan};
use std::f64::consts::{PI, TAU};

/// φT = kT/q with the exact SI constants (CODATA 2018: k = 1.380649e-23 J/K,
/// q = 1.602176634e-19 C; from memory).
fn thermal_voltage(temperature_c: f64) -> f64 {
    1.380_649e-23 * (temperature_c + 273.15) / 1.602_176_634e-19
}

/// Standard normal CDF via erfc (Abramowitz & Stegun 26.2.29: Φ(x) = erfc(−x/√2)/2).
fn normal_cdf(x: f64) -> f64 {
    0.5 * puruspe::erfc(-x / std::f64::consts::SQRT_2)
}

#[test]
fn saturation_current_mismatch_gives_the_exponential_law_offset() {
    // Exact for the exponential law: equal collector currents need V_BE,M − V_BE,P = φT·ln(1+δ),
    // and with matched R_E and β the resistive drops are equal at balance.
    for (emitter, delta) in [(0.0f64, 0.01f64), (0.0, -0.05), (200.0, 0.2), (500.0, -0.3)] {
        let text = format!(
            "name: o\nstages:\n  - {{name: a, tail_current: 1 mA, load_resistance: 2k, emitter_resistance: {emitter}, mismatch: {{saturation_current: {delta}}}}}\ndrive: {{amplitudes: [1 mV]}}\n"
        );
        let plan = Plan::from_yaml(&text, "o.yaml").unwrap();
        let solver = StaticSolver::new(StageCircuit::new(&plan.stages[0], 27.0));
        let offset = offset_voltage(&solver).unwrap();
        let expected = -thermal_voltage(27.0) * (1.0 + delta).ln();
        assert!(
            (offset - expected).abs() < 1e-9 * thermal_voltage(27.0) + 1e-9 * expected.abs(),
            "R_E {emitter}, δ {delta}: {offset:e} vs {expected:e}"
        );
    }
}

#[test]
fn mismatch_draws_have_the_normal_quantiles() {
    // Normal quantiles (any statistics handbook): z(0.05) = −1.644854, z(0.5) = 0, z(0.95) = 1.644854.
    // Sampling error of a sample p-quantile: sqrt(p(1−p)/n)/φ(z_p) (asymptotic normality of
    // order statistics, e.g. Kendall & Stuart); with n = 20000 that is 0.0089σ at the median
    // and 0.0211σ at p05/p95. The check allows 4 standard errors.
    let n = 20_000u64;
    let sigma = 0.01;
    let sigmas = Mismatch {
        saturation_current: sigma,
        ..Mismatch::default()
    };
    let mut draws: Vec<f64> = (0..n)
        .map(|run| {
            let mut rng = run_rng(5, 0, 0, run);
            draw_mismatch(&mut rng, &Mismatch::default(), &sigmas).saturation_current
        })
        .collect();
    draws.sort_by(f64::total_cmp);
    let density = |z: f64| (-0.5 * z * z).exp() / (2.0 * PI).sqrt();
    for (p, z) in [
        (0.05, -1.644_853_626_951_472),
        (0.5, 0.0),
        (0.95, 1.644_853_626_951_472),
    ] {
        let measured = quantile(&draws, p).unwrap();
        let standard_error = sigma * (p * (1.0 - p) / n as f64).sqrt() / density(z);
        assert!(
            (measured - sigma * z).abs() < 4.0 * standard_error,
            "p = {p}: {measured:e} vs {:e} (s.e. {standard_error:e})",
            sigma * z
        );
    }
}

#[test]
fn wilson_interval_matches_a_textbook_case() {
    // Wilson (1927) score interval; 81 successes of 263 at 95 %: 0.2553 to 0.3662
    // (worked example in Newcombe 1998, Statistics in Medicine 17:857, from memory).
    let (low, high) = wilson_interval(81, 263, Z_95);
    assert!(
        (low - 0.2553).abs() < 5e-4 && (high - 0.3662).abs() < 5e-4,
        "{low} {high}"
    );
}

/// HD2 of the ideal pair `tanh((A·cos θ + V_os)/(2φT))` relative to its fundamental, dBc, by
/// trapezoidal quadrature over one period (spectrally accurate for a smooth periodic function).
fn ideal_pair_hd2_dbc(amplitude_v: f64, offset_v: f64, phi: f64) -> f64 {
    let n = 512;
    let (mut first, mut second) = (0.0, 0.0);
    for i in 0..n {
        let theta = TAU * i as f64 / n as f64;
        let out = ((amplitude_v * theta.cos() + offset_v) / (2.0 * phi)).tanh();
        first += out * theta.cos();
        second += out * (2.0 * theta).cos();
    }
    20.0 * (second.abs() / first.abs()).log10()
}

/// P(|ln(1+δ)| ≤ m) for δ ~ N(0, σ).
fn fraction_within(m: f64, sigma: f64) -> f64 {
    normal_cdf(m.exp_m1() / sigma) - normal_cdf((-m).exp_m1() / sigma)
}

#[test]
fn monte_carlo_hd2_median_and_yield_match_the_tanh_pair_with_offset() {
    // Independent calculation: the ideal pair's transfer is tanh((v + φT·ln(1+δ))/(2φT))
    // (exponential law, from memory); HD2 grows monotonically with |ln(1+δ)| here, so the median
    // HD2 is HD2 at the median of |ln(1+δ)| and the yield of an HD2 ceiling is the probability
    // that |ln(1+δ)| stays below the offset where HD2 reaches the ceiling.
    let sigma = 0.01;
    let amplitude = 0.02;
    let phi = thermal_voltage(27.0);
    let bisect = |target: &dyn Fn(f64) -> f64, mut low: f64, mut high: f64| {
        for _ in 0..200 {
            let mid = 0.5 * (low + high);
            if target(mid) < 0.0 {
                low = mid;
            } else {
                high = mid;
            }
        }
        0.5 * (low + high)
    };
    let median_log = bisect(&|m| fraction_within(m, sigma) - 0.5, 0.0, 0.1);
    let expected_median = ideal_pair_hd2_dbc(amplitude, phi * median_log, phi);
    let ceiling = expected_median + 3.0;
    let ceiling_log = bisect(
        &|m| ideal_pair_hd2_dbc(amplitude, phi * m, phi) - ceiling,
        1e-9,
        0.2,
    );
    let expected_yield = fraction_within(ceiling_log, sigma);

    let text = format!(
        "name: mc\nstages:\n  - {{name: ideal, tail_current: 1 mA, load_resistance: 1k, mismatch_sigma: {{saturation_current: 1%}}}}\ndrive: {{amplitudes: [20 mV]}}\nmonte_carlo: {{runs: 4000, seed: 42}}\nbudget:\n  - {{metric: hd2, at: 20 mV, max: {ceiling}}}\n"
    );
    let plan = Plan::from_yaml(&text, "mc.yaml").unwrap();
    let report = plan.evaluate().unwrap();
    let record = report
        .monte_carlo
        .iter()
        .find(|r| r.metric == "hd2" && r.amplitude_v == amplitude)
        .unwrap();
    // Sampling error of the median of |δ|: 0.5/√n/f(median) ≈ 1.9 % of it, about 0.16 dB; of
    // the yield: √(p(1−p)/n) ≈ 0.8 points. The contract tolerances are 0.5 dB and 3 points.
    let median = record.median.unwrap();
    let measured_yield = report.yield_[0].pass_fraction;
    eprintln!("median HD2 {median:.3} dBc (reference {expected_median:.3}); yield {measured_yield:.4} (reference {expected_yield:.4})");
    assert!(
        (median - expected_median).abs() < 0.5,
        "median HD2 {median} vs {expected_median}"
    );
    assert!(
        (measured_yield - expected_yield).abs() < 0.03,
        "yield {measured_yield} vs {expected_yield}"
    );
    assert!(report.yield_[0].pass_fraction_low <= measured_yield);
    assert!(report.yield_[0].pass_fraction_high >= measured_yield);
}

#[test]
fn the_same_seed_gives_the_same_report_whatever_the_thread_count() {
    let text = "name: det\nstages:\n  - {name: a, tail_current: 1 mA, load_resistance: 2k, emitter_resistance: 100, transistor: {beta: 80}, mismatch_sigma: {saturation_current: 1%, beta: 5%, load_resistance: 1%}}\ndrive: {amplitudes: [5 mV, 30 mV], two_tone_spacing: 1 kHz}\ncorners:\n  - {name: slow, beta: -30%}\nmonte_carlo: {runs: 150, seed: 9}\nbudget:\n  - {metric: hd2, at: 30 mV, max: -50}\n";
    let plan = Plan::from_yaml(text, "det.yaml").unwrap();
    let run_with = |threads: usize| {
        let pool = rayon::ThreadPoolBuilder::new()
            .num_threads(threads)
            .build()
            .unwrap();
        pool.install(|| serde_json::to_string(&plan.evaluate().unwrap()).unwrap())
    };
    let one = run_with(1);
    assert_eq!(one, run_with(3));
    assert_eq!(one, run_with(1));
    // A different seed must change the draws.
    let other = Plan::from_yaml(&text.replace("seed: 9", "seed: 10"), "det.yaml").unwrap();
    assert_ne!(
        one,
        serde_json::to_string(&other.evaluate().unwrap()).unwrap()
    );
}

#[test]
fn a_tail_law_that_turns_the_current_off_is_refused_with_its_position() {
    let text = "name: t\ntemperatures_c: [27, 400]\nstages:\n  - name: a\n    tail_current: 1 mA\n    load_resistance: 2k\n    tail_current_law: {temperature_coefficient: -0.005}\ndrive: {amplitudes: [1 mV]}\n";
    let err = Plan::from_yaml(text, "t.yaml").unwrap_err();
    assert_eq!(
        (err.line, err.key_path.as_str()),
        (7, "stages[0].tail_current_law")
    );
    let err = Plan::from_yaml(
        &text.replace("{temperature_coefficient: -0.005}", "square"),
        "t.yaml",
    )
    .unwrap_err();
    assert!(err.accepted.contains("ptat"), "{err}");
}

/// The Wilson score interval is the set of p with |p̂ − p| ≤ z·√(p(1 − p)/n) (Wilson 1927):
/// its ends are the roots of (1 + z²/n)·p² − (2p̂ + z²/n)·p + p̂² = 0, solved here by the
/// quadratic formula, for small and large samples and both extremes.
#[test]
fn wilson_interval_is_the_root_pair_of_the_score_inequality() {
    for (passes, runs) in [
        (0u64, 10u64),
        (1, 10),
        (5, 10),
        (10, 10),
        (490, 1000),
        (1999, 2000),
    ] {
        let (n, p_hat, z) = (runs as f64, passes as f64 / runs as f64, Z_95);
        let a = 1.0 + z * z / n;
        let b = -(2.0 * p_hat + z * z / n);
        let c = p_hat * p_hat;
        let root = (b * b - 4.0 * a * c).max(0.0).sqrt();
        let (low, high) = ((-b - root) / (2.0 * a), (-b + root) / (2.0 * a));
        let (got_low, got_high) = wilson_interval(passes, runs, Z_95);
        assert!(
            (got_low - low).abs() < 1e-12 && (got_high - high).abs() < 1e-12,
            "{passes}/{runs}: ({got_low}, {got_high}) vs ({low}, {high})"
        );
        // Each end satisfies the defining equality (p̂ − p)² = z²·p(1 − p)/n.
        for p in [low, high] {
            let gap = (p_hat - p).powi(2) - z * z * p * (1.0 - p) / n;
            assert!(gap.abs() < 1e-12, "{passes}/{runs} at {p}: {gap}");
        }
    }
}

/// A yield line is judged on the pass fraction itself: with an HD2 ceiling set where the
/// independent yield is about one half, `{metric: yield, min: 99%}` fails, its value agrees with
/// the independent yield, the Wilson interval is reported beside it, and the runs failing the
/// HD2 line are the complement.
#[test]
fn a_yield_line_fails_where_the_independent_yield_is_one_half() {
    let sigma = 0.01;
    let amplitude = 0.02;
    let phi = thermal_voltage(27.0);
    let bisect = |target: &dyn Fn(f64) -> f64, mut low: f64, mut high: f64| {
        for _ in 0..200 {
            let mid = 0.5 * (low + high);
            if target(mid) < 0.0 {
                low = mid;
            } else {
                high = mid;
            }
        }
        0.5 * (low + high)
    };
    // The ceiling is HD2 at the offset that half the dies stay within.
    let median_log = bisect(&|m| fraction_within(m, sigma) - 0.49, 0.0, 0.1);
    let ceiling = ideal_pair_hd2_dbc(amplitude, phi * median_log, phi);
    let expected_yield = fraction_within(median_log, sigma);
    let text = format!(
        "name: mc\nstages:\n  - {{name: ideal, tail_current: 1 mA, load_resistance: 1k, mismatch_sigma: {{saturation_current: 1%}}}}\ndrive: {{amplitudes: [20 mV]}}\nmonte_carlo: {{runs: 2000, seed: 5}}\nbudget:\n  - {{metric: hd2, at: 20 mV, max: {ceiling}}}\n  - {{metric: yield, min: 99%}}\n"
    );
    let report = Plan::from_yaml(&text, "mc.yaml")
        .unwrap()
        .evaluate()
        .unwrap();
    let line = report
        .budget
        .iter()
        .find(|b| b.metric == "yield")
        .expect("a yield record");
    let value = line.value.unwrap();
    // Sampling error √(p(1 − p)/n) ≈ 1.1 points; allow 4 points.
    assert!(
        (value - expected_yield).abs() < 0.04,
        "yield {value} vs independent {expected_yield}"
    );
    assert!(!line.pass && (line.margin.unwrap() - (value - 0.99)).abs() < 1e-12);
    let [low, high] = line.interval.unwrap();
    let passing = (value * 2000.0).round() as u64;
    assert_eq!((low, high), wilson_interval(passing, 2000, Z_95));
    assert!(!report.met() && !report.verdict.as_planned.met);
    assert_eq!(report.verdict.as_planned.failing[0].metric, "yield");
    // Per line, the runs failing it: every failing run fails the only other line, HD2.
    let hd2 = &report.yield_[0].lines[0];
    assert_eq!(hd2.metric, "hd2");
    assert!((hd2.failing_fraction - (1.0 - value)).abs() < 1e-12);
    assert_eq!(report.yield_[0].lines.len(), 1);
}

/// HD2 of the degenerated ideal pair with an I_S mismatch δ, dBc: the exact transfer is
/// v + φT·ln(1+δ) = 2φT·atanh(x) + I·R_E·x (KVL with the exponential law, from memory), solved
/// here by bisection and a direct DFT sum.
fn degenerated_hd2_dbc(amplitude_v: f64, log_mismatch: f64, emitter: f64, phi: f64) -> f64 {
    let n = 256;
    let tail = 1e-3;
    let x_of = |v: f64| {
        let (mut low, mut high) = (-1.0f64, 1.0f64);
        for _ in 0..200 {
            let mid = 0.5 * (low + high);
            let f = 2.0 * phi * mid.atanh() + tail * emitter * mid - v - phi * log_mismatch;
            if f.is_nan() || f > 0.0 {
                high = mid;
            } else {
                low = mid;
            }
            if high - low < 1e-17 {
                break;
            }
        }
        0.5 * (low + high)
    };
    let xs: Vec<f64> = (0..n)
        .map(|i| x_of(amplitude_v * (TAU * i as f64 / n as f64).cos()))
        .collect();
    let harmonic = |k: usize| {
        let (mut re, mut im) = (0.0, 0.0);
        for (i, x) in xs.iter().enumerate() {
            let t = TAU * (k * i) as f64 / n as f64;
            re += x * t.cos();
            im += x * t.sin();
        }
        (re * re + im * im).sqrt()
    };
    20.0 * (harmonic(2) / harmonic(1)).log10()
}

/// When the least R_E holding the other lines misses the yield line, the recommended design is
/// the least value whose population meets it: against the independent R_E at which the share of
/// dies with HD2 under the ceiling reaches 95 %.
#[test]
fn the_recommended_design_raises_degeneration_until_the_yield_line_is_met() {
    let (sigma, amplitude, phi) = (0.01, 0.02, thermal_voltage(27.0));
    let bisect = |target: &dyn Fn(f64) -> f64, mut low: f64, mut high: f64| {
        for _ in 0..100 {
            let mid = 0.5 * (low + high);
            if target(mid) < 0.0 {
                low = mid;
            } else {
                high = mid;
            }
        }
        0.5 * (low + high)
    };
    // The ceiling: HD2 of the bare pair at the offset half the dies stay within.
    let median_log = bisect(&|m| fraction_within(m, sigma) - 0.5, 0.0, 0.1);
    let ceiling = degenerated_hd2_dbc(amplitude, median_log, 0.0, phi);
    // 95 % of the dies stay within this offset; HD2 falls with R_E, so the least R_E meeting
    // the yield puts HD2 at that offset on the ceiling.
    let log_95 = bisect(&|m| fraction_within(m, sigma) - 0.95, 0.0, 0.1);
    let expected = bisect(
        &|r| ceiling - degenerated_hd2_dbc(amplitude, log_95, r, phi),
        0.0,
        2000.0,
    );
    let text = format!(
        "name: mc\nstages:\n  - {{name: ideal, tail_current: 1 mA, load_resistance: 1k, mismatch_sigma: {{saturation_current: 1%}}}}\ndrive: {{amplitudes: [20 mV]}}\nmonte_carlo: {{runs: 2000, seed: 5}}\nbudget:\n  - {{metric: hd2, at: 20 mV, max: {ceiling}}}\n  - {{metric: yield, min: 95%}}\nsizing:\n  emitter_resistance: {{from: 0, to: 2k}}\n"
    );
    let report = Plan::from_yaml(&text, "mc.yaml")
        .unwrap()
        .evaluate()
        .unwrap();
    let recommended = report.verdict.recommended.as_ref().unwrap();
    assert!(
        report.met() && recommended.met,
        "{}",
        report.verdict.summary
    );
    assert!(!report.verdict.as_planned.met);
    let stage = &recommended.stages[0];
    assert_eq!(stage.basis, "least_in_common_window_meeting_yield");
    let r_e = stage.emitter_resistance_ohm;
    // The sampled yield has a standard error of √(0.95·0.05/2000) ≈ 0.5 points, which moves
    // the 95 % offset by about 1.4 % and R_E by a few per cent; allow 10 %.
    eprintln!("R_E {r_e:.1} Ω, independent {expected:.1} Ω");
    assert!((r_e / expected - 1.0).abs() < 0.10, "{r_e} vs {expected}");
    let line = report
        .budget
        .iter()
        .find(|b| b.stage == "ideal@sized" && b.metric == "yield")
        .unwrap();
    assert!(line.pass && line.value.unwrap() >= 0.95);
}
