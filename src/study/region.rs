//! Sizing over a region of two variables: the least tail current (or the least value of
//! whichever variable `minimise` names) for which some value of the other variable meets every
//! budget line, at every temperature and in every corner, by the guard band.
//!
//! The search has three steps.
//!
//! 1. **Map.** A grid of [`PRIMARY_POINTS`] values of the variable to minimise (geometric for
//!    the tail current, even for a range that may start at zero) by [`SECONDARY_POINTS`] values
//!    of the other one is evaluated in parallel. Every grid point is a full trial of
//!    [`crate::study::sizing`] (each line measured in each corner) at each temperature; a point
//!    *holds* when every trial holds. The map keeps, per point, the line with the least excess
//!    margin over the guard band: for a point that fails, the line that fails it worst.
//! 2. **Best other value.** At a fixed value of the minimised variable, the worst excess
//!    margin over the lines is maximised over the other variable: the grid row's best point,
//!    then golden-section search between its grid neighbours down to [`SECONDARY_REFINE`] of
//!    the range. Distortion pulls degeneration up and noise and gain pull it down, so the worst
//!    excess is a peaked function with its best value where two lines cross.
//! 3. **Least value.** Between the last grid row with no holding point and the first with one,
//!    bisection on that best excess (geometric for the current) until the bracket is within
//!    [`PRIMARY_REFINE`] of the value. The answer is the verified holding end of the bracket.
//!
//! As in the one-variable search, a region narrower than one grid step in both directions can
//! be missed, and yield lines are judged on the recommended design's full evaluation (the
//! caller raises the answer along the map when a yield line fails there).
//!
//! The map also gives the *Pareto fronts* of supply current against input noise and against
//! the binding distortion figure: in each grid row, the design meeting every line except the
//! front's own (every distortion line, for the distortion front) with the best figure (its edge towards the better neighbour refined by
//! bisection, since the figure is best where another line closes the row), and of those the
//! ones no other beats on both current and figure.

use crate::error::Error;
use crate::model::budget::Metric;
use crate::model::plan::{Plan, SizingSettings, SizingVariable};
use crate::model::stage::Stage;
use crate::solve::spectrum::FftCache;
use crate::study::sizing::{margin_key, planned_gain, trial, Binding, Criterion, Trial};
use rayon::prelude::*;
use std::sync::Arc;

/// Grid values of the variable to minimise.
pub const PRIMARY_POINTS: usize = 17;
/// Grid values of the other variable.
pub const SECONDARY_POINTS: usize = 17;
/// Relative width of the final bracket on the minimised variable.
pub const PRIMARY_REFINE: f64 = 1e-3;
/// Width of the golden-section bracket on the other variable, relative to its range.
pub const SECONDARY_REFINE: f64 = 1e-4;
/// Bisection steps refining each grid row's edge on a Pareto front (1/256 of a grid step).
pub const FRONT_BISECTIONS: usize = 8;
/// Most bisection steps on the minimised variable (the bracket starts one grid step wide).
const MAX_BISECTIONS: usize = 40;

/// One variable of the region: its range and grid.
#[derive(Debug, Clone, PartialEq)]
pub struct Axis {
    /// Which stage value.
    pub variable: SizingVariable,
    /// Lower end of the range.
    pub from: f64,
    /// Upper end of the range.
    pub to: f64,
    /// Grid values, increasing.
    pub grid: Vec<f64>,
}

impl Axis {
    fn new(variable: SizingVariable, from: f64, to: f64, points: usize) -> Self {
        let geometric = variable.geometric() && from > 0.0;
        let grid = (0..points)
            .map(|i| {
                let t = i as f64 / (points - 1) as f64;
                if geometric {
                    from * (to / from).powf(t)
                } else {
                    from + (to - from) * t
                }
            })
            .collect();
        Axis {
            variable,
            from,
            to,
            grid,
        }
    }

