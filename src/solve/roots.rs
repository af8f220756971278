//! Scalar root finding: Newton's method safeguarded by bisection on a sign-change bracket.
//!
//! Every call states its tolerance and either converges or returns [`RootFailure`] with the
//! bracket it reached; it never returns a silent NaN or a clipped guess.

use crate::units::short_number;

/// Why a root search gave up.
#[derive(Debug, Clone, PartialEq)]
pub struct RootFailure {
    /// What went wrong, in words.
    pub reason: String,
}

impl std::fmt::Display for RootFailure {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(&self.reason)
    }
}

impl std::error::Error for RootFailure {}

/// Convergence settings for [`safe_newton`].
#[derive(Debug, Clone, Copy)]
pub struct Tolerance {
    /// Converged when a step is at most `relative·max(|x|, scale) `.
    pub relative: f64,
    /// Typical magnitude of the unknown, so that roots near zero converge too.
    pub scale: f64,
    /// Iteration cap.
    pub max_iterations: usize,
}

impl Tolerance {
    /// Steps down to a few ulps of the unknown: the solution is as exact as double precision.
    pub const MACHINE: Tolerance = Tolerance {
        relative: 4.0 * f64::EPSILON,
        scale: 1.0,
        max_iterations: 200,
    };
}

/// Finds x in `[low, high]` with `f(x) = 0`, where `f` returns `(value, derivative)` and
/// `f(low)` and `f(high)` have opposite signs (or one is zero).
///
/// Newton steps from `guess` are taken while they stay inside the shrinking bracket and
/// shrink it fast enough; otherwise the step is a bisection. Converges when the step is below
/// the tolerance or the bracket collapses to adjacent floating-point numbers.
pub fn safe_newton(
    mut f: impl FnMut(f64) -> (f64, f64),
    mut low: f64,
    mut high: f64,
    guess: f64,
    tolerance: Tolerance,
) -> Result<f64, RootFailure> {
    let (f_low, _) = f(low);
    let (f_high, _) = f(high);
    if !f_low.is_finite() || !f_high.is_finite() {
        return Err(RootFailure {
            reason: format!(
                "the function is not finite at the bracket [{}, {}]",
                short_number(low),
                short_number(high)
            ),
        });
    }
    if f_low == 0.0 {
        return Ok(low);
    }
    if f_high == 0.0 {
        return Ok(high);
    }
    if f_low.signum() == f_high.signum() {
        return Err(RootFailure {
            reason: format!(
                "no sign change in [{}, {}] (values {}, {})",
                short_number(low),
                short_number(high),
                short_number(f_low),
                short_number(f_high)
            ),
        });
    }
    // Orient so that f(low) < 0 < f(high).
    if f_low > 0.0 {
        std::mem::swap(&mut low, &mut high);
    }
    let mut x = if guess > low.min(high) && guess < low.max(high) {
        guess
    } else {
        0.5 * (low + high)
    };
    let mut previous_step = (high - low).abs();
    for _ in 0..tolerance.max_iterations {
        let (value, slope) = f(x);
        if !value.is_finite() {
            return Err(RootFailure {
                reason: format!("the function is not finite at x = {}", short_number(x)),
            });
        }
        if value == 0.0 {
            return Ok(x);
        }
        if value < 0.0 {
            low = x;
        } else {
            high = x;
        }
        let newton = x - value / slope;
        let inside =
            slope.is_finite() && slope != 0.0 && newton > low.min(high) && newton < low.max(high);
        let step;
        if inside && (newton - x).abs() <= 0.5 * previous_step {
            step = newton - x;
            x = newton;
        } else {
            let mid = 0.5 * (low + high);
            step = mid - x;
            x = mid;
        }
        previous_step = step.abs();
        let limit = tolerance.relative * x.abs().max(tolerance.scale);
        if step.abs() <= limit || (high - low).abs() <= limit {
            return Ok(x);
        }
    }
    Err(RootFailure {
        reason: format!(
            "no convergence in {} iterations; bracket [{}, {}]",
            tolerance.max_iterations,
            short_number(low),
            short_number(high)
        ),
    })
}

