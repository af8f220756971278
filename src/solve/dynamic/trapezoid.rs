//! Charge-conserving trapezoidal time stepping and periodic steady state by shooting, for any
//! circuit written as
//!
//! ```text
//! f(x, t) + B·i = 0,        i = dq(x)/dt
//! ```
//!
//! with node voltages (or other unknowns) `x`, charges `q(x)` and a constant coupling matrix
//! `B` that says how each charge's current enters each equation.
//!
//! **Step.** The trapezoidal rule is applied to the charges, not to capacitances times
//! voltage derivatives: `q(x_{n+1}) − q(x_n) = h/2·(i_{n+1} + i_n)`. The charge moved in a
//! step is therefore exactly what the currents carry, whatever the junction law, so charge
//! is conserved to rounding. Each step solves `f(x_{n+1}) + B·(2/h·(q(x_{n+1}) − q(x_n)) − i_n) = 0`
//! by Newton with the exact Jacobian, stopping once a full step moves no unknown by more
//! than [`StepTolerance::absolute`] (quadratic convergence leaves an error of order its
//! square). The rule is A-stable and second order: its global error is `c(t)·h² + O(h⁴)`.
//!
//! **Steady state.** The state of the step map is `(x, i)`. A period of `N` steps maps a
//! start state `s₀` to `Φ(s₀)`; the periodic steady state solves `Φ(s₀) = s₀` by Newton on
//! `s₀` with the monodromy matrix `∂Φ/∂s₀` propagated alongside the steps (shooting). The
//! matrix is reused while the residual falls fast (chord steps) and rebuilt otherwise. The
//! criterion, checked on an actual integrated period: every unknown returns to within
//! [`SteadyTolerance::state`] of its start, and every charge current times
//! [`ChargeSystem::current_scale`] likewise.
//!
//! The trapezoidal rule maps stiff modes (time constants far below the step) to an
//! amplification near −1 per step. Over an *even* number of steps such a mode returns
//! almost unchanged and the shooting matrix `∂Φ/∂s₀ − I` becomes nearly singular; over an
//! *odd* number it flips sign and the matrix stays well conditioned. Callers therefore use
//! odd step counts.

// Index loops mirror the matrix formulas they implement.
#![allow(clippy::needless_range_loop)]

use super::dense::Lu;

/// A circuit in charge-based form (see the module docs).
pub trait ChargeSystem {
    /// Number of unknowns `x` (and of equations).
    fn unknowns(&self) -> usize;
    /// Number of charges `q`.
    fn charges(&self) -> usize;
    /// Resistive part `f(x, t)` and its row-major Jacobian `∂f/∂x` (unknowns × unknowns).
    fn resistive(&self, x: &[f64], time_s: f64, f: &mut [f64], jacobian: &mut [f64]);
    /// Charges `q(x)` and their row-major Jacobian `∂q/∂x` (charges × unknowns).
    fn charge(&self, x: &[f64], q: &mut [f64], jacobian: &mut [f64]);
    /// The constant coupling `B`, row-major (unknowns × charges).
    fn coupling(&self) -> &[f64];
    /// Largest fraction of a Newton step taken from `x` along `dx` (junction limiting).
    fn step_fraction(&self, _x: &[f64], _dx: &[f64]) -> f64 {
        1.0
    }
    /// Converts a charge current into the units of the unknowns for the steady-state
    /// criterion (an impedance when the unknowns are voltages).
    fn current_scale(&self) -> f64 {
        1.0
    }
}

/// Convergence settings of the Newton iteration inside each time step.
#[derive(Debug, Clone, Copy)]
pub struct StepTolerance {
    /// Converged once a full Newton step moves no unknown by more than this (units of `x`).
    pub absolute: f64,
    /// Iteration cap per step.
    pub max_iterations: usize,
}

/// The steady-state criterion of the shooting iteration.
#[derive(Debug, Clone, Copy)]
pub struct SteadyTolerance {
    /// Largest accepted change of any unknown (and scaled charge current) over one period.
    pub state: f64,
    /// The circuit's rounding floor for the same changes: a change below it that Newton no
    /// longer reduces is accepted as steady (large loads at long periods amplify a junction's
    /// rounding onto the collectors).
    pub rounding: f64,
    /// Shooting iteration cap.
    pub max_iterations: usize,
}

/// The full state of the step map: unknowns and charge currents.
#[derive(Debug, Clone, PartialEq)]
pub struct State {
    /// Unknowns `x`.
    pub x: Vec<f64>,
    /// Charge currents `i = dq/dt`.
    pub i: Vec<f64>,
}