    /// The value halfway between `low` and `high` on this axis's spacing.
    fn middle(&self, low: f64, high: f64) -> f64 {
        if self.variable.geometric() && low > 0.0 {
            (low * high).sqrt()
        } else {
            0.5 * (low + high)
        }
    }
}

/// One design of the region, evaluated at every temperature.
#[derive(Debug, Clone)]
pub struct RegionPoint {
    /// Value of the minimised variable.
    pub primary: f64,
    /// Value of the other variable (`None` when only one variable is sized).
    pub secondary: Option<f64>,
    /// The trial at each temperature, in plan order.
    pub trials: Vec<Trial>,
    /// Every counted line holds by the guard band at every temperature (and headroom, with
    /// `hold_gain`).
    pub holds: bool,
    /// Least excess margin over the guard band across lines and temperatures, dB (a margin in
    /// volts counts 10 mV as 1 dB).
    pub excess: f64,
    /// The line with that least excess: the one limiting this design.
    pub limiting: Binding,
    /// Temperature where the limiting line is worst, °C.
    pub limiting_temperature_c: f64,
    /// Whether each budget line holds by the guard band at every temperature (true for yield
    /// lines, which a trial does not judge).
    pub line_holds: Vec<bool>,
    /// Each line's worst margin across temperatures, dB (V for collector-base margin lines).
    pub margins: Vec<Option<f64>>,
    /// Each line's value where its margin is worst.
    pub values: Vec<Option<f64>>,
    /// Largest input noise density across temperatures, V/√Hz.
    pub input_noise_v_rthz: f64,
}

impl RegionPoint {
    /// Tail current of this design, A.
    pub fn tail_current(&self) -> f64 {
        self.trials.first().map_or(f64::NAN, |t| t.tail_current)
    }

    /// Emitter resistance per side of this design, Ω.
    pub fn emitter_resistance(&self) -> f64 {
        self.trials
            .first()
            .map_or(f64::NAN, |t| t.emitter_resistance)
    }

    /// Load resistance per side at the first temperature, Ω (rescaled with `hold_gain`).
    pub fn load_resistance(&self) -> f64 {
        self.trials.first().map_or(f64::NAN, |t| t.load_resistance)
    }
}

/// A run of holding grid points along the other variable, in one grid row.
#[derive(Debug, Clone, PartialEq)]
pub struct Span {
    /// Least grid value of the other variable that holds.
    pub low: f64,
    /// Greatest grid value that holds.
    pub high: f64,
    /// The line failing the grid point just below `low` (`None`: `low` is the range's end).
    pub below: Option<Binding>,
    /// The line failing the grid point just above `high` (`None`: the range's end).
    pub above: Option<Binding>,
}

/// One grid row of the map, summed up: where the other variable may lie, and what stops it.
#[derive(Debug, Clone, PartialEq)]
pub struct RegionRow {
    /// Value of the minimised variable.
    pub primary: f64,
    /// The holding runs, in increasing value of the other variable.
    pub spans: Vec<Span>,
    /// When nothing in the row holds: the line limiting the row's best point.
    pub limiting: Option<Binding>,
}

/// One point of a Pareto front: a design no other grid design beats on both supply current
/// and the front's figure.
#[derive(Debug, Clone, PartialEq)]
pub struct FrontPoint {
    /// Tail current, A.
    pub tail_current: f64,
    /// Emitter resistance per side, Ω.
    pub emitter_resistance: f64,
    /// The figure: input noise density (V/√Hz) or the distortion line's worst value.
    pub value: f64,
    /// The figure's margin against its line, dB (`None` when the plan has no such line).
    pub margin: Option<f64>,
}

