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
//! **Cost.** Each period stores what the monodromy needs (the step matrices and charge
//! Jacobians along the way), so the shooting matrix is built from a period already integrated
//! only when a chord step stops converging — never by integrating the same period again. The
//! Newton iteration of each step starts from a *guide*: the increment over the same step of a
//! neighbouring trajectory (the previous shooting period, or the previous refinement level
//! interpolated onto this grid), which is usually within the step tolerance already, so most
//! steps take one Newton iteration. Guides and chord steps only choose where Newton starts:
//! every accepted step still meets the step tolerance and every accepted period the
//! steady-state criterion.
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
    /// Resistive part and charges at once (one device evaluation where the two share it);
    /// the same values as [`ChargeSystem::resistive`] followed by [`ChargeSystem::charge`].
    fn evaluate(
        &self,
        x: &[f64],
        time_s: f64,
        f: &mut [f64],
        f_jacobian: &mut [f64],
        q: &mut [f64],
        q_jacobian: &mut [f64],
    ) {
        self.resistive(x, time_s, f, f_jacobian);
        self.charge(x, q, q_jacobian);
    }
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
    lu: Lu,
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
            lu: Lu::with_size(n),
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
        system.evaluate(
            x,
            time_s,
            &mut self.f,
            &mut self.fx,
            &mut self.q,
            &mut self.qx,
        );
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
                    let scaled = coupling * rate;
                    let target = &mut self.matrix[row * n..row * n + n];
                    let source = &self.qx[k * n..k * n + n];
                    for (t, s) in target.iter_mut().zip(source) {
                        *t += scaled * s;
                    }
                }
            }
            self.f[row] = sum;
        }
    }
}

/// What one integrated period leaves behind for its monodromy matrix: the charge Jacobian
/// at every point (`steps + 1` blocks of charges × unknowns) and the step matrix at every
/// accepted point (`steps` blocks of unknowns × unknowns).
#[derive(Debug, Clone, Default)]
pub struct PeriodRecord {
    steps: usize,
    rate: f64,
    charge_jacobians: Vec<f64>,
    step_matrices: Vec<f64>,
}