/// Why integration or shooting stopped.
#[derive(Debug, Clone, PartialEq)]
pub struct IntegrationFailure {
    /// Time at which it happened, s.
    pub time_s: f64,
    /// What went wrong.
    pub reason: String,
}

impl std::fmt::Display for IntegrationFailure {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(f, "at t = {:.4e} s: {}", self.time_s, self.reason)
    }
}

impl std::error::Error for IntegrationFailure {}

/// Work buffers for one system, reused across steps.
struct Workspace {
    n: usize,
    m: usize,
    f: Vec<f64>,
    fx: Vec<f64>,
    q: Vec<f64>,
    qx: Vec<f64>,
    current: Vec<f64>,
    matrix: Vec<f64>,
    delta: Vec<f64>,
}

impl Workspace {
    fn new(n: usize, m: usize) -> Self {
        Workspace {
            n,
            m,
            f: vec![0.0; n],
            fx: vec![0.0; n * n],
            q: vec![0.0; m],
            qx: vec![0.0; m * n],
            current: vec![0.0; m],
            matrix: vec![0.0; n * n],
            delta: vec![0.0; n],
        }
    }

    /// Residual and Jacobian of the step equation at `x` (charges from the previous point).
    fn assemble<S: ChargeSystem>(
        &mut self,
        system: &S,
        x: &[f64],
        time_s: f64,
        rate: f64,
        q_previous: &[f64],
        i_previous: &[f64],
    ) {
        let (n, m) = (self.n, self.m);
        system.resistive(x, time_s, &mut self.f, &mut self.fx);
        system.charge(x, &mut self.q, &mut self.qx);
        for k in 0..m {
            self.current[k] = rate * (self.q[k] - q_previous[k]) - i_previous[k];
        }
        let b = system.coupling();
        self.matrix.copy_from_slice(&self.fx);
        for row in 0..n {
            let mut sum = self.f[row];
            for k in 0..m {
                let coupling = b[row * m + k];
                if coupling != 0.0 {
                    sum += coupling * self.current[k];
                    for col in 0..n {
                        self.matrix[row * n + col] += coupling * rate * self.qx[k * n + col];
                    }
                }
            }
            self.f[row] = sum;
        }
    }
}

/// One period integrated from a start state.
#[derive(Debug, Clone)]
pub struct PeriodRun {
    /// State after the period.
    pub end: State,
    /// Unknowns at steps `0..N` (row-major, `N × unknowns`), step 0 being the start.
    pub trajectory: Vec<f64>,
    /// Monodromy matrix `∂end/∂start`, row-major over `(x, i)`, when asked for.
    pub monodromy: Option<Vec<f64>>,
}

