//! A stage fitted to bench measurements, and the model compared with the bench.
//!
//! The fit minimises `Σ w_m·(model − bench)²` over every measured value of the chosen
//! figures, in dB (the offset in mV), by Levenberg–Marquardt (the `levenberg-marquardt`
//! crate: MINPACK's scaled trust region with a pivoted QR, so the normal equations are never
//! squared). Bounds are kept by the sine transform `x = from + (to − from)·(1 + sin u)/2`
//! (the MINUIT convention): the optimiser moves `u` freely and `x` never leaves its bounds.
//! The Jacobian is taken by forward differences of the exact model (steps of 10⁻⁵ of a
//! parameter's range for memoryless stages, whose figures are smooth to about 10⁻⁹ dB, and
//! 10⁻³ for stages with charge storage, whose figures are refined to 0.002 dB).
//!
//! The optimiser starts from the best point of a coarse search: [`SCAN_POINTS`] values of
//! each parameter across its bounds, one parameter after the other, from the plan's values,
//! judged on at most [`COARSE_POINTS`] of the bench points.
//!
//! At the solution the Jacobian is taken again by central differences, in the parameters
//! themselves, and the covariance is the Gauss–Newton one, `s²·(JᵀJ)⁻¹` with
//! `s² = Σ w·r²/(m − p)` (the weights are relative). It is computed through the
//! eigen-decomposition of the column-scaled `JᵀJ`, whose smallest eigenvalues and
//! eigenvectors are the directions the data hardly see: a direction with an eigenvalue below
//! [`FLAT_EIGENVALUE`] of the largest is reported as not identifiable, naming the parameters
//! that move along it.
//!
//! Results are typed values; the report layer records and words them.

use crate::error::{Error, SolveFailure};
use crate::measure::small_signal::offset_voltage;
use crate::measure::stage::{DriveSettings, StageMeasurements};
use crate::model::circuit::StageCircuit;
use crate::model::measurement::{
    fitted_name, BenchFigure, BenchPoint, FitSettings, Measurements, StageParameter,
};
use crate::model::plan::Plan;
use crate::model::stage::Stage;
use crate::solve::response::ResponseEngine;
use crate::solve::spectrum::FftCache;
use levenberg_marquardt::{LeastSquaresProblem, LevenbergMarquardt, TerminationReason};
use nalgebra::storage::Owned;
use nalgebra::{DMatrix, DVector, Dyn, SymmetricEigen};
use rayon::prelude::*;
use std::cell::{Cell, RefCell};
use std::sync::Arc;

/// Relative change of the objective at which the fit has converged (MINPACK's `ftol`). A
/// change of one standard error in a parameter changes the objective by about 1/m of itself,
/// so this leaves the parameters within about a hundredth of a standard error of the minimum.
pub const OBJECTIVE_TOLERANCE: f64 = 1e-7;
/// Relative change of the scaled parameters at which the fit has converged (`xtol`).
pub const PARAMETER_TOLERANCE: f64 = 1e-7;
/// Largest cosine between the residuals and any Jacobian column at a minimum (`gtol`).
pub const GRADIENT_TOLERANCE: f64 = 1e-7;
/// The optimiser stops after this many residual evaluations per parameter (plus one).
pub const PATIENCE: usize = 40;
/// Values of each parameter tried across its bounds, one parameter after the other, before
/// the optimiser starts from the best (a coarse search that keeps a local optimiser away from
/// a poor start, such as a mismatch of exactly zero whose even harmonics vanish).
pub const SCAN_POINTS: usize = 8;
/// Most bench points the coarse search evaluates (every k-th point of a longer file).
pub const COARSE_POINTS: usize = 48;
/// An eigenvalue of the column-scaled JᵀJ below this fraction of the largest marks a
/// direction the data do not determine (the parameters moving along it are not separately
/// identifiable).
pub const FLAT_EIGENVALUE: f64 = 1e-8;
/// A parameter whose standard error exceeds this fraction of its bounds' span is hardly
/// constrained by the data.
pub const LOOSE_FRACTION: f64 = 0.25;
/// A parameter moving the weighted residual vector by less than this (dB) across its whole
/// range has no effect on the fitted figures.
pub const NO_EFFECT_DB: f64 = 1e-6;

