//! The spread of each figure across process corners: typical, least and greatest, with the
//! corner giving each.

use crate::model::budget::Metric;
use crate::model::plan::Plan;
use crate::study::case::CaseEvaluation;

/// Which figure a spread is about.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum SpreadFigure {
    /// The value a budget line constrains (index into the plan's budget).
    Line(usize),
    /// Small-signal gain at the first frequency, dB.
    Gain,
    /// IIP3 at the first frequency, V.
    Iip3,
    /// P1dB at the first frequency, V.
    P1db,
    /// Steering range, V.
    SteeringRange,
    /// White input noise density, V/√Hz.
    InputNoise,
}

impl SpreadFigure {
    /// The budget metric the figure is, where it is one.
    pub fn metric(self) -> Option<Metric> {
        match self {
            SpreadFigure::Line(_) => None,
            SpreadFigure::Gain => Some(Metric::Gain),
            SpreadFigure::Iip3 => Some(Metric::Iip3),
            SpreadFigure::P1db => Some(Metric::P1db),
            SpreadFigure::SteeringRange => Some(Metric::SteeringRange),
            SpreadFigure::InputNoise => Some(Metric::InputNoise),
        }
    }

    /// Whether the figure is a level in dB (a null sorts below everything) rather than a
    /// quantity (a null, unbounded, sorts above).
    fn is_decibel(self, plan: &Plan) -> bool {
        match self {
            SpreadFigure::Line(index) => plan.budget[index].metric.is_decibel(),
            SpreadFigure::Gain => true,
            _ => false,
        }
    }
}

/// One figure across the process corners of a stage at one temperature.
#[derive(Debug, Clone, PartialEq)]
pub struct CornerSpread {
    /// Stage name.
    pub stage: String,
    /// Temperature, °C.
    pub temperature_c: f64,
    /// The figure.
    pub figure: SpreadFigure,
    /// Input amplitude, V (amplitude-dependent figures).
    pub at_v: Option<f64>,
    /// Value in the typical corner (`None`: below the floor or unbounded).
    pub typical: Option<f64>,
    /// Least value across corners.
    pub min: Option<f64>,
    /// Greatest value across corners.
    pub max: Option<f64>,
    /// Corner giving the least value.
    pub min_corner: String,
    /// Corner giving the greatest value.
    pub max_corner: String,
}

/// Typical, minimum and maximum of every budget line and of the main small-signal figures
/// across the corners of one stage and temperature; `group[0]` is the typical corner.
pub fn spread(plan: &Plan, group: &[CaseEvaluation]) -> Vec<CornerSpread> {
    let Some(first) = group.first() else {
        return Vec::new();
    };
    let mut out = Vec::new();
    let mut push = |figure: SpreadFigure, at_v: Option<f64>, values: Vec<Option<f64>>| {
        let decibel = figure.is_decibel(plan);
        let key = |v: &Option<f64>| match v {
            Some(x) => *x,
            None if decibel => f64::NEG_INFINITY,
            None => f64::INFINITY,
        };
        let order = |a: &usize, b: &usize| key(&values[*a]).total_cmp(&key(&values[*b]));
        let indices: Vec<usize> = (0..values.len()).collect();
        let low = indices.iter().copied().min_by(order).unwrap_or(0);
        let high = indices.iter().copied().max_by(order).unwrap_or(0);
        out.push(CornerSpread {
            stage: first.stage.name.clone(),
            temperature_c: first.temperature_c,
            figure,
            at_v,
            typical: values.first().copied().flatten(),
            min: values.get(low).copied().flatten(),
            max: values.get(high).copied().flatten(),
            min_corner: group.get(low).map(|c| c.corner.clone()).unwrap_or_default(),
            max_corner: group
                .get(high)
                .map(|c| c.corner.clone())
                .unwrap_or_default(),
        });
    };
    for index in 0..plan.budget.len() {
        // A yield line is judged on the population, in the typical corner only.
        if plan.budget[index].metric.is_population() {
            continue;
        }
        let Some(typical_line) = first.budget.get(index) else {
            continue;
        };
        let values = group
            .iter()
            .map(|c| c.budget.get(index).and_then(|b| b.value))
            .collect();
        push(SpreadFigure::Line(index), typical_line.amplitude_v, values);
    }
    type Reading = fn(&CaseEvaluation) -> Option<f64>;
    let figures: [(SpreadFigure, Reading); 5] = [
        (SpreadFigure::Gain, |c| {
            c.frequencies.first().map(|f| 20.0 * f.gain.log10())
        }),
        (SpreadFigure::Iip3, |c| {
            c.frequencies
                .first()
                .and_then(|f| f.intercept.map(|i| i.iip3_v))
        }),
        (SpreadFigure::P1db, |c| {
            c.frequencies.first().and_then(|f| f.p1db_v)
        }),
        (SpreadFigure::SteeringRange, |c| {
            let (low, high) = c.operating.steering_v;
            Some(0.5 * (high - low))
        }),
        (SpreadFigure::InputNoise, |c| Some(c.operating.noise_v_rthz)),
    ];
    for (figure, read) in figures {
        if plan
            .budget
            .iter()
            .any(|l| Some(l.metric) == figure.metric())
        {
            continue;
        }
        let values = group.iter().map(read).collect();
        push(figure, None, values);
    }
    out
}
