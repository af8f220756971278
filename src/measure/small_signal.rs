//! Static figures of a stage: the gain at zero input, the steering points, the input offset
//! and the transfer curve, all from the exact static solve.

use crate::error::SolveFailure;
use crate::solve::roots::{bracket_increasing, safe_newton, Tolerance};
use crate::solve::transfer::{StaticSolver, WarmStart};

/// Fraction of the tail current that defines the steering range (95 %).
pub const STEERING_FRACTION: f64 = 0.95;

/// Small-signal differential voltage gain at zero input, V/V, by a Richardson-extrapolated
/// central difference (step 10⁻³·φT, truncation error of order 10⁻¹²).
pub fn small_signal_gain(solver: &StaticSolver) -> Result<f64, SolveFailure> {
    let h = 1e-3 * solver.circuit().thermal_voltage;
    let slope = |step: f64| -> Result<f64, SolveFailure> {
        let up = solver.solve_cold(step)?.output_voltage;
        let down = solver.solve_cold(-step)?.output_voltage;
        Ok((up - down) / (2.0 * step))
    };
    let coarse = slope(h)?;
    let fine = slope(0.5 * h)?;
    Ok((4.0 * fine - coarse) / 3.0)
}

/// The voltages the degeneration scheme leaves at zero input.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct BiasNodes {
    /// Voltage across the tail source (the lowest, where there are several), V: the tail node
    /// of the emitter-resistor form, the emitters of a split tail, each pair's tail of a
    /// multi-tanh cell.
    pub tail_source_v: f64,
    /// Lowest transistor emitter voltage, V.
    pub emitter_v: f64,
}

impl BiasNodes {
    /// The headroom the degeneration takes at zero input: how far the tail source sits below
    /// the lowest emitter, V (`I·R_E/2` for emitter resistors, none for a split tail).
    pub fn degeneration_drop_v(&self) -> f64 {
        self.emitter_v - self.tail_source_v
    }
}

/// The bias nodes at zero input (see [`BiasNodes`]).
pub fn bias_nodes(solver: &StaticSolver) -> Result<BiasNodes, SolveFailure> {
    let c = solver.circuit();
    let pairs = solver.solve_pairs(0.0)?;
    let emitter_v = pairs
        .iter()
        .flat_map(|p| [&p.p, &p.m])
        .map(|s| s.base_voltage - s.base_emitter_voltage)
        .fold(f64::INFINITY, f64::min);
    let tail_source_v = if c.split_tail.is_some() {
        emitter_v
    } else {
        pairs
            .iter()
            .map(|p| p.tail_voltage)
            .fold(f64::INFINITY, f64::min)
    };
    Ok(BiasNodes {
        tail_source_v,
        emitter_v,
    })
}

/// Inputs at which the P side carries 95 % and 5 % of the total emitter current, V.
pub fn steering_points(solver: &StaticSolver) -> Result<(f64, f64), SolveFailure> {
    let c = solver.circuit();
    let guess = 3.0 * c.thermal_voltage + 0.9 * c.tail_current * c.p.emitter_resistance;
    let solve_for = |target: f64, start: f64| -> Result<f64, SolveFailure> {
        let fraction = |v: f64| solver.solve_cold(v).map(|p| p.p_fraction() - target);
        let wrap = |e: crate::solve::roots::RootFailure| SolveFailure {
            point: format!("steering fraction {}", crate::units::short_number(target)),
            reason: e.reason,
        };
        let (low, high) = bracket_increasing(
            |v| fraction(v).unwrap_or(f64::NAN),
            start,
            c.thermal_voltage,
            60,
        )
        .map_err(wrap)?;
        safe_newton(
            |v| {
                let value = fraction(v).unwrap_or(f64::NAN);
                let step = 1e-6 * c.thermal_voltage;
                let slope = (fraction(v + step).unwrap_or(f64::NAN)
                    - fraction(v - step).unwrap_or(f64::NAN))
                    / (2.0 * step);
                (value, slope)
            },
            low,
            high,
            start,
            Tolerance {
                relative: 1e-13,
                scale: c.thermal_voltage,
                max_iterations: 200,
            },
        )
        .map_err(wrap)
    };
    let high = solve_for(STEERING_FRACTION, guess)?;
    let low = solve_for(1.0 - STEERING_FRACTION, -guess)?;
    Ok((low, high))
}