/// What the fit is doing, for a progress display.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct FitProgress {
    /// Index of the stage in the plan.
    pub stage_index: usize,
    /// Model evaluations so far (each over every measured point).
    pub evaluations: usize,
    /// Root-mean-square weighted residual of the last evaluation, dB.
    pub rms: f64,
}

/// One measured value next to the model's.
#[derive(Debug, Clone, PartialEq)]
pub struct ComparedValue {
    /// Index of the point in [`BenchComparison::points`].
    pub point: usize,
    /// The figure.
    pub figure: BenchFigure,
    /// The bench value (dB, dBc or V).
    pub bench: f64,
    /// The model's value; `None` below the analysis floor.
    pub model: Option<f64>,
    /// The analysis floor of the model's value, dBc (a harmonic below it counts as this in
    /// the fit).
    pub floor_dbc: f64,
    /// Whether the value enters the fit.
    pub in_fit: bool,
}

impl ComparedValue {
    /// Model − bench in the fit's unit (dB; mV for the offset); `None` when the model is
    /// below the floor.
    pub fn residual(&self) -> Option<f64> {
        self.model.map(|m| self.figure.residual(m, self.bench))
    }
}

/// A bench file compared with one model stage (the nominal one, or its fitted twin).
#[derive(Debug, Clone, PartialEq)]
pub struct BenchComparison {
    /// The plan stage the bench part implements.
    pub measured_stage: String,
    /// The model stage compared (`measured_stage` or `<measured_stage>@fitted`).
    pub model_stage: String,
    /// The bench file as named in the plan.
    pub file: String,
    /// The measured points, in file order.
    pub points: Vec<BenchPoint>,
    /// Every measured value with the model's, point by point in column order.
    pub values: Vec<ComparedValue>,
}

/// Why the optimiser stopped.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum FitTermination {
    /// The objective or the parameters stopped changing within the tolerances, or the
    /// residuals are orthogonal to the Jacobian (a stationary point).
    Converged,
    /// The evaluation budget ran out before convergence.
    OutOfEvaluations,
    /// The tolerances are below what rounding allows; the last point is the best reachable.
    RoundingLimited,
}

/// One fitted parameter.
#[derive(Debug, Clone, PartialEq)]
pub struct FittedParameter {
    /// The dotted stage key.
    pub key: String,
    /// Unit symbol (empty for ratios and numbers).
    pub unit: &'static str,
    /// The value the fit started from (the plan's, moved inside the bounds).
    pub start: f64,
    /// The fitted value.
    pub value: f64,
    /// Standard error from the Gauss–Newton covariance; `None` when the parameter has no
    /// effect on the fitted figures.
    pub standard_error: Option<f64>,
    /// Lower bound.
    pub from: f64,
    /// Upper bound.
    pub to: f64,
    /// Whether the value sits at a bound (within 10⁻⁶ of the span).
    pub at_bound: bool,
}

impl FittedParameter {
    /// Whether the data locate the parameter well inside its bounds: it has an effect and
    /// its standard error is at most [`LOOSE_FRACTION`] of the span.
    pub fn is_constrained(&self) -> bool {
        self.standard_error
            .is_some_and(|se| se <= LOOSE_FRACTION * (self.to - self.from))
    }
}

/// A direction of the parameters along which the residuals hardly change.
#[derive(Debug, Clone, PartialEq)]
pub struct FlatDirection {
    /// Eigenvalue of the column-scaled JᵀJ relative to the largest.
    pub relative_eigenvalue: f64,
    /// `(parameter index, component)` of the unit eigenvector in scaled parameters (each
    /// parameter in units of its own sensitivity), components above 0.1 in size, largest first.
    pub components: Vec<(usize, f64)>,
}