/// The sizing of one stage over a region of its variables.
#[derive(Debug, Clone)]
pub struct RegionOutcome {
    /// Index of the planned stage.
    pub stage_index: usize,
    /// Stage name.
    pub stage: String,
    /// The variable minimised, with its grid.
    pub primary: Axis,
    /// The other variable, with its grid (`None` when only one variable is sized).
    pub secondary: Option<Axis>,
    /// The grid, row by row (each value of the minimised variable, then each of the other).
    pub map: Vec<RegionPoint>,
    /// The design found: the least value holding every line, with the best other value; or,
    /// when nothing holds, the point with the best worst excess.
    pub chosen: RegionPoint,
    /// Whether a design holding every line was found.
    pub met: bool,
    /// The answer is the range's lower end: a smaller value may hold too.
    pub at_from: bool,
    /// The answer lies in the last grid step below the range's upper end.
    pub near_to: bool,
    /// The map row by row.
    pub rows: Vec<RegionRow>,
    /// Supply current against input noise, among designs meeting every other line.
    pub noise_front: Vec<FrontPoint>,
    /// The distortion line of the second front: the one binding at the chosen design, or
    /// the distortion line with least margin there.
    pub distortion_line: Option<usize>,
    /// Supply current against that line's figure, among designs meeting every other line.
    pub distortion_front: Vec<FrontPoint>,
    /// The guard band the region was found with, dB.
    pub guard_band_db: f64,
    /// Trials evaluated (map, refinement), per temperature.
    pub designs_evaluated: usize,
}

impl RegionOutcome {
    /// A design's value of `variable`, when it is one of the region's variables.
    pub fn value_at(&self, design: &RegionPoint, variable: SizingVariable) -> Option<f64> {
        if self.primary.variable == variable {
            Some(design.primary)
        } else if self
            .secondary
            .as_ref()
            .is_some_and(|a| a.variable == variable)
        {
            design.secondary
        } else {
            None
        }
    }
}

/// Whether a metric is a distortion figure (harmonics, THD, IM3, intercepts, compression).
pub fn is_distortion(metric: Metric) -> bool {
    matches!(
        metric,
        Metric::Harmonic(_)
            | Metric::Thd
            | Metric::Im3
            | Metric::Iip3
            | Metric::Oip3
            | Metric::P1db
    )
}

/// One stage's search, with what every design needs.
struct Region<'a> {
    plan: &'a Plan,
    stage: &'a Stage,
    criterion: Criterion,
    target_gains: Vec<Option<f64>>,
    primary: Axis,
    secondary: Option<Axis>,
    cache: &'a Arc<FftCache>,
    evaluated: std::sync::atomic::AtomicUsize,
}