/// The differential input at which the two collector currents are equal, V.
///
/// The collector-current difference rises with the input in forward-active operation but can
/// fall in deep saturation (more of each emitter current comes from the base), so the bracket
/// is grown symmetrically about zero until either half changes sign.
pub fn offset_voltage(solver: &StaticSolver) -> Result<f64, SolveFailure> {
    let c = solver.circuit();
    let balance = |v: f64| -> f64 {
        solver
            .solve_cold(v)
            .map(|p| (p.p.collector_current - p.m.collector_current) / c.tail_current)
            .unwrap_or(f64::NAN)
    };
    let failure = |reason: String| SolveFailure {
        point: "offset search".into(),
        reason,
    };
    // Rising (forward-active): the usual bracket. Otherwise grow one about zero.
    let mut bracket =
        crate::solve::roots::bracket_increasing(balance, 0.0, c.thermal_voltage, 60).ok();
    let at_zero = balance(0.0);
    if bracket.is_none() && at_zero == 0.0 {
        return Ok(0.0);
    }
    let mut step = c.thermal_voltage;
    for _ in 0..60 {
        if bracket.is_some() {
            break;
        }
        let (below, above) = (balance(-step), balance(step));
        if below.is_nan() || above.is_nan() || at_zero.is_nan() {
            break;
        }
        if below.signum() != at_zero.signum() {
            bracket = Some((-step, 0.0));
        } else if above.signum() != at_zero.signum() {
            bracket = Some((0.0, step));
        } else {
            step *= 2.0;
        }
    }
    let (low, high) = bracket.ok_or_else(|| {
        failure(format!(
            "the collector currents do not balance within ±{step:e} V of zero input"
        ))
    })?;
    crate::solve::roots::safe_newton(
        |v| {
            let step = 1e-6 * c.thermal_voltage;
            (
                balance(v),
                (balance(v + step) - balance(v - step)) / (2.0 * step),
            )
        },
        low,
        high,
        0.0,
        crate::solve::roots::Tolerance {
            relative: 1e-14,
            scale: c.thermal_voltage,
            max_iterations: 200,
        },
    )
    .map_err(|e| failure(e.reason))
}

/// One point of the transfer curve.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct TransferSample {
    /// Differential input, V.
    pub input_v: f64,
    /// (I_CP − I_CM)/I_tail.
    pub normalised_current: f64,
    /// How the emitter current divides, (I_EP − I_EM)/(I_EP + I_EM): the quantity the
    /// steering points are defined on (±0.9 at the 95 % points, [`steering_points`]). It
    /// follows the collector-current curve while both sides are forward-active and parts from
    /// it where a side saturates (its emitter current then flows partly out of its base).
    pub emitter_split: f64,
    /// Incremental transconductance d(I_CP − I_CM)/dv_d, S.
    pub transconductance_s: f64,
    /// Differential output voltage, V.
    pub output_v: f64,
    /// Intrinsic base-collector voltage of the P and M sides, V (positive: that side
    /// saturates).
    pub base_collector_v: [f64; 2],
}

/// The transfer curve over `±span_v` with `points` samples.
pub fn transfer_curve(
    solver: &StaticSolver,
    span_v: f64,
    points: usize,
) -> Result<Vec<TransferSample>, SolveFailure> {
    let c = solver.circuit();
    let mut warm = WarmStart::default();
    let current = |v: f64, warm: &mut WarmStart| {
        solver
            .solve(v, warm)
            .map(|p| p.p.collector_current - p.m.collector_current)
    };
    let step = 1e-4 * c.thermal_voltage;
    (0..points)
        .map(|i| {
            let v = -span_v + 2.0 * span_v * i as f64 / (points - 1).max(1) as f64;
            let point = solver.solve(v, &mut warm)?;
            let mut probe = warm.clone();
            let up = current(v + step, &mut probe)?;
            let down = current(v - step, &mut probe)?;
            Ok(TransferSample {
                input_v: v,
                normalised_current: (point.p.collector_current - point.m.collector_current)
                    / c.tail_current,
                emitter_split: 2.0 * point.p_fraction() - 1.0,
                transconductance_s: (up - down) / (2.0 * step),
                output_v: point.output_voltage,
                base_collector_v: [
                    point.p.base_collector_voltage(),
                    point.m.base_collector_voltage(),
                ],
            })
        })
        .collect()
}