/// A stage fitted to its bench data.
#[derive(Debug, Clone)]
pub struct FitOutcome {
    /// Index of the nominal stage in the plan.
    pub stage_index: usize,
    /// The nominal stage's name.
    pub stage: String,
    /// The fitted stage (named `<stage>@fitted`), evaluated through the whole plan.
    pub fitted: Stage,
    /// The fitted parameters, in plan order.
    pub parameters: Vec<FittedParameter>,
    /// The figures fitted.
    pub metrics: Vec<BenchFigure>,
    /// Correlation matrix of the parameters (`None` where a standard error is).
    pub correlation: Vec<Vec<Option<f64>>>,
    /// Values entering the fit (m).
    pub residual_count: usize,
    /// Root-mean-square weighted residual before the fit (the plan's stage), dB.
    pub rms_before: f64,
    /// Root-mean-square weighted residual after the fit, dB.
    pub rms_after: f64,
    /// `s = sqrt(Σ w·r²/(m − p))`, the residual scale the standard errors carry, dB.
    pub residual_scale: f64,
    /// Model evaluations used (each over every measured point), Jacobians included.
    pub evaluations: usize,
    /// Why the optimiser stopped.
    pub termination: FitTermination,
    /// Directions the data do not determine.
    pub flat_directions: Vec<FlatDirection>,
}

/// Where each fitted value comes from.
struct Slot {
    point: usize,
    figure: BenchFigure,
    bench: f64,
    sqrt_weight: f64,
}

/// The model values one stage owes the bench points: grouped by process corner and
/// temperature, so each group's engine is built once.
struct Layout<'p> {
    points: Vec<&'p BenchPoint>,
    /// `(corner index, temperature, point indices)`.
    groups: Vec<(usize, f64, Vec<usize>)>,
}

impl<'p> Layout<'p> {
    fn new(plan: &Plan, points: Vec<&'p BenchPoint>) -> Self {
        let mut groups: Vec<(usize, f64, Vec<usize>)> = Vec::new();
        for (index, point) in points.iter().enumerate() {
            let corner = point
                .corner
                .as_ref()
                .and_then(|name| plan.corners.iter().position(|c| &c.name == name))
                .unwrap_or(0);
            match groups
                .iter_mut()
                .find(|(c, t, _)| *c == corner && *t == point.temperature_c)
            {
                Some(group) => group.2.push(index),
                None => groups.push((corner, point.temperature_c, vec![index])),
            }
        }
        Layout { points, groups }
    }
}

/// A model value and the analysis floor it was measured against.
#[derive(Debug, Clone, Copy)]
struct Level {
    value: Option<f64>,
    floor_dbc: f64,
}

/// The model's figures at every `(point, figure)` asked for, in the order asked.
fn model_levels(
    plan: &Plan,
    stage: &Stage,
    layout: &Layout,
    wanted: &[(usize, BenchFigure)],
    cache: &Arc<FftCache>,
) -> Result<Vec<Level>, Error> {
    let settings = DriveSettings::of(&plan.drive);
    let mut levels = vec![
        Level {
            value: None,
            floor_dbc: 0.0
        };
        wanted.len()
    ];
    let group_results = layout
        .groups
        .par_iter()
        .map(|(corner, temperature, indices)| {
            let built = plan.corners[*corner].apply(stage);
            let measured = StageMeasurements::new(
                crate::solve::engine::engine_for(
                    StageCircuit::new(&built, *temperature),
                    cache.clone(),
                ),
                settings,
            );
            let fail = |failure: SolveFailure| Error::solve(&stage.name, *temperature, failure);
            let needs_offset = wanted
                .iter()
                .any(|(p, f)| *f == BenchFigure::Offset && indices.contains(p));
            let offset = if needs_offset {
                Some(offset_voltage(measured.engine().static_solver()).map_err(fail)?)
            } else {
                None
            };
            indices
                .par_iter()
                .map(|&index| {
                    let figures: Vec<(usize, BenchFigure)> = wanted
                        .iter()
                        .enumerate()
                        .filter(|(_, (p, _))| *p == index)
                        .map(|(slot, (_, f))| (slot, *f))
                        .collect();
                    point_levels(
                        measured.engine(),
                        &settings,
                        layout.points[index],
                        &figures,
                        offset,
                    )
                    .map_err(|failure| {
                        fail(crate::study::case::at_drive_point(
                            failure,
                            layout.points[index].amplitude_v,
                            layout.points[index].frequency_hz,
                        ))
                    })
                })
                .collect::<Result<Vec<_>, Error>>()
        })
        .collect::<Result<Vec<_>, Error>>()?;
    for (slot, level) in group_results.into_iter().flatten().flatten() {
        levels[slot] = level;
    }
    Ok(levels)
}