impl Region<'_> {
    fn design(&self, primary: f64, secondary: Option<f64>) -> Result<RegionPoint, Error> {
        self.evaluated
            .fetch_add(1, std::sync::atomic::Ordering::Relaxed);
        let mut base = self.stage.clone();
        self.primary.variable.set(&mut base, primary);
        if let (Some(axis), Some(value)) = (&self.secondary, secondary) {
            axis.variable.set(&mut base, value);
        }
        let trials = self
            .plan
            .temperatures_c
            .iter()
            .zip(&self.target_gains)
            .map(|(t, target)| {
                trial(
                    self.plan,
                    &base,
                    *t,
                    base.emitter_resistance,
                    *target,
                    self.cache,
                )
            })
            .collect::<Result<Vec<_>, Error>>()?;
        Ok(self.assess(primary, secondary, trials))
    }

    fn assess(&self, primary: f64, secondary: Option<f64>, trials: Vec<Trial>) -> RegionPoint {
        let lines = self.plan.budget.len();
        let c = &self.criterion;
        let mut excess = f64::INFINITY;
        let mut limiting = Binding::Nothing;
        let mut limiting_temperature_c = self.plan.temperatures_c[0];
        let mut line_holds = vec![true; lines];
        let mut margins: Vec<Option<f64>> = vec![None; lines];
        let mut values: Vec<Option<f64>> = vec![None; lines];
        let mut keys = vec![f64::INFINITY; lines];
        for (trial, &temperature) in trials.iter().zip(&self.plan.temperatures_c) {
            for index in 0..lines {
                if !c.counted[index] {
                    continue;
                }
                let key = margin_key(trial.margins[index], trial.passes[index]);
                let over = c.comparable(index, key - c.band(index));
                line_holds[index] &= trial.passes[index] && over >= 0.0;
                if key < keys[index] || margins[index].is_none() && values[index].is_none() {
                    keys[index] = key;
                    margins[index] = trial.margins[index];
                    values[index] = trial.values[index];
                }
                if over < excess {
                    excess = over;
                    limiting = Binding::Line(index);
                    limiting_temperature_c = temperature;
                }
            }
            if let Some(h) = trial.headroom_v {
                if 100.0 * h < excess {
                    excess = 100.0 * h;
                    limiting = Binding::Headroom;
                    limiting_temperature_c = temperature;
                }
            }
        }
        // A design whose tail source cannot bias it has no margins: its compliance limits it.
        if let Some((_, &temperature)) = trials
            .iter()
            .zip(&self.plan.temperatures_c)
            .find(|(t, _)| !t.biases)
        {
            excess = f64::NEG_INFINITY;
            limiting = Binding::TailCompliance;
            limiting_temperature_c = temperature;
        }
        let holds = trials.iter().all(|t| t.holds(c));
        let input_noise_v_rthz = trials
            .iter()
            .map(|t| t.input_noise_v_rthz)
            .fold(0.0, f64::max);
        RegionPoint {
            primary,
            secondary,
            trials,
            holds,
            excess,
            limiting,
            limiting_temperature_c,
            line_holds,
            margins,
            values,
            input_noise_v_rthz,
        }
    }

    /// The best design at `primary`: the other variable that maximises the worst excess
    /// (grid, then golden section). `row` is the grid row already evaluated, if any.
    fn best_at(&self, primary: f64, row: Option<&[RegionPoint]>) -> Result<RegionPoint, Error> {
        let Some(axis) = &self.secondary else {
            return match row {
                Some([only, ..]) => Ok(only.clone()),
                _ => self.design(primary, None),
            };
        };
        let scanned: Vec<RegionPoint> = match row {
            Some(points) => points.to_vec(),
            None => axis
                .grid
                .par_iter()
                .map(|s| self.design(primary, Some(*s)))
                .collect::<Result<_, Error>>()?,
        };
        let best_index = best_of(&scanned);
        let mut best = scanned[best_index].clone();
        if !best.excess.is_finite() {
            return Ok(best);
        }
        let last = scanned.len() - 1;
        let mut low = axis.grid[best_index.saturating_sub(1)];
        let mut high = axis.grid[(best_index + 1).min(last)];
        let tolerance = SECONDARY_REFINE * (axis.to - axis.from);
        const INVERSE_PHI: f64 = 0.618_033_988_749_894_8;
        let mut left = high - INVERSE_PHI * (high - low);
        let mut right = low + INVERSE_PHI * (high - low);
        let mut at_left = self.design(primary, Some(left))?;
        let mut at_right = self.design(primary, Some(right))?;
        while high - low > tolerance {
            if better(&at_left, &at_right) {
                high = right;
                right = left;
                at_right = at_left;
                left = high - INVERSE_PHI * (high - low);
                at_left = self.design(primary, Some(left))?;
            } else {
                low = left;
                left = right;
                at_left = at_right;
                right = low + INVERSE_PHI * (high - low);
                at_right = self.design(primary, Some(right))?;
            }
        }
        for candidate in [at_left, at_right] {
            if better(&candidate, &best) {
                best = candidate;
            }
        }
        Ok(best)
    }
}

