//! What the plan alone decides, checked when it is read (so `check` finds it, with line and
//! column): every stage can bias at every temperature and in every corner, and a stage with
//! charge storage can be solved under the plan's two tones without products colliding.

use super::reader::At;
use crate::error::PlanError;
use crate::model::bias::bias_problem;
use crate::model::budget::Metric;
use crate::model::circuit::StageCircuit;
use crate::model::corner::{Corner, TYPICAL};
use crate::model::plan::Plan;
use crate::model::products::{
    common_period_cycles, refused_collision, separating_spacing, PeriodTooLong,
    MAX_COMMON_PERIOD_CYCLES,
};
use crate::units::short_number;

/// Refuses a stage that cannot bias at a plan temperature in a plan corner, pointing at the
/// stage key most to blame (`stages[1].emitter_resistance`).
pub fn check_bias(
    stage_items: &[At],
    stage_keys: &[&str],
    plan: &Plan,
    corners: &[Corner],
) -> Result<(), PlanError> {
    for (item, stage) in stage_items.iter().zip(&plan.stages) {
        for corner in corners {
            let built = corner.apply(stage);
            for &temperature in &plan.temperatures_c {
                let Some(problem) = bias_problem(&built, temperature) else {
                    continue;
                };
                let at = item
                    .map(stage_keys)?
                    .get(problem.key())
                    .unwrap_or_else(|| item.clone());
                let in_corner = if corner.name == TYPICAL {
                    String::new()
                } else {
                    format!(" in the `{}` corner", corner.name)
                };
                return Err(at.error(
                    format!("stage `{}` cannot bias{in_corner}: {problem}", stage.name),
                    problem.remedy(),
                ));
            }
        }
    }
    Ok(())
}

/// The frequencies two tones are solved at: the drive's and those of the budget lines that
/// measure IM3 or an intercept.
fn two_tone_frequencies(plan: &Plan) -> Vec<f64> {
    let mut frequencies = plan.drive.frequencies.clone();
    for line in &plan.budget {
        if matches!(line.metric, Metric::Im3 | Metric::Iip3 | Metric::Oip3) {
            if let Some(f) = line.frequency {
                if !frequencies.contains(&f) {
                    frequencies.push(f);
                }
            }
        }
    }
    frequencies
}

/// For stages with charge storage (solved over the two tones' common period), refuses a
/// spacing whose common period is too long or whose reported products fall on a product of
/// lower or equal order, at `drive.two_tone_spacing`. Memoryless stages are analysed on the
/// torus of the two phases, where products cannot collide, and are not concerned.
pub fn check_two_tone(spacing_at: Option<&At>, plan: &Plan) -> Result<(), PlanError> {
    let (Some(at), Some(spacing)) = (spacing_at, plan.drive.two_tone_spacing) else {
        return Ok(());
    };
    let Some(stage) = plan.stages.iter().find(|stage| {
        plan.temperatures_c
            .iter()
            .any(|&t| !StageCircuit::new(stage, t).is_memoryless())
    }) else {
        return Ok(());
    };
    let suggestion = |f: f64| match separating_spacing(f, spacing) {
        Some(s) => format!("e.g. {} Hz", short_number(s)),
        None => "a spacing that divides the frequency".into(),
    };
    for f in two_tone_frequencies(plan) {
        match refused_collision(f, spacing) {
            Err(PeriodTooLong) => {
                return Err(at.error(
                    format!(
                        "stage `{}` has charge storage, so two tones are solved over their common period; at {} Hz and {} Hz that period spans more than {MAX_COMMON_PERIOD_CYCLES} periods of the upper tone",
                        stage.name,
                        short_number(f),
                        short_number(f + spacing)
                    ),
                    format!(
                        "a spacing for which frequency/spacing is a ratio of small integers, {}",
                        suggestion(f)
                    ),
                ))
            }
            Ok(Some(collision)) => {
                let (_, q) = common_period_cycles(f, spacing).unwrap_or((0, 0));
                return Err(at.error(
                    format!(
                        "stage `{}` has charge storage, so two tones are solved over their common period ({q} upper-tone cycles); at {} Hz with a {} Hz spacing the {} product {} falls on the frequency of {} (order {}), so {} would read the other product",
                        stage.name,
                        short_number(f),
                        short_number(spacing),
                        collision.figure.name().to_uppercase(),
                        collision.reported,
                        collision.other,
                        collision.other.order(),
                        collision.figure.name().to_uppercase()
                    ),
                    format!(
                        "a spacing that keeps 2f1 − f2, 2f2 − f1, f2 − f1 and f1 + f2 apart from every product of lower or equal order, {}",
                        suggestion(f)
                    ),
                ));
            }
            Ok(None) => {}
        }
    }
    Ok(())
}