/// The figures of one bench point from the engine: one tone for the levels, two tones for
/// intermodulation.
fn point_levels(
    engine: &dyn ResponseEngine,
    settings: &DriveSettings,
    point: &BenchPoint,
    figures: &[(usize, BenchFigure)],
    offset: Option<f64>,
) -> Result<Vec<(usize, Level)>, SolveFailure> {
    // Only the orders compared are analysed (and refined to convergence): THD's span when THD
    // is compared, otherwise the highest harmonic, at least the third.
    let harmonics = figures
        .iter()
        .map(|(_, f)| match f {
            BenchFigure::Harmonic(order) => *order,
            BenchFigure::Thd => settings.thd_harmonics,
            _ => 3,
        })
        .max()
        .unwrap_or(3);
    let tone = if figures
        .iter()
        .any(|(_, f)| !f.is_two_tone() && *f != BenchFigure::Offset)
    {
        Some(engine.tone(point.amplitude_v, point.frequency_hz, harmonics)?)
    } else {
        None
    };
    let two = if figures.iter().any(|(_, f)| f.is_two_tone()) {
        Some(engine.two_tone(
            point.amplitude_v,
            point.frequency_hz,
            settings.spacing_at(point.frequency_hz),
        )?)
    } else {
        None
    };
    let mut out = Vec::with_capacity(figures.len());
    for &(slot, figure) in figures {
        let floor_dbc = tone
            .as_ref()
            .map_or(crate::solve::spectrum::ANALYSIS_FLOOR_DBC, |t| t.floor_dbc);
        let above = |level: f64| (level >= floor_dbc).then_some(level);
        let value = match (figure, &tone, &two) {
            (BenchFigure::Gain, Some(t), _) => {
                Some(20.0 * (t.differential.fundamental() / point.amplitude_v).log10())
            }
            (BenchFigure::Fundamental, Some(t), _) => Some(t.differential.fundamental()),
            (BenchFigure::Harmonic(order), Some(t), _) => {
                t.differential.harmonic_dbc(order, floor_dbc)
            }
            (BenchFigure::Thd, Some(t), _) => {
                above(t.differential.raw_thd_dbc(settings.thd_harmonics))
            }
            (BenchFigure::Im3, _, Some(r)) => above(r.im3_dbc()),
            (BenchFigure::Im2, _, Some(r)) => above(r.im2_dbc()),
            (BenchFigure::Offset, _, _) => offset,
            _ => None,
        };
        out.push((slot, Level { value, floor_dbc }));
    }
    Ok(out)
}

/// Every measured value of a bench file, compared with `stage`'s model (`in_fit` marks the
/// figures a fit uses).
pub fn compare(
    plan: &Plan,
    stage: &Stage,
    measurements: &Measurements,
    cache: &Arc<FftCache>,
) -> Result<BenchComparison, Error> {
    let layout = Layout::new(plan, measurements.points.iter().collect());
    let wanted: Vec<(usize, BenchFigure)> = measurements
        .points
        .iter()
        .enumerate()
        .flat_map(|(i, p)| p.values.iter().map(move |(f, _)| (i, *f)))
        .collect();
    let levels = model_levels(plan, stage, &layout, &wanted, cache)?;
    let fitted = plan
        .fit
        .as_ref()
        .map(|f| f.metrics.clone())
        .unwrap_or_default();
    let values = wanted
        .iter()
        .zip(levels)
        .map(|(&(point, figure), level)| ComparedValue {
            point,
            figure,
            bench: measurements.points[point].value(figure).unwrap_or(f64::NAN),
            model: level.value,
            floor_dbc: level.floor_dbc,
            in_fit: fitted.contains(&figure),
        })
        .collect();
    Ok(BenchComparison {
        measured_stage: measurements.stage.clone(),
        model_stage: stage.name.clone(),
        file: measurements.file.clone(),
        points: measurements.points.clone(),
        values,
    })
}

/// The fit of one stage: the plan, the bench values and the bounds.
struct FitContext<'p> {
    plan: &'p Plan,
    nominal: &'p Stage,
    settings: &'p FitSettings,
    parameters: Vec<&'static StageParameter>,
    layout: Layout<'p>,
    slots: Vec<Slot>,
    cache: Arc<FftCache>,
    /// Forward-difference step as a fraction of each parameter's span.
    step_fraction: f64,
}