/// Advances `start` over `steps` equal steps from `t0_s` to `t0_s + span_s`.
pub fn integrate<S: ChargeSystem>(
    system: &S,
    start: &State,
    t0_s: f64,
    span_s: f64,
    steps: usize,
    tolerance: StepTolerance,
    with_monodromy: bool,
) -> Result<PeriodRun, IntegrationFailure> {
    let (n, m) = (system.unknowns(), system.charges());
    let d = n + m;
    let h = span_s / steps as f64;
    let rate = 2.0 / h;
    let mut work = Workspace::new(n, m);
    let mut x = start.x.clone();
    let mut i = start.i.clone();
    let mut q = vec![0.0; m];
    let mut qx = vec![0.0; m * n];
    system.charge(&x, &mut q, &mut qx);
    let mut trajectory = Vec::with_capacity(steps * n);
    let mut previous_x = x.clone();
    let mut sensitivity = with_monodromy.then(|| {
        let mut s = vec![0.0; d * d];
        for k in 0..d {
            s[k * d + k] = 1.0;
        }
        s
    });
    let mut w = vec![0.0; m * d];
    let mut bw = vec![0.0; n * d];
    let mut scratch = Vec::new();
    let mut guess = vec![0.0; n];
    for step in 0..steps {
        trajectory.extend_from_slice(&x);
        let time_s = t0_s + (step + 1) as f64 * span_s / steps as f64;
        // Linear predictor from the last two points.
        for k in 0..n {
            guess[k] = if step == 0 {
                x[k]
            } else {
                2.0 * x[k] - previous_x[k]
            };
        }
        let mut candidate = guess.clone();
        let mut converged = false;
        for _ in 0..tolerance.max_iterations {
            work.assemble(system, &candidate, time_s, rate, &q, &i);
            let lu = Lu::factor(&work.matrix, n).ok_or_else(|| IntegrationFailure {
                time_s,
                reason: "the step's Jacobian is singular".into(),
            })?;
            for k in 0..n {
                work.delta[k] = -work.f[k];
            }
            lu.solve(&mut work.delta);
            if work.delta.iter().any(|v| !v.is_finite()) {
                return Err(IntegrationFailure {
                    time_s,
                    reason: "a Newton step is not finite".into(),
                });
            }
            let fraction = system.step_fraction(&candidate, &work.delta).min(1.0);
            let mut largest: f64 = 0.0;
            for k in 0..n {
                candidate[k] += fraction * work.delta[k];
                largest = largest.max(work.delta[k].abs());
            }
            if fraction == 1.0 && largest <= tolerance.absolute {
                converged = true;
                break;
            }
        }
        if !converged {
            return Err(IntegrationFailure {
                time_s,
                reason: format!(
                    "Newton did not settle to {:e} within {} iterations",
                    tolerance.absolute, tolerance.max_iterations
                ),
            });
        }
        // Charges, currents and Jacobian at the accepted point.
        work.assemble(system, &candidate, time_s, rate, &q, &i);
        if let Some(s) = sensitivity.as_mut() {
            // W = rate·Qx(x_n)·S_x + S_i ;  S_x' = A⁻¹·B·W ;  S_i' = rate·Qx(x_{n+1})·S_x' − W
            for k in 0..m {
                for c in 0..d {
                    let mut sum = s[(n + k) * d + c];
                    for col in 0..n {
                        sum += rate * qx[k * n + col] * s[col * d + c];
                    }
                    w[k * d + c] = sum;
                }
            }
            let b = system.coupling();
            for row in 0..n {
                for c in 0..d {
                    let mut sum = 0.0;
                    for k in 0..m {
                        sum += b[row * m + k] * w[k * d + c];
                    }
                    bw[row * d + c] = sum;
                }
            }
            let lu = Lu::factor(&work.matrix, n).ok_or_else(|| IntegrationFailure {
                time_s,
                reason: "the step's Jacobian is singular".into(),
            })?;
            lu.solve_columns(&mut bw, d, &mut scratch);
            for row in 0..n {
                s[row * d..row * d + d].copy_from_slice(&bw[row * d..row * d + d]);
            }
            for k in 0..m {
                for c in 0..d {
                    let mut sum = -w[k * d + c];
                    for col in 0..n {
                        sum += rate * work.qx[k * n + col] * bw[col * d + c];
                    }
                    s[(n + k) * d + c] = sum;
                }
            }
        }
        previous_x.copy_from_slice(&x);
        x.copy_from_slice(&candidate);
        q.copy_from_slice(&work.q);
        qx.copy_from_slice(&work.qx);
        i.copy_from_slice(&work.current);
    }
    Ok(PeriodRun {
        end: State { x, i },
        trajectory,
        monodromy: sensitivity,
    })
}

/// Periods a circuit is left to settle by plain integration when shooting makes no progress.
pub const SETTLING_PERIODS: usize = 8;

/// Rounding steps allowed in a charge current's steady-state criterion (see
/// [`periodic_steady_state`]).
pub const ROUNDING_STEPS: f64 = 16.0;

/// A periodic steady state found by shooting.
#[derive(Debug, Clone)]
pub struct PeriodicSolution {
    /// The periodic start state.
    pub start: State,
    /// Unknowns at steps `0..N` of the verified period (row-major, `N × unknowns`).
    pub trajectory: Vec<f64>,
    /// Largest change of the state over the verified period (units of `x`).
    pub residual: f64,
    /// Periods integrated.
    pub periods: usize,
}