impl Region<'_> {
    /// The best design of each grid row for a Pareto front: among the row's designs meeting
    /// `others` (every line but the front's own), the one with the best `score`, its edge
    /// towards the better neighbour refined by [`FRONT_BISECTIONS`] bisection steps on the
    /// other variable (the front's figure is best where another line closes the row).
    fn front_rows(
        &self,
        map: &[RegionPoint],
        width: usize,
        others: &Criterion,
        score: &(dyn Fn(&RegionPoint) -> f64 + Sync),
    ) -> Result<Vec<RegionPoint>, Error> {
        let eligible = |p: &RegionPoint| p.trials.iter().all(|t| t.holds(others));
        let rows: Vec<&[RegionPoint]> = map.chunks(width).collect();
        let refined = rows
            .par_iter()
            .map(|row| -> Result<Option<RegionPoint>, Error> {
                let Some(best) = (0..row.len())
                    .filter(|&j| eligible(&row[j]))
                    .max_by(|&a, &b| score(&row[a]).total_cmp(&score(&row[b])))
                else {
                    return Ok(None);
                };
                let (Some(axis), true) = (&self.secondary, row.len() > 1) else {
                    return Ok(Some(row[best].clone()));
                };
                let neighbour = [best.checked_sub(1), Some(best + 1)]
                    .into_iter()
                    .flatten()
                    .filter(|&j| j < row.len() && !eligible(&row[j]))
                    .max_by(|&a, &b| score(&row[a]).total_cmp(&score(&row[b])));
                let Some(outside) = neighbour else {
                    return Ok(Some(row[best].clone()));
                };
                let mut good = row[best].clone();
                let (mut inside_value, mut outside_value) = (axis.grid[best], axis.grid[outside]);
                for _ in 0..FRONT_BISECTIONS {
                    let middle = 0.5 * (inside_value + outside_value);
                    let probe = self.design(good.primary, Some(middle))?;
                    if eligible(&probe) {
                        inside_value = middle;
                        if score(&probe) >= score(&good) {
                            good = probe;
                        }
                    } else {
                        outside_value = middle;
                    }
                }
                Ok(Some(good))
            })
            .collect::<Result<Vec<_>, Error>>()?;
        Ok(refined.into_iter().flatten().collect())
    }
}

/// Whether `a` is a better design than `b` at the same value of the minimised variable: it
/// holds and `b` does not, or it has the greater worst excess.
fn better(a: &RegionPoint, b: &RegionPoint) -> bool {
    (a.holds && !b.holds) || (a.holds == b.holds && a.excess > b.excess)
}

/// Index of the best point of a row (the first of equals).
fn best_of(points: &[RegionPoint]) -> usize {
    let mut best = 0;
    for (i, point) in points.iter().enumerate() {
        if better(point, &points[best]) {
            best = i;
        }
    }
    best
}

/// The holding runs of one grid row and the lines failing their neighbours.
fn row_summary(primary: f64, points: &[RegionPoint], secondary: Option<&Axis>) -> RegionRow {
    let mut spans = Vec::new();
    let last = points.len() - 1;
    let mut i = 0;
    while i <= last {
        if points[i].holds {
            let start = i;
            while i < last && points[i + 1].holds {
                i += 1;
            }
            let value = |k: usize| {
                secondary
                    .map(|a| a.grid[k])
                    .unwrap_or_else(|| points[k].primary)
            };
            spans.push(Span {
                low: value(start),
                high: value(i),
                below: (start > 0).then(|| points[start - 1].limiting),
                above: (i < last).then(|| points[i + 1].limiting),
            });
        }
        i += 1;
    }
    let limiting = spans.is_empty().then(|| points[best_of(points)].limiting);
    RegionRow {
        primary,
        spans,
        limiting,
    }
}

/// The Pareto front of tail current against one figure: sorted by current, each design kept
/// when its figure beats every design of lower current (`figure` gives the value, its margin
/// and a score, larger better).
fn front(
    points: &[RegionPoint],
    figure: impl Fn(&RegionPoint) -> Option<(f64, Option<f64>, f64)>,
) -> Vec<FrontPoint> {
    let mut candidates: Vec<(&RegionPoint, f64, Option<f64>, f64)> = points
        .iter()
        .filter_map(|p| figure(p).map(|(value, margin, score)| (p, value, margin, score)))
        .filter(|(_, value, _, score)| value.is_finite() && !score.is_nan())
        .collect();
    candidates.sort_by(|a, b| {
        a.0.tail_current()
            .total_cmp(&b.0.tail_current())
            .then(b.3.total_cmp(&a.3))
    });
    let mut out = Vec::new();
    let mut best = f64::NEG_INFINITY;
    for (point, value, margin, score) in candidates {
        if score > best {
            best = score;
            out.push(FrontPoint {
                tail_current: point.tail_current(),
                emitter_resistance: point.emitter_resistance(),
                value,
                margin,
            });
        }
    }
    out
}