impl FitContext<'_> {
    fn stage_at(&self, x: &[f64]) -> Stage {
        let mut stage = self.nominal.clone();
        for (parameter, value) in self.parameters.iter().zip(x) {
            parameter.set(&mut stage, *value);
        }
        stage
    }

    /// Weighted residuals at parameters `x`.
    fn residuals(&self, x: &[f64]) -> Result<DVector<f64>, Error> {
        let wanted: Vec<(usize, BenchFigure)> =
            self.slots.iter().map(|s| (s.point, s.figure)).collect();
        let levels = model_levels(
            self.plan,
            &self.stage_at(x),
            &self.layout,
            &wanted,
            &self.cache,
        )?;
        Ok(DVector::from_iterator(
            self.slots.len(),
            self.slots.iter().zip(levels).map(|(slot, level)| {
                let model = level.value.unwrap_or(level.floor_dbc);
                slot.sqrt_weight * slot.figure.residual(model, slot.bench)
            }),
        ))
    }

    fn span(&self, j: usize) -> (f64, f64) {
        let p = &self.settings.parameters[j];
        (p.from, p.to)
    }

    fn to_parameters(&self, u: &DVector<f64>) -> Vec<f64> {
        u.iter()
            .enumerate()
            .map(|(j, u)| {
                let (from, to) = self.span(j);
                (from + (to - from) * 0.5 * (1.0 + u.sin())).clamp(from, to)
            })
            .collect()
    }

    /// The step for parameter `j` at `x`, pointing into the bounds.
    fn step(&self, j: usize, x: f64) -> f64 {
        let (from, to) = self.span(j);
        let h = self.step_fraction * (to - from);
        if x + h > to {
            -h
        } else {
            h
        }
    }

    /// The Jacobian of the weighted residuals with respect to the parameters themselves, by
    /// forward differences from `base` (the residuals at `x`) or, when `central`, by central
    /// differences (one-sided at a bound).
    fn jacobian(
        &self,
        x: &[f64],
        base: &DVector<f64>,
        central: bool,
        evaluations: &Cell<usize>,
    ) -> Result<DMatrix<f64>, Error> {
        let mut jacobian = DMatrix::zeros(base.len(), x.len());
        for j in 0..x.len() {
            let (from, to) = self.span(j);
            let h = self.step(j, x[j]);
            let mut ahead = x.to_vec();
            ahead[j] = x[j] + h;
            let forward = self.residuals(&ahead)?;
            evaluations.set(evaluations.get() + 1);
            let behind = x[j] - h;
            let column = if central && behind >= from && behind <= to {
                let mut back = x.to_vec();
                back[j] = behind;
                let backward = self.residuals(&back)?;
                evaluations.set(evaluations.get() + 1);
                (forward - backward) / (2.0 * h)
            } else {
                (forward - base) / h
            };
            jacobian.set_column(j, &column);
        }
        Ok(jacobian)
    }
}

/// The least-squares problem in the transformed parameters `u`, as the optimiser sees it.
struct Problem<'c, 'p> {
    context: &'c FitContext<'p>,
    u: DVector<f64>,
    current: Option<DVector<f64>>,
    failure: RefCell<Option<Error>>,
    evaluations: Cell<usize>,
    progress: &'c (dyn Fn(FitProgress) + Sync),
    stage_index: usize,
}

impl Problem<'_, '_> {
    fn fail(&self, error: Error) {
        self.failure.borrow_mut().get_or_insert(error);
    }
}

impl LeastSquaresProblem<f64, Dyn, Dyn> for Problem<'_, '_> {
    type ResidualStorage = Owned<f64, Dyn>;
    type JacobianStorage = Owned<f64, Dyn, Dyn>;
    type ParameterStorage = Owned<f64, Dyn>;

    fn set_params(&mut self, u: &DVector<f64>) {
        self.u.copy_from(u);
        let x = self.context.to_parameters(u);
        self.current = match self.context.residuals(&x) {
            Ok(r) => {
                let count = self.evaluations.get() + 1;
                self.evaluations.set(count);
                (self.progress)(FitProgress {
                    stage_index: self.stage_index,
                    evaluations: count,
                    rms: r.norm() / (r.len() as f64).sqrt(),
                });
                Some(r)
            }
            Err(error) => {
                self.fail(error);
                None
            }
        };
    }

    fn params(&self) -> DVector<f64> {
        self.u.clone()
    }

