//! Verdicts: whether a design meets every budget line, and which checks fail. Two designs are
//! judged: the stages as planned, and (when the plan asks for sizing) the recommended design —
//! each planned stage with the emitter resistance (and, with `hold_gain`, the load) to build,
//! evaluated in full like any other stage.

use crate::study::case::CaseEvaluation;

/// One budget check that fails: a line on one stage, temperature and corner.
#[derive(Debug, Clone, PartialEq)]
pub struct FailingCheck {
    /// Stage name (the derived name for the recommended design).
    pub stage: String,
    /// Temperature, °C.
    pub temperature_c: f64,
    /// Process corner.
    pub corner: String,
    /// Index of the line in the plan's budget.
    pub line: usize,
    /// Amplitude the line applies at, V (amplitude-dependent metrics).
    pub amplitude_v: Option<f64>,
    /// The value (`None`: below the floor, unbounded, or not estimated).
    pub value: Option<f64>,
    /// The margin (negative), dB (a fraction for yield lines).
    pub margin: Option<f64>,
}

/// The verdict on one design.
#[derive(Debug, Clone, PartialEq)]
pub struct DesignVerdict {
    /// Whether every check passes.
    pub met: bool,
    /// Checks made (lines × stages × temperatures × corners judged).
    pub checks: usize,
    /// The checks that fail, in report order.
    pub failing: Vec<FailingCheck>,
}

impl DesignVerdict {
    /// The verdict over the budget lines of `cases`.
    pub fn of<'a>(cases: impl IntoIterator<Item = &'a CaseEvaluation>) -> Self {
        let mut checks = 0;
        let mut failing = Vec::new();
        for case in cases {
            for line in case.budget.iter().filter(|l| l.judged) {
                checks += 1;
                if !line.pass {
                    failing.push(FailingCheck {
                        stage: case.stage.name.clone(),
                        temperature_c: case.temperature_c,
                        corner: case.corner.clone(),
                        line: line.line,
                        amplitude_v: line.amplitude_v,
                        value: line.value,
                        margin: line.margin,
                    });
                }
            }
        }
        DesignVerdict {
            met: failing.is_empty(),
            checks,
            failing,
        }
    }
}

/// Which design the overall answer (and the exit status) is about.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum Judged {
    /// The recommended design when the plan asks for sizing, otherwise the design as planned.
    #[default]
    Recommended,
    /// The design as written, whatever sizing recommends (`run --as-planned`).
    AsPlanned,
}

/// Both verdicts of a plan.
#[derive(Debug, Clone, PartialEq)]
pub struct Verdict {
    /// The stages as planned.
    pub as_planned: DesignVerdict,
    /// The recommended design (plans with sizing).
    pub recommended: Option<DesignVerdict>,
}

impl Verdict {
    /// The overall answer: the recommended design's verdict when there is one and it is asked
    /// for, otherwise the planned design's.
    pub fn met(&self, judged: Judged) -> bool {
        match (&self.recommended, judged) {
            (Some(recommended), Judged::Recommended) => recommended.met,
            _ => self.as_planned.met,
        }
    }
}