/// Sizes one stage over the region of `settings`' variables (see the module docs).
pub fn size_region(
    plan: &Plan,
    stage_index: usize,
    settings: &SizingSettings,
    cache: &Arc<FftCache>,
) -> Result<RegionOutcome, Error> {
    let stage = &plan.stages[stage_index];
    if let Some(range) = settings
        .variables
        .iter()
        .find(|v| !v.variable.applies_to(stage))
    {
        return Err(Error::Argument {
            name: format!("sizing `{}`", range.variable.key()),
            problem: format!(
                "stage `{}` has no {} to choose (topology {})",
                stage.name,
                range.variable.symbol(),
                stage.topology.name()
            ),
            accepted: "the area ratio only for multi-tanh doublets and triplets".into(),
        });
    }
    let (from, to) = settings.range_of(settings.minimise).unwrap_or_else(|| {
        let v = settings.minimise.value_of(stage);
        (v, v)
    });
    let primary = Axis::new(settings.minimise, from, to, PRIMARY_POINTS);
    let secondary = settings
        .variables
        .iter()
        .find(|v| v.variable != settings.minimise)
        .map(|v| Axis::new(v.variable, v.from, v.to, SECONDARY_POINTS));
    let target_gains = plan
        .temperatures_c
        .iter()
        .map(|t| {
            settings
                .hold_gain
                .then(|| planned_gain(plan, stage, *t, cache))
                .transpose()
        })
        .collect::<Result<Vec<_>, Error>>()?;
    let region = Region {
        plan,
        stage,
        criterion: Criterion::all(plan, settings.guard_band_db),
        target_gains,
        primary: primary.clone(),
        secondary: secondary.clone(),
        cache,
        evaluated: std::sync::atomic::AtomicUsize::new(0),
    };

    // 1. The map.
    let columns: Vec<Option<f64>> = match &secondary {
        Some(axis) => axis.grid.iter().map(|s| Some(*s)).collect(),
        None => vec![None],
    };
    let cells: Vec<(f64, Option<f64>)> = primary
        .grid
        .iter()
        .flat_map(|p| columns.iter().map(move |s| (*p, *s)))
        .collect();
    let map: Vec<RegionPoint> = cells
        .par_iter()
        .map(|(p, s)| region.design(*p, *s))
        .collect::<Result<_, Error>>()?;
    let width = columns.len();
    let rows: Vec<RegionRow> = map
        .chunks(width)
        .zip(&primary.grid)
        .map(|(points, p)| row_summary(*p, points, secondary.as_ref()))
        .collect();

    // 2–3. The least holding value, refined.
    let first_row = map
        .chunks(width)
        .position(|points| points.iter().any(|p| p.holds));
    let last_row = primary.grid.len() - 1;
    let row_of = |k: usize| &map[k * width..][..width];
    // A grid row whose best grid point just misses may hold once the other variable is
    // refined: the first holding row is looked for with refined rows, walking down.
    let best_row = (0..=last_row)
        .max_by(|&a, &b| {
            row_of(a)[best_of(row_of(a))]
                .excess
                .total_cmp(&row_of(b)[best_of(row_of(b))].excess)
        })
        .unwrap_or(0);
    let start = match first_row {
        Some(k) => Some((k, region.best_at(primary.grid[k], Some(row_of(k)))?)),
        None => {
            let refined = region.best_at(primary.grid[best_row], Some(row_of(best_row)))?;
            if refined.holds {
                Some((best_row, refined))
            } else {
                None
            }
        }
    };
    let (chosen, met, lowest_row) = match start {
        Some((k, mut holding)) => {
            let mut row = k;
            let mut failing = None;
            while row > 0 {
                let below = region.best_at(primary.grid[row - 1], Some(row_of(row - 1)))?;
                if below.holds {
                    holding = below;
                    row -= 1;
                } else {
                    failing = Some(primary.grid[row - 1]);
                    break;
                }
            }
            if let Some(mut failing) = failing {
                let mut steps = 0;
                while holding.primary - failing > PRIMARY_REFINE * holding.primary
                    && steps < MAX_BISECTIONS
                {
                    let middle = primary.middle(failing, holding.primary);
                    let probe = region.best_at(middle, None)?;
                    if probe.holds {
                        holding = probe;
                    } else {
                        failing = middle;
                    }
                    steps += 1;
                }
            }
            (holding, true, Some(row))
        }
        None => (
            region.best_at(primary.grid[best_row], Some(row_of(best_row)))?,
            false,
            None,
        ),
    };
    let at_from = lowest_row == Some(0) && primary.from > 0.0;
    let near_to = lowest_row == Some(last_row);

    // Pareto fronts, when the tail current is one of the variables.
    let current_varies = primary.variable == SizingVariable::TailCurrent
        || secondary
            .as_ref()
            .is_some_and(|a| a.variable == SizingVariable::TailCurrent);
    let noise_lines: Vec<usize> = plan
        .budget
        .iter()
        .enumerate()
        .filter(|(_, l)| l.metric == Metric::InputNoise)
        .map(|(i, _)| i)
        .collect();
    let distortion_line = match chosen.limiting {
        Binding::Line(i) if is_distortion(plan.budget[i].metric) => Some(i),
        _ => (0..plan.budget.len())
            .filter(|&i| is_distortion(plan.budget[i].metric))
            .min_by(|&a, &b| {
                margin_key(chosen.margins[a], chosen.line_holds[a])
                    .total_cmp(&margin_key(chosen.margins[b], chosen.line_holds[b]))
            }),
    };
    let (noise_front, distortion_front) = if current_varies {
        let noise_score = |p: &RegionPoint| -p.input_noise_v_rthz;
        let noise_rows = region.front_rows(
            &map,
            width,
            &region.criterion.without(&noise_lines),
            &noise_score,
        )?;
        let noise_front = front(&noise_rows, |p| {
            let margin = noise_lines
                .iter()
                .filter_map(|&i| p.margins[i])
                .min_by(f64::total_cmp);
            Some((p.input_noise_v_rthz, margin, noise_score(p)))
        });
        let distortion_front = match distortion_line {
            Some(d) => {
                let distortion_score = |p: &RegionPoint| margin_key(p.margins[d], p.line_holds[d]);
                // Distortion lines move together (HD3 and THD, say): the front is among the
                // designs meeting every line that is not a distortion line.
                let distortion_lines: Vec<usize> = (0..plan.budget.len())
                    .filter(|&i| is_distortion(plan.budget[i].metric))
                    .collect();
                let rows = region.front_rows(
                    &map,
                    width,
                    &region.criterion.without(&distortion_lines),
                    &distortion_score,
                )?;
                front(&rows, |p| {
                    p.values[d].map(|value| (value, p.margins[d], distortion_score(p)))
                })
            }
            None => Vec::new(),
        };
        (noise_front, distortion_front)
    } else {
        (Vec::new(), Vec::new())
    };

    let designs_evaluated = region.evaluated.load(std::sync::atomic::Ordering::Relaxed);
    Ok(RegionOutcome {
        stage_index,
        stage: stage.name.clone(),
        primary,
        secondary,
        map,
        chosen,
        met,
        at_from,
        near_to,
        rows,
        noise_front,
        distortion_line,
        distortion_front,
        guard_band_db: settings.guard_band_db,
        designs_evaluated,
    })
}