    fn residuals(&self) -> Option<DVector<f64>> {
        self.current.clone()
    }

    fn jacobian(&self) -> Option<DMatrix<f64>> {
        let base = self.current.as_ref()?;
        let x = self.context.to_parameters(&self.u);
        match self.context.jacobian(&x, base, false, &self.evaluations) {
            Ok(mut jacobian) => {
                // Chain rule through x = from + (to − from)·(1 + sin u)/2.
                for j in 0..x.len() {
                    let (from, to) = self.context.span(j);
                    let dx_du = 0.5 * (to - from) * self.u[j].cos();
                    jacobian.column_mut(j).scale_mut(dx_du);
                }
                Some(jacobian)
            }
            Err(error) => {
                self.fail(error);
                None
            }
        }
    }
}

/// The fitted values of `points`, in point order and the settings' metric order.
fn slots_of(points: &[&BenchPoint], settings: &FitSettings) -> Vec<Slot> {
    let mut slots = Vec::new();
    for (index, point) in points.iter().enumerate() {
        for figure in &settings.metrics {
            if let Some(bench) = point.value(*figure) {
                slots.push(Slot {
                    point: index,
                    figure: *figure,
                    bench,
                    sqrt_weight: settings.weight(*figure).sqrt(),
                });
            }
        }
    }
    slots
}