impl PeriodRecord {
    /// The monodromy matrix `∂end/∂start` over `(x, i)`, row-major, of the recorded period.
    pub fn monodromy<S: ChargeSystem>(&self, system: &S) -> Result<Vec<f64>, IntegrationFailure> {
        let (n, m) = (system.unknowns(), system.charges());
        let d = n + m;
        let rate = self.rate;
        let b = system.coupling();
        let mut s = vec![0.0; d * d];
        for k in 0..d {
            s[k * d + k] = 1.0;
        }
        let mut w = vec![0.0; m * d];
        let mut bw = vec![0.0; n * d];
        let mut scratch = Vec::new();
        let mut lu = Lu::with_size(n);
        for step in 0..self.steps {
            let qx = &self.charge_jacobians[step * m * n..(step + 1) * m * n];
            let qx_next = &self.charge_jacobians[(step + 1) * m * n..(step + 2) * m * n];
            // W = rate·Qx(x_n)·S_x + S_i ;  S_x' = A⁻¹·B·W ;  S_i' = rate·Qx(x_{n+1})·S_x' − W
            for k in 0..m {
                let row = &mut w[k * d..k * d + d];
                row.copy_from_slice(&s[(n + k) * d..(n + k) * d + d]);
                for col in 0..n {
                    let factor = rate * qx[k * n + col];
                    if factor != 0.0 {
                        for (r, v) in row.iter_mut().zip(&s[col * d..col * d + d]) {
                            *r += factor * v;
                        }
                    }
                }
            }
            for row in 0..n {
                let target = &mut bw[row * d..row * d + d];
                target.fill(0.0);
                for k in 0..m {
                    let coupling = b[row * m + k];
                    if coupling != 0.0 {
                        for (t, v) in target.iter_mut().zip(&w[k * d..k * d + d]) {
                            *t += coupling * v;
                        }
                    }
                }
            }
            let time_s = (step + 1) as f64 * 2.0 / rate;
            if !lu.refactor(&self.step_matrices[step * n * n..(step + 1) * n * n]) {
                return Err(IntegrationFailure {
                    time_s,
                    reason: "the step's Jacobian is singular".into(),
                });
            }
            lu.solve_columns(&mut bw, d, &mut scratch);
            s[..n * d].copy_from_slice(&bw);
            for k in 0..m {
                let row = &mut s[(n + k) * d..(n + k) * d + d];
                for (r, v) in row.iter_mut().zip(&w[k * d..k * d + d]) {
                    *r = -v;
                }
                for col in 0..n {
                    let factor = rate * qx_next[k * n + col];
                    if factor != 0.0 {
                        for (r, v) in row.iter_mut().zip(&bw[col * d..col * d + d]) {
                            *r += factor * v;
                        }
                    }
                }
            }
        }
        Ok(s)
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
    let mut record = PeriodRecord::default();
    let (end, trajectory) = integrate_guided(
        system,
        start,
        t0_s,
        span_s,
        steps,
        tolerance,
        None,
        with_monodromy.then_some(&mut record),
    )?;
    let monodromy = if with_monodromy {
        Some(record.monodromy(system)?)
    } else {
        None
    };
    Ok(PeriodRun {
        end,
        trajectory,
        monodromy,
    })
}

/// Advances `start` over `steps` equal steps; each step's Newton iteration starts from the
/// current point plus the increment of `guide` over that step (`guide` holds `steps` rows of
/// unknowns on the same grid, periodic: row `steps` is row 0), or from a linear extrapolation
/// of the last two points without a guide. With `record`, keeps what the monodromy needs.
/// Returns the end state and the trajectory (rows `0..steps`).
#[allow(clippy::too_many_arguments)]
pub fn integrate_guided<S: ChargeSystem>(
    system: &S,
    start: &State,
    t0_s: f64,
    span_s: f64,
    steps: usize,
    tolerance: StepTolerance,
    guide: Option<&[f64]>,
    mut record: Option<&mut PeriodRecord>,
) -> Result<(State, Vec<f64>), IntegrationFailure> {
    let (n, m) = (system.unknowns(), system.charges());
    let h = span_s / steps as f64;
    let rate = 2.0 / h;
    let mut work = Workspace::new(n, m);
    let mut x = start.x.clone();
    let mut i = start.i.clone();
    let mut q = vec![0.0; m];
    let mut qx = vec![0.0; m * n];
    system.charge(&x, &mut q, &mut qx);
    if let Some(r) = record.as_deref_mut() {
        r.steps = steps;
        r.rate = rate;
        r.charge_jacobians.clear();
        r.charge_jacobians.reserve((steps + 1) * m * n);
        r.charge_jacobians.extend_from_slice(&qx);
        r.step_matrices.clear();
        r.step_matrices.reserve(steps * n * n);
    }
    let guide = guide.filter(|g| g.len() == steps * n);
    let mut trajectory = Vec::with_capacity(steps * n);
    let mut previous_x = x.clone();
    let mut candidate = vec![0.0; n];
    for step in 0..steps {
        trajectory.extend_from_slice(&x);
        let time_s = t0_s + (step + 1) as f64 * span_s / steps as f64;
        match guide {
            Some(g) => {
                let next = if step + 1 == steps { 0 } else { step + 1 };
                for k in 0..n {
                    candidate[k] = x[k] + g[next * n + k] - g[step * n + k];
                }
            }
            None => {
                // Linear predictor from the last two points.
                for k in 0..n {
                    candidate[k] = if step == 0 {
                        x[k]
                    } else {
                        2.0 * x[k] - previous_x[k]
                    };
                }
            }
        }
        let mut converged = false;
        for _ in 0..tolerance.max_iterations {
            work.assemble(system, &candidate, time_s, rate, &q, &i);
            if !work.lu.refactor(&work.matrix) {
                return Err(IntegrationFailure {
                    time_s,
                    reason: "the step's Jacobian is singular".into(),
                });
            }
            for k in 0..n {
                work.delta[k] = -work.f[k];
            }
            work.lu.solve(&mut work.delta);
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
        // Charges and currents at the accepted point: the last Newton step moved it by at
        // most the tolerance, so its charges are the assembled ones plus Qx·Δx (to Δx², the
        // order of the accepted point's own error) — no second device evaluation. The
        // charge moved is still exactly what the currents carry (they are defined from it).
        // The Jacobians kept for the monodromy are those of the last iterate, Δx away.
        for k in 0..m {
            let mut charge = work.q[k];
            for (d, dx) in work.qx[k * n..k * n + n].iter().zip(&work.delta) {
                charge += d * dx;
            }
            work.q[k] = charge;
            work.current[k] = rate * (charge - q[k]) - i[k];
        }
        if let Some(r) = record.as_deref_mut() {
            r.charge_jacobians.extend_from_slice(&work.qx);
            r.step_matrices.extend_from_slice(&work.matrix);
        }
        previous_x.copy_from_slice(&x);
        x.copy_from_slice(&candidate);
        q.copy_from_slice(&work.q);
        qx.copy_from_slice(&work.qx);
        i.copy_from_slice(&work.current);
    }
    Ok((State { x, i }, trajectory))
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
/// starting from `guess`; `monodromy` carries a shooting matrix between calls with the step
/// count it was built for (reused for chord steps at that step count while the residual falls
/// at least tenfold per period, rebuilt from the period just integrated otherwise: a matrix
/// of another step count carries other stiff-mode factors and converges poorly). `guide` (a trajectory on this grid, see [`integrate_guided`])
/// starts the first period's Newton iterations; later periods are guided by the one before.
#[allow(clippy::too_many_arguments)]
pub fn periodic_steady_state<S: ChargeSystem>(
    system: &S,
    guess: State,
    period_s: f64,
    steps: usize,
    step_tolerance: StepTolerance,
    steady: SteadyTolerance,
    monodromy: &mut Option<(usize, Lu)>,
    guide: Option<Vec<f64>>,
) -> Result<PeriodicSolution, IntegrationFailure> {
    let (n, m) = (system.unknowns(), system.charges());
    let d = n + m;
    let scale = system.current_scale();
    let rate = 2.0 * steps as f64 / period_s;
    let mut start = guess;
    let mut guide = guide;
    let mut last_residual = f64::INFINITY;
    let mut record = PeriodRecord::default();
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
        let (end, trajectory) = integrate_guided(
            system,
            &start,
            0.0,
            period_s,
            steps,
            step_tolerance,
            guide.as_deref(),
            Some(&mut record),
        )?;
        let mut change = vec![0.0; d];
        let mut residual: f64 = 0.0;
        let mut within = true;
        for k in 0..n {
            change[k] = end.x[k] - start.x[k];
            residual = residual.max(change[k].abs());
            within &= change[k].abs() <= steady.state;
        }
        for k in 0..m {
            change[n + k] = end.i[k] - start.i[k];
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
                trajectory,
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
                trajectory,
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
                _ => end.clone(),
            };
            for _ in 0..SETTLING_PERIODS {
                state = integrate(system, &state, 0.0, period_s, steps, step_tolerance, false)?.end;
            }
            start = state;
            *monodromy = None;
            last_residual = f64::INFINITY;
            best = None;
            slow_periods = 0;
            guide = None;
            continue;
        }
        if best.as_ref().is_none_or(|(_, good, _)| residual < *good) {
            best = Some((start.clone(), residual, end.clone()));
        }
        let stale = monodromy.as_ref().is_none_or(|(built, _)| *built != steps);
        if stale || residual > 0.1 * last_residual {
            // No matrix for this step count yet, or the chord step is not converging fast:
            // the Newton matrix of the period just integrated.
            let mut shifted = record.monodromy(system)?;
            for k in 0..d {
                shifted[k * d + k] -= 1.0;
            }
            *monodromy = Lu::factor(&shifted, d).map(|lu| (steps, lu));
            if monodromy.is_none() {
                return Err(IntegrationFailure {
                    time_s: period_s,
                    reason: "the shooting matrix is singular (a mode with the period's own time constant)".into(),
                });
            }
        }
        last_residual = residual;
        if let Some((_, lu)) = monodromy.as_ref() {
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
        guide = Some(trajectory);
    }
    Err(IntegrationFailure {
        time_s: period_s,
        reason: format!(
            "no periodic steady state within {} periods (last change over a period {latest:.3e}, tolerance {:.1e})",
            steady.max_iterations, steady.state
        ),
    })
}