/// The root of an increasing `f` (value, slope) by Newton's method from `start`, never above
/// `upper` (a bound on the root, or +∞), without a bracket to begin with.
///
/// Each evaluation narrows the interval known to hold the root. Newton steps longer than
/// `max_step` are cut to it (junction limiting: an exponential law is never evaluated far
/// from where it was last seen). A step that leaves the interval is replaced by the Newton
/// point of the upper end when that lies inside (from below, a convex `f` throws Newton past
/// the root; from above it approaches monotonically), else by bisection once both ends are
/// known, else by a step of `max_step` away from the side already seen. Unlike
/// [`safe_newton`], Newton steps need not shrink from one to the next, so a start above the
/// root of a nearly exponential `f` costs a few steps, not a bisection. Converges when a step
/// is at most `tolerance.relative·max(|x|, tolerance.scale)`.
pub fn newton_increasing(
    mut f: impl FnMut(f64) -> (f64, f64),
    start: f64,
    upper: f64,
    max_step: f64,
    tolerance: Tolerance,
) -> Result<f64, RootFailure> {
    let (mut low, mut high) = (f64::NEG_INFINITY, upper);
    let mut from_high = f64::NAN;
    let mut x = start;
    for _ in 0..tolerance.max_iterations {
        let (value, slope) = f(x);
        if value.is_nan() {
            return Err(RootFailure {
                reason: format!("the function is not finite at x = {x:e}"),
            });
        }
        if value == 0.0 {
            return Ok(x);
        }
        let limit = |at: f64| tolerance.relative * at.abs().max(tolerance.scale);
        let newton_step = -value / slope;
        if newton_step.abs() <= limit(x) {
            return Ok(x + newton_step);
        }
        let mut next = x + newton_step.clamp(-max_step, max_step);
        if value > 0.0 {
            high = x;
            from_high = next;
        } else {
            low = x;
        }
        let inside = |v: f64| v.is_finite() && v > low && v < high;
        if !inside(next) {
            next = if inside(from_high) {
                from_high
            } else {
                match (low.is_finite(), high.is_finite()) {
                    (true, true) => 0.5 * (low + high),
                    (false, _) => x - max_step,
                    (true, false) => x + max_step,
                }
            };
        }
        if (next - x).abs() <= limit(next) || high - low <= limit(next) {
            return Ok(next);
        }
        x = next;
    }
    Err(RootFailure {
        reason: format!(
            "no convergence in {} iterations; bracket [{low:e}, {high:e}]",
            tolerance.max_iterations
        ),
    })
}

/// Widens `[low, high]` geometrically around a guess until `f` changes sign.
///
/// `f` must be increasing for the direction logic to apply; at most `max_doublings` widenings.
pub fn bracket_increasing(
    mut f: impl FnMut(f64) -> f64,
    guess: f64,
    initial_step: f64,
    max_doublings: usize,
) -> Result<(f64, f64), RootFailure> {
    let mut step = initial_step;
    let mut low = guess - step;
    let mut high = guess + step;
    let mut f_low = f(low);
    let mut f_high = f(high);
    for _ in 0..max_doublings {
        if f_low <= 0.0 && f_high >= 0.0 {
            return Ok((low, high));
        }
        step *= 2.0;
        if f_low > 0.0 {
            high = low;
            low -= step;
            f_low = f(low);
        } else {
            low = high;
            high += step;
            f_high = f(high);
        }
        if f_low.is_nan() || f_high.is_nan() {
            break;
        }
    }
    Err(RootFailure {
        reason: format!(
            "could not bracket a root near {} (last interval [{}, {}])",
            short_number(guess),
            short_number(low),
            short_number(high)
        ),
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn finds_cube_root_of_two() {
        let root = safe_newton(
            |x| (x * x * x - 2.0, 3.0 * x * x),
            0.0,
            2.0,
            1.0,
            Tolerance::MACHINE,
        )
        .unwrap();
        assert!((root - 2f64.cbrt()).abs() < 1e-15);
    }

    #[test]
    fn survives_a_bad_derivative() {
        // atan has vanishing slope far out; plain Newton from x = 10 diverges.
        let root = safe_newton(
            |x| (x.atan(), 1.0 / (1.0 + x * x)),
            -20.0,
            30.0,
            10.0,
            Tolerance::MACHINE,
        )
        .unwrap();
        assert!(root.abs() < 1e-15);
    }

    #[test]
    fn reports_a_missing_sign_change() {
        let err = safe_newton(
            |x| (x * x + 1.0, 2.0 * x),
            -1.0,
            1.0,
            0.0,
            Tolerance::MACHINE,
        );
        assert!(err.unwrap_err().reason.contains("no sign change"));
    }

    #[test]
    fn newton_without_a_bracket_finds_exponential_roots_from_either_side() {
        // e^x − 5 is convex: from far above Newton walks down monotonically, from below it
        // overshoots and the upper end's Newton point takes over.
        for start in [-30.0f64, 0.0, 20.0] {
            let root = newton_increasing(
                |x: f64| (x.exp() - 5.0, x.exp()),
                start,
                f64::INFINITY,
                1.0,
                Tolerance::MACHINE,
            )
            .unwrap();
            assert!((root - 5f64.ln()).abs() < 1e-15, "from {start}: {root}");
        }
        // atan flattens far out, where a full Newton step would run away.
        let root = newton_increasing(
            |x: f64| (x.atan(), 1.0 / (1.0 + x * x)),
            10.0,
            f64::INFINITY,
            1.0,
            Tolerance::MACHINE,
        )
        .unwrap();
        assert!(root.abs() < 1e-15);
    }

    #[test]
    fn brackets_far_roots() {
        let (low, high) = bracket_increasing(|x| x - 1000.0, 0.0, 1.0, 40).unwrap();
        assert!(low <= 1000.0 && high >= 1000.0);
    }
}