/// Fits stage `stage_index` of `plan` to every bench file of it.
pub fn fit_stage(
    plan: &Plan,
    settings: &FitSettings,
    stage_index: usize,
    cache: &Arc<FftCache>,
    progress: &(dyn Fn(FitProgress) + Sync),
) -> Result<FitOutcome, Error> {
    let nominal = &plan.stages[stage_index];
    let fit_error = |reason: String| Error::Fit {
        stage: nominal.name.clone(),
        reason,
    };
    let points: Vec<&BenchPoint> = plan
        .measurements
        .iter()
        .filter(|m| m.stage == nominal.name)
        .flat_map(|m| &m.points)
        .collect();
    let slots = slots_of(&points, settings);
    let parameters: Vec<&'static StageParameter> = settings
        .parameters
        .iter()
        .map(|p| {
            StageParameter::find(&p.key)
                .ok_or_else(|| fit_error(format!("`{}` is not a parameter a fit can move", p.key)))
        })
        .collect::<Result<_, _>>()?;
    let p = parameters.len();
    if slots.len() <= p {
        return Err(fit_error(format!(
            "{} measured value(s) for {p} parameter(s)",
            slots.len()
        )));
    }
    // A fit that may add charge storage (transit time, capacitances) is solved as a dynamic
    // stage at its upper bounds: take the coarser step wherever the engine may be dynamic.
    let upper: Vec<f64> = settings.parameters.iter().map(|p| p.to).collect();
    let mut at_upper = nominal.clone();
    for (parameter, value) in parameters.iter().zip(&upper) {
        parameter.set(&mut at_upper, *value);
    }
    let memoryless = StageCircuit::new(nominal, 27.0).is_memoryless()
        && StageCircuit::new(&at_upper, 27.0).is_memoryless();
    // The coarse search runs on at most COARSE_POINTS of the points, evenly spread.
    let stride = points.len().div_ceil(COARSE_POINTS).max(1);
    let coarse_points: Vec<&BenchPoint> = points.iter().step_by(stride).copied().collect();
    let coarse = FitContext {
        plan,
        nominal,
        settings,
        slots: slots_of(&coarse_points, settings),
        layout: Layout::new(plan, coarse_points),
        cache: cache.clone(),
        step_fraction: 0.0,
        parameters: parameters.clone(),
    };
    let context = FitContext {
        plan,
        nominal,
        settings,
        layout: Layout::new(plan, points),
        slots,
        cache: cache.clone(),
        step_fraction: if memoryless { 1e-5 } else { 1e-3 },
        parameters,
    };

    // Start from the plan's values, moved inside the bounds (the transform's derivative
    // vanishes on them).
    let start: Vec<f64> = context
        .parameters
        .iter()
        .enumerate()
        .map(|(j, parameter)| {
            let (from, to) = context.span(j);
            let fraction = ((parameter.get(nominal) - from) / (to - from)).clamp(0.02, 0.98);
            from + fraction * (to - from)
        })
        .collect();
    let nominal_values: Vec<f64> = context.parameters.iter().map(|p| p.get(nominal)).collect();
    let before = context.residuals(&nominal_values)?;
    let rms_before = before.norm() / (before.len() as f64).sqrt();
    let mut evaluations = 1;

    // Coarse search on the thinned points: each parameter across its bounds in turn,
    // keeping the best point.
    let mut best_x = start.clone();
    let mut lowest = coarse.residuals(&best_x)?.norm_squared();
    for j in 0..p {
        let (from, to) = context.span(j);
        for k in 0..SCAN_POINTS {
            let mut trial = best_x.clone();
            trial[j] = from + (to - from) * (k as f64 + 0.5) / SCAN_POINTS as f64;
            let objective = coarse.residuals(&trial)?.norm_squared();
            if objective < lowest {
                lowest = objective;
                best_x = trial;
            }
        }
        progress(FitProgress {
            stage_index,
            evaluations,
            rms: (lowest / coarse.slots.len() as f64).sqrt(),
        });
    }
    let best = context.residuals(&best_x)?;
    evaluations += 1;
    let u0 = DVector::from_iterator(
        p,
        best_x.iter().enumerate().map(|(j, x)| {
            let (from, to) = context.span(j);
            (2.0 * (x - from) / (to - from) - 1.0)
                .clamp(-1.0, 1.0)
                .asin()
        }),
    );

    let problem = Problem {
        context: &context,
        u: u0,
        current: Some(best),
        failure: RefCell::new(None),
        evaluations: Cell::new(evaluations),
        progress,
        stage_index,
    };
    let (problem, report) = LevenbergMarquardt::new()
        .with_ftol(OBJECTIVE_TOLERANCE)
        .with_xtol(PARAMETER_TOLERANCE)
        .with_gtol(GRADIENT_TOLERANCE)
        .with_patience(PATIENCE)
        .minimize(problem);
    if let Some(error) = problem.failure.borrow_mut().take() {
        return Err(error);
    }
    let termination = match report.termination {
        TerminationReason::Converged { .. }
        | TerminationReason::Orthogonal
        | TerminationReason::ResidualsZero => FitTermination::Converged,
        TerminationReason::LostPatience => FitTermination::OutOfEvaluations,
        TerminationReason::NoImprovementPossible(_) => FitTermination::RoundingLimited,
        other => return Err(fit_error(format!("the optimiser stopped: {other:?}"))),
    };
    let evaluations = problem.evaluations.get();
    let x = context.to_parameters(&problem.u);

    // Statistics at the solution, in the parameters themselves.
    let counter = Cell::new(evaluations);
    let residuals = context.residuals(&x)?;
    counter.set(counter.get() + 1);
    let jacobian = context.jacobian(&x, &residuals, true, &counter)?;
    let m = residuals.len();
    let sum_of_squares = residuals.norm_squared();
    let residual_scale = (sum_of_squares / (m - p) as f64).sqrt();
    let spans: Vec<f64> = (0..p)
        .map(|j| context.span(j).1 - context.span(j).0)
        .collect();
    let covariance = covariance(&jacobian, residual_scale, &spans);

    let fitted_parameters: Vec<FittedParameter> = (0..p)
        .map(|j| {
            let (from, to) = context.span(j);
            let span = to - from;
            FittedParameter {
                key: settings.parameters[j].key.clone(),
                unit: context.parameters[j].unit,
                start: start[j],
                value: x[j],
                standard_error: covariance.matrix[j][j].map(f64::sqrt),
                from,
                to,
                at_bound: x[j] - from <= 1e-6 * span || to - x[j] <= 1e-6 * span,
            }
        })
        .collect();
    let correlation = (0..p)
        .map(|i| {
            (0..p)
                .map(|j| {
                    match (
                        covariance.matrix[i][j],
                        covariance.matrix[i][i],
                        covariance.matrix[j][j],
                    ) {
                        (Some(c), Some(a), Some(b)) if a > 0.0 && b > 0.0 => {
                            Some((c / (a * b).sqrt()).clamp(-1.0, 1.0))
                        }
                        _ => None,
                    }
                })
                .collect()
        })
        .collect();
    let mut fitted = context.stage_at(&x);
    fitted.name = fitted_name(&nominal.name);
    Ok(FitOutcome {
        stage_index,
        stage: nominal.name.clone(),
        fitted,
        parameters: fitted_parameters,
        metrics: settings.metrics.clone(),
        correlation,
        residual_count: m,
        rms_before,
        rms_after: (sum_of_squares / m as f64).sqrt(),
        residual_scale,
        evaluations: counter.get(),
        termination,
        flat_directions: covariance.flat_directions,
    })
}

