//! The fit of a stage to bench data, checked against statistics rather than against itself:
//! recovery of known parameters from data with Gaussian noise of known σ, coverage of the
//! reported standard errors over many seeds, the standard errors against the Gauss–Newton
//! covariance σ̂²·(JᵀJ)⁻¹ computed here independently, a linear special case against its
//! closed form, and the fitted stage's budget verdict against an independent solve.
//!
//! The bench data are synthetic: the exact model at the true parameters (through the public
//! `Stage::at(..).tone(..)` calls) plus seeded Gaussian noise.

use linbudget::model::measurement::{
    BenchFigure, BenchPoint, FitParameter, FitSettings, Measurements,
};
use linbudget::solve::spectrum::FftCache;
use linbudget::study::fit::{fit_stage, FitOutcome, FitTermination};
use linbudget::{BudgetLine, Drive, Limit, Metric, Mismatch, Plan, Stage, Transistor};
use rand::SeedableRng;
use rand_distr::{Distribution, Normal};
use std::sync::Arc;

/// Synthetic bench points: `figures` of `truth` at every temperature and amplitude, each
/// with Gaussian noise of its σ (dB).
fn bench_points(
    truth: &Stage,
    temperatures: &[f64],
    amplitudes: &[f64],
    figures: &[(BenchFigure, f64)],
    seed: u64,
) -> Vec<BenchPoint> {
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(seed);
    let mut points = Vec::new();
    for &t in temperatures {
        let solved = truth.at(t).unwrap();
        for &a in amplitudes {
            let tone = solved.tone(a, 1e3).unwrap();
            let values = figures
                .iter()
                .map(|&(figure, sigma)| {
                    let exact = match figure {
                        BenchFigure::Gain => tone.gain_db(),
                        BenchFigure::Harmonic(n) => tone.hd_dbc(n).unwrap(),
                        other => panic!("not generated: {other:?}"),
                    };
                    (
                        figure,
                        exact + Normal::new(0.0, sigma).unwrap().sample(&mut rng),
                    )
                })
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
    points
}

fn amplitudes(count: usize, from: f64, to: f64) -> Vec<f64> {
    (0..count)
        .map(|i| from * (to / from).powf(i as f64 / (count - 1) as f64))
        .collect()
}

fn fit(plan: &Plan) -> FitOutcome {
    let outcome = fit_stage(
        plan,
        plan.fit.as_ref().unwrap(),
        0,
        &Arc::new(FftCache::default()),
        &|_| {},
    )
    .unwrap();
    assert_eq!(outcome.termination, FitTermination::Converged);
    outcome
}

fn plan_of(nominal: Stage, points: Vec<BenchPoint>, settings: FitSettings) -> Plan {
    Plan::new("fit", vec![nominal], Drive::new(vec![0.01]))
        .measurements(Measurements {
            stage: "pair".into(),
            file: "synthetic".into(),
            points,
        })
        .fit(settings)
}

fn parameter(key: &str, from: f64, to: f64) -> FitParameter {
    FitParameter {
        key: key.into(),
        from,
        to,
    }
}

/// A pair with β and the Early effect (the general, nested solve) whose silicon has 20 %
/// more emitter resistance, 4 % less tail current and +0.6 % saturation-current mismatch.
fn three_parameter_case(seed: u64) -> (Plan, [f64; 3]) {
    let truth = Stage::new("pair", 0.96e-3, 3.3e3)
        .emitter_resistance(180.0)
        .transistor(Transistor::default().beta(110.0).early_voltage(70.0))
        .supply(5.0)
        .input_common_mode(1.5)
        .mismatch(Mismatch::default().saturation_current(0.006));
    let nominal = truth
        .clone()
        .emitter_resistance(150.0)
        .tail_current(1e-3)
        .mismatch(Mismatch::default());
    let sigma = 0.2;
    let points = bench_points(
        &truth,
        &[-20.0, 27.0, 85.0],
        &amplitudes(12, 0.02, 0.18),
        &[
            (BenchFigure::Gain, sigma),
            (BenchFigure::Harmonic(2), sigma),
            (BenchFigure::Harmonic(3), sigma),
        ],
        seed,
    );
    let settings = FitSettings {
        parameters: vec![
            parameter("emitter_resistance", 50.0, 400.0),
            parameter("tail_current", 0.7e-3, 1.3e-3),
            parameter("mismatch.saturation_current", 0.0, 0.03),
        ],
        metrics: vec![
            BenchFigure::Gain,
            BenchFigure::Harmonic(2),
            BenchFigure::Harmonic(3),
        ],
        weights: Vec::new(),
    };
    (plan_of(nominal, points, settings), [180.0, 0.96e-3, 0.006])
}

/// Recovery (common practice in parameter estimation; any statistics handbook): with
/// Gaussian noise of σ = 0.2 dB the fitted values lie within three reported standard errors
/// of the truth (a 0.3 % chance each of failing for a correct fit), the residual scale
/// estimates σ within 20 % (χ² with 105 degrees of freedom: ±7 % is one standard deviation),
/// and the fit moves the rms residual from the systematic error down to the noise.
#[test]
fn known_parameters_are_recovered_within_their_standard_errors() {
    let (plan, truth) = three_parameter_case(17);
    let outcome = fit(&plan);
    for (parameter, truth) in outcome.parameters.iter().zip(truth) {
        let se = parameter.standard_error.unwrap();
        assert!(se > 0.0 && parameter.is_constrained(), "{parameter:?}");
        assert!(
            (parameter.value - truth).abs() <= 3.0 * se,
            "{}: {} vs truth {truth}, se {se}",
            parameter.key,
            parameter.value
        );
    }
    assert!(
        (outcome.residual_scale / 0.2 - 1.0).abs() < 0.2,
        "s = {}",
        outcome.residual_scale
    );
    assert!(outcome.rms_before > 5.0 * outcome.rms_after);
    assert!(outcome.flat_directions.is_empty());
    // The correlation matrix is symmetric with a unit diagonal.
    for i in 0..3 {
        assert!((outcome.correlation[i][i].unwrap() - 1.0).abs() < 1e-12);
        for j in 0..3 {
            let (a, b) = (
                outcome.correlation[i][j].unwrap(),
                outcome.correlation[j][i].unwrap(),
            );
            assert!((a - b).abs() < 1e-12 && a.abs() <= 1.0);
        }
    }
}

/// Coverage (common practice; a statistics handbook's "one standard error is a 68 %
/// interval" for a model nearly linear over the error): over 50 seeds the truth lies within
/// one reported standard error of the fit about two times in three. 100 intervals (two
/// parameters a seed) make a binomial spread of ±4.7 % around 68 %; the band 50–85 % is
/// about four of those wide on each side.
#[test]
fn standard_errors_cover_the_truth_about_two_times_in_three() {
    let truth_re = 150.0;
    let truth_tail = 1e-3;
    let truth = Stage::new("pair", truth_tail, 2e3).emitter_resistance(truth_re);
    let nominal = Stage::new("pair", 1.2e-3, 2e3).emitter_resistance(100.0);
    let settings = FitSettings {
        parameters: vec![
            parameter("emitter_resistance", 20.0, 500.0),
            parameter("tail_current", 0.4e-3, 2.5e-3),
        ],
        metrics: vec![BenchFigure::Gain, BenchFigure::Harmonic(3)],
        // Weights 1/σ² relative: σ = 0.1 dB on the gain, 0.3 dB on HD3.
        weights: vec![(BenchFigure::Gain, 9.0)],
    };
    let mut inside = 0;
    let mut total = 0;
    for seed in 0..50 {
        let points = bench_points(
            &truth,
            &[27.0],
            &amplitudes(10, 0.01, 0.15),
            &[(BenchFigure::Gain, 0.1), (BenchFigure::Harmonic(3), 0.3)],
            1000 + seed,
        );
        let outcome = fit(&plan_of(nominal.clone(), points, settings.clone()));
        for (p, truth) in outcome.parameters.iter().zip([truth_re, truth_tail]) {
            total += 1;
            if (p.value - truth).abs() <= p.standard_error.unwrap() {
                inside += 1;
            }
        }
    }
    let fraction = inside as f64 / total as f64;
    assert!((0.5..=0.85).contains(&fraction), "coverage {fraction}");
}

/// The residuals the test computes itself: model − bench over every measured value, the
/// model through the public library calls.
fn residuals_at(plan: &Plan, stage: &Stage) -> Vec<f64> {
    let settings = plan.fit.as_ref().unwrap();
    let mut out = Vec::new();
    let mut solved: Vec<(f64, linbudget::SolvedStage)> = Vec::new();
    for point in &plan.measurements[0].points {
        if !solved.iter().any(|(t, _)| *t == point.temperature_c) {
            solved.push((point.temperature_c, stage.at(point.temperature_c).unwrap()));
        }
        let at = &solved
            .iter()
            .find(|(t, _)| *t == point.temperature_c)
            .unwrap()
            .1;
        let tone = at.tone(point.amplitude_v, point.frequency_hz).unwrap();
        for figure in &settings.metrics {
            let Some(bench) = point.value(*figure) else {
                continue;
            };
            let model = match figure {
                BenchFigure::Gain => tone.gain_db(),
                BenchFigure::Harmonic(n) => tone.hd_dbc(*n).unwrap(),
                other => panic!("not used here: {other:?}"),
            };
            out.push(settings.weight(*figure).sqrt() * (model - bench));
        }
    }
    out
}

/// The inverse of a small symmetric matrix by Gauss–Jordan elimination with partial pivoting
/// (the textbook method, written out here so it shares nothing with the library).
fn inverse(matrix: &[Vec<f64>]) -> Vec<Vec<f64>> {
    let n = matrix.len();
    let mut a: Vec<Vec<f64>> = matrix
        .iter()
        .enumerate()
        .map(|(i, row)| {
            let mut r = row.clone();
            r.extend((0..n).map(|j| if i == j { 1.0 } else { 0.0 }));
            r
        })
        .collect();
    for col in 0..n {
        let pivot = (col..n)
            .max_by(|&x, &y| a[x][col].abs().total_cmp(&a[y][col].abs()))
            .unwrap();
        a.swap(col, pivot);
        let p = a[col][col];
        a[col].iter_mut().for_each(|v| *v /= p);
        for row in 0..n {
            if row != col {
                let factor = a[row][col];
                let pivot_row = a[col].clone();
                a[row]
                    .iter_mut()
                    .zip(pivot_row)
                    .for_each(|(v, p)| *v -= factor * p);
            }
        }
    }
    a.into_iter().map(|row| row[n..].to_vec()).collect()
}

/// The standard errors against the Gauss–Newton covariance σ̂²·(JᵀJ)⁻¹ with
/// σ̂² = Σr²/(m − p) (the usual nonlinear least-squares estimate, e.g. Seber & Wild,
/// *Nonlinear Regression*, ch. 2, from memory), computed here independently: the Jacobian by
/// central differences of the test's own residuals (steps of 10⁻⁴ of each value), the
/// inverse by Gauss–Jordan. Agreement within 1 % (finite differences on both sides).
#[test]
fn standard_errors_match_an_independent_gauss_newton_covariance() {
    let (plan, _) = three_parameter_case(5);
    let outcome = fit(&plan);
    let keys: Vec<&str> = outcome.parameters.iter().map(|p| p.key.as_str()).collect();
    let values: Vec<f64> = outcome.parameters.iter().map(|p| p.value).collect();
    let stage_with = |x: &[f64]| {
        let mut stage = plan.stages[0].clone();
        stage.emitter_resistance = x[0];
        stage.tail_current = x[1];
        stage.mismatch.saturation_current = x[2];
        stage
    };
    assert_eq!(
        keys,
        [
            "emitter_resistance",
            "tail_current",
            "mismatch.saturation_current"
        ]
    );
    let r = residuals_at(&plan, &stage_with(&values));
    let (m, p) = (r.len(), values.len());
    let s2 = r.iter().map(|v| v * v).sum::<f64>() / (m - p) as f64;
    let mut columns = Vec::new();
    for j in 0..p {
        let h = 1e-4 * values[j];
        let mut up = values.clone();
        up[j] += h;
        let mut down = values.clone();
        down[j] -= h;
        let (ru, rd) = (
            residuals_at(&plan, &stage_with(&up)),
            residuals_at(&plan, &stage_with(&down)),
        );
        columns.push(
            ru.iter()
                .zip(&rd)
                .map(|(a, b)| (a - b) / (2.0 * h))
                .collect::<Vec<f64>>(),
        );
    }
    let normal: Vec<Vec<f64>> = (0..p)
        .map(|i| {
            (0..p)
                .map(|j| columns[i].iter().zip(&columns[j]).map(|(a, b)| a * b).sum())
                .collect()
        })
        .collect();
    let covariance = inverse(&normal);
    for (j, parameter) in outcome.parameters.iter().enumerate() {
        let expected = (s2 * covariance[j][j]).sqrt();
        let got = parameter.standard_error.unwrap();
        assert!(
            (got / expected - 1.0).abs() < 0.01,
            "{}: {got} vs {expected}",
            parameter.key
        );
    }
}

/// A linear least-squares special case against its closed form: without the Early effect the
/// differential output is exactly proportional to the load, so fitting only the load to gain
/// data fits a constant offset in dB, 20·log10(R_L/R_0). Its least-squares value is the mean
/// of (bench − model at R_0) and its standard error s/√m with s² = Σ(r − r̄)²/(m − 1)
/// (ordinary least squares for a constant, any statistics handbook); in ohms the error
/// scales by R_L·ln10/20. Agreement to 1e-6 relative in the value, 1e-3 in the error.
#[test]
fn fitting_a_gain_offset_matches_the_closed_form() {
    let reference_load = 2e3;
    let truth = Stage::new("pair", 1e-3, 2.6e3)
        .emitter_resistance(100.0)
        .transistor(Transistor::default().beta(80.0));
    let nominal = truth.clone().load_resistance(reference_load);
    let points = bench_points(
        &truth,
        &[0.0, 50.0],
        &amplitudes(15, 0.005, 0.2),
        &[(BenchFigure::Gain, 0.15)],
        99,
    );
    let plan = plan_of(
        nominal.clone(),
        points.clone(),
        FitSettings {
            parameters: vec![parameter("load_resistance", 500.0, 10e3)],
            metrics: vec![BenchFigure::Gain],
            weights: Vec::new(),
        },
    );
    let outcome = fit(&plan);
    let offsets: Vec<f64> = residuals_at(&plan, &nominal).iter().map(|r| -r).collect();
    let m = offsets.len() as f64;
    let mean = offsets.iter().sum::<f64>() / m;
    let s = (offsets.iter().map(|d| (d - mean).powi(2)).sum::<f64>() / (m - 1.0)).sqrt();
    let load = reference_load * 10f64.powf(mean / 20.0);
    let load_se = load * std::f64::consts::LN_10 / 20.0 * s / m.sqrt();
    let fitted = &outcome.parameters[0];
    assert!(
        (fitted.value / load - 1.0).abs() < 1e-6,
        "{} vs {load}",
        fitted.value
    );
    let se = fitted.standard_error.unwrap();
    assert!((se / load_se - 1.0).abs() < 1e-3, "{se} vs {load_se}");
}

/// The fitted stage goes through the whole plan as a stage of its own: its budget record
/// holds what an independent solve of a stage built from the reported fit values gives.
#[test]
fn the_fitted_stages_budget_matches_an_independent_solve_at_the_fitted_values() {
    let (plan, _) = three_parameter_case(23);
    let plan = plan
        .budget_line(BudgetLine::new(Metric::Harmonic(3), Limit::Max(-50.0)).at(0.1))
        .budget_line(BudgetLine::new(Metric::Gain, Limit::Min(23.5)));
    let report = plan.evaluate().unwrap();
    let names: Vec<&str> = report.stages.iter().map(|s| s.stage.as_str()).collect();
    assert_eq!(names, ["pair", "pair@fitted"]);
    let mut stage = plan.stages[0].clone();
    for record in report.fit.iter().filter(|f| f.stage == "pair") {
        match record.parameter.as_str() {
            "emitter_resistance" => stage.emitter_resistance = record.value,
            "tail_current" => stage.tail_current = record.value,
            "mismatch.saturation_current" => stage.mismatch.saturation_current = record.value,
            other => panic!("unexpected {other}"),
        }
    }
    let solved = stage.at(27.0).unwrap();
    let hd3 = solved.tone(0.1, 1e3).unwrap().hd_dbc(3).unwrap();
    let gain = solved.gain_db();
    let fitted: Vec<_> = report
        .budget
        .iter()
        .filter(|b| b.stage == "pair@fitted")
        .collect();
    assert_eq!(fitted.len(), 2);
    assert!((fitted[0].value.unwrap() - hd3).abs() < 1e-6);
    assert_eq!(fitted[0].pass, hd3 <= -50.0);
    assert!((fitted[1].value.unwrap() - gain).abs() < 1e-6);
    assert_eq!(fitted[1].pass, gain >= 23.5);
    // Residuals are recorded for both model stages, and the fit lowers them.
    let rms = |stage: &str, metric: &str| {
        report
            .residual_summary
            .iter()
            .find(|s| s.stage == stage && s.metric == metric)
            .and_then(|s| s.rms)
            .unwrap()
    };
    assert!(rms("pair@fitted", "hd3") < rms("pair", "hd3"));
    assert!(rms("pair@fitted", "gain") < 0.5 * rms("pair", "gain"));
}

/// Two parameters that the data cannot tell apart — emitter resistance and base resistance
/// enter the transfer of a pair with constant β only as R_E + r_b/(β + 1) (KVL around the
/// input loop) — are reported as a flat direction naming both.
#[test]
fn parameters_the_data_cannot_tell_apart_are_reported_as_a_flat_direction() {
    let truth = Stage::new("pair", 1e-3, 2e3)
        .emitter_resistance(120.0)
        .transistor(Transistor::default().beta(100.0));
    let points = bench_points(
        &truth,
        &[27.0],
        &amplitudes(8, 0.01, 0.15),
        &[(BenchFigure::Gain, 0.05), (BenchFigure::Harmonic(3), 0.2)],
        3,
    );
    let plan = plan_of(
        truth.clone().emitter_resistance(100.0),
        points,
        FitSettings {
            parameters: vec![
                parameter("emitter_resistance", 0.0, 500.0),
                parameter("transistor.base_resistance", 0.0, 1e3),
            ],
            metrics: vec![BenchFigure::Gain, BenchFigure::Harmonic(3)],
            weights: Vec::new(),
        },
    );
    let outcome = fit(&plan);
    assert_eq!(outcome.flat_directions.len(), 1);
    let involved: Vec<usize> = outcome.flat_directions[0]
        .components
        .iter()
        .map(|(j, _)| *j)
        .collect();
    assert!(involved.contains(&0) && involved.contains(&1));
    // The combination the data do determine is recovered: R_E + r_b/(β + 1) ≈ 120 Ω.
    let effective = outcome.parameters[0].value + outcome.parameters[1].value / 101.0;
    assert!((effective - 120.0).abs() < 2.0, "{effective}");
    assert!(!outcome.parameters[0].is_constrained());
}