/// Finds the periodic steady state of period `period_s` with `steps` steps per period,
/// starting from `guess`; `monodromy` carries a shooting matrix between calls (reused for
/// chord steps, rebuilt when the residual does not fall at least tenfold per period).
pub fn periodic_steady_state<S: ChargeSystem>(
    system: &S,
    guess: State,
    period_s: f64,
    steps: usize,
    step_tolerance: StepTolerance,
    steady: SteadyTolerance,
    monodromy: &mut Option<Lu>,
) -> Result<PeriodicSolution, IntegrationFailure> {
    let (n, m) = (system.unknowns(), system.charges());
    let d = n + m;
    let scale = system.current_scale();
    let rate = 2.0 * steps as f64 / period_s;
    let mut start = guess;
    let mut last_residual = f64::INFINITY;
    let mut charges = vec![0.0; m];
    let mut charge_jacobian = vec![0.0; m * n];
    let mut best: Option<(State, f64, State)> = None;
    let mut slow_periods = 0;
    let mut latest = f64::INFINITY;
    for iteration in 0..steady.max_iterations {
        // A charge current is recomputed each step as rate·Δq − i: rounding leaves it an
        // error near ε·rate·|q| whatever the iteration does (a large capacitor at a long
        // period: 10 mF at 1 kHz leaves 1e-12 A), so its criterion is that floor when larger.
        // The node voltages keep the absolute criterion, and it is they that the reported
        // waveform is made of; a current error δ moves them by only h·δ/(2C) per step.
        system.charge(&start.x, &mut charges, &mut charge_jacobian);
        let current_tolerance: Vec<f64> = charges
            .iter()
            .map(|q| {
                steady
                    .state
                    .max(ROUNDING_STEPS * f64::EPSILON * rate * q.abs() * scale)
            })
            .collect();
        let rebuild = monodromy.is_none();
        let run = integrate(
            system,
            &start,
            0.0,
            period_s,
            steps,
            step_tolerance,
            rebuild,
        )?;
        let mut change = vec![0.0; d];
        let mut residual: f64 = 0.0;
        let mut within = true;
        for k in 0..n {
            change[k] = run.end.x[k] - start.x[k];
            residual = residual.max(change[k].abs());
            within &= change[k].abs() <= steady.state;
        }
        for k in 0..m {
            change[n + k] = run.end.i[k] - start.i[k];
            let scaled = (change[n + k] * scale).abs();
            residual = residual.max(scaled);
            within &= scaled <= current_tolerance[k];
        }
        latest = residual;
        if !residual.is_finite() {
            return Err(IntegrationFailure {
                time_s: period_s,
                reason: "the state after one period is not finite".into(),
            });
        }
        if within {
            return Ok(PeriodicSolution {
                start,
                trajectory: run.trajectory,
                residual,
                periods: iteration + 1,
            });
        }
        // Rounding-limited: every change within the circuit's rounding floor, and Newton no
        // longer reduces it (a fall of less than tenfold over the last period). The node
        // voltages then carry that floor as their error, and callers size their analysis floor
        // by it.
        let within_rounding = (0..n).all(|k| change[k].abs() <= steady.state.max(steady.rounding))
            && (0..m).all(|k| {
                (change[n + k] * scale).abs() <= current_tolerance[k].max(steady.rounding)
            });
        if within_rounding && residual > 0.1 * last_residual {
            return Ok(PeriodicSolution {
                start,
                trajectory: run.trajectory,
                residual,
                periods: iteration + 1,
            });
        }
        // Newton on the start state converges when the start is near the steady state. A
        // strong drive far from it (a tail capacitor that must charge to a rectified level,
        // say) shows as a step that makes the change over a period a thousand times larger
        // than the best start's, or as three periods in a row that do not halve it; then the
        // circuit is left to settle by itself for a few periods before shooting again.
        let diverged = best
            .as_ref()
            .is_some_and(|(_, good, _)| residual.is_nan() || residual > 1e3 * good);
        let slow = best
            .as_ref()
            .is_some_and(|(_, good, _)| residual > 0.5 * good);
        slow_periods = if slow { slow_periods + 1 } else { 0 };
        if diverged || slow_periods >= 3 {
            let mut state = match (&best, diverged) {
                (Some((_, _, good_end)), true) => good_end.clone(),
                _ => run.end.clone(),
            };
            for _ in 0..SETTLING_PERIODS {
                state = integrate(system, &state, 0.0, period_s, steps, step_tolerance, false)?.end;
            }
            start = state;
            *monodromy = None;
            last_residual = f64::INFINITY;
            best = None;
            slow_periods = 0;
            continue;
        }
        if best.as_ref().is_none_or(|(_, good, _)| residual < *good) {
            best = Some((start.clone(), residual, run.end.clone()));
        }
        if let Some(matrix) = run.monodromy {
            let mut shifted = matrix;
            for k in 0..d {
                shifted[k * d + k] -= 1.0;
            }
            *monodromy = Lu::factor(&shifted, d);
            if monodromy.is_none() {
                return Err(IntegrationFailure {
                    time_s: period_s,
                    reason: "the shooting matrix is singular (a mode with the period's own time constant)".into(),
                });
            }
        } else if residual > 0.1 * last_residual {
            // The chord step is not converging fast: rebuild the matrix on the next period.
            *monodromy = None;
            last_residual = residual;
            continue;
        }
        last_residual = residual;
        if let Some(lu) = monodromy.as_ref() {
            let mut correction: Vec<f64> = change.iter().map(|c| -c).collect();
            lu.solve(&mut correction);
            let fraction = system.step_fraction(&start.x, &correction[..n]).min(1.0);
            for k in 0..n {
                start.x[k] += fraction * correction[k];
            }
            for k in 0..m {
                start.i[k] += fraction * correction[n + k];
            }
        }
    }
    Err(IntegrationFailure {
        time_s: period_s,
        reason: format!(
            "no periodic steady state within {} periods (last change over a period {latest:.3e}, tolerance {:.1e})",
            steady.max_iterations, steady.state
        ),
    })
}