/// The Gauss–Newton covariance and the directions the data do not determine.
struct Covariance {
    /// `s²·(JᵀJ)⁻¹`; `None` in the rows and columns of parameters without effect.
    matrix: Vec<Vec<Option<f64>>>,
    flat_directions: Vec<FlatDirection>,
}

/// `s²·(JᵀJ)⁻¹` through the eigen-decomposition of the column-scaled `JᵀJ` (unit diagonal),
/// which keeps parameters of very different units (ohms, amperes, fractions) well scaled.
/// Parameters that move the residuals by less than [`NO_EFFECT_DB`] across their span are
/// left out (their standard error is unbounded).
fn covariance(jacobian: &DMatrix<f64>, scale: f64, spans: &[f64]) -> Covariance {
    let p = jacobian.ncols();
    let norms: Vec<f64> = (0..p).map(|j| jacobian.column(j).norm()).collect();
    let active: Vec<usize> = (0..p)
        .filter(|&j| norms[j] * spans[j] > NO_EFFECT_DB && norms[j].is_finite())
        .collect();
    let mut matrix = vec![vec![None; p]; p];
    let mut flat_directions = Vec::new();
    if active.is_empty() {
        return Covariance {
            matrix,
            flat_directions,
        };
    }
    let k = active.len();
    let scaled = DMatrix::from_fn(jacobian.nrows(), k, |i, a| {
        jacobian[(i, active[a])] / norms[active[a]]
    });
    let normal = scaled.transpose() * &scaled;
    let eigen = SymmetricEigen::new(normal);
    let largest = eigen.eigenvalues.max();
    let mut inverse = DMatrix::<f64>::zeros(k, k);
    for (e, &lambda) in eigen.eigenvalues.iter().enumerate() {
        let vector = eigen.eigenvectors.column(e);
        if lambda < FLAT_EIGENVALUE * largest {
            let mut components: Vec<(usize, f64)> = (0..k)
                .filter(|&a| vector[a].abs() > 0.1)
                .map(|a| (active[a], vector[a]))
                .collect();
            components.sort_by(|a, b| b.1.abs().total_cmp(&a.1.abs()));
            flat_directions.push(FlatDirection {
                relative_eigenvalue: (lambda / largest).max(0.0),
                components,
            });
        }
        if lambda > 0.0 {
            inverse += vector * vector.transpose() / lambda;
        } else {
            // Singular to rounding: the direction is unbounded.
            inverse += vector * vector.transpose() * f64::INFINITY;
        }
    }
    for (a, &i) in active.iter().enumerate() {
        for (b, &j) in active.iter().enumerate() {
            let value = scale * scale * inverse[(a, b)] / (norms[i] * norms[j]);
            matrix[i][j] = value.is_finite().then_some(value);
        }
    }
    Covariance {
        matrix,
        flat_directions,
    }
}

/// Fits every stage with bench data, in plan order.
pub fn fit_all(
    plan: &Plan,
    cache: &Arc<FftCache>,
    progress: &(dyn Fn(FitProgress) + Sync),
) -> Result<Vec<FitOutcome>, Error> {
    let Some(settings) = &plan.fit else {
        return Ok(Vec::new());
    };
    plan.stages
        .iter()
        .enumerate()
        .filter(|(_, s)| plan.measurements.iter().any(|m| m.stage == s.name))
        .map(|(index, _)| fit_stage(plan, settings, index, cache, progress))
        .collect()
}

/// The plan with each fitted stage inserted right after its nominal one.
pub fn with_fitted_stages(plan: &Plan, fits: &[FitOutcome]) -> Plan {
    let mut augmented = plan.clone();
    augmented.stages.clear();
    for (index, stage) in plan.stages.iter().enumerate() {
        augmented.stages.push(stage.clone());
        if let Some(fit) = fits.iter().find(|f| f.stage_index == index) {
            augmented.stages.push(fit.fitted.clone());
        }
    }
    augmented
}
