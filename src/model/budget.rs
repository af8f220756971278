//! Budget lines as data: which figure is constrained, where, and by what limit.

/// A figure the budget can constrain.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum Metric {
    /// The n-th harmonic, dBc (n ≥ 2).
    Harmonic(usize),
    /// Total harmonic distortion, dBc.
    Thd,
    /// Third-order intermodulation, dBc.
    Im3,
    /// Input third-order intercept, peak V per tone.
    Iip3,
    /// Output third-order intercept, peak V per tone.
    Oip3,
    /// Input 1 dB compression point, peak V.
    P1db,
    /// Small-signal differential voltage gain, dB.
    Gain,
    /// Input at which one side carries 95 % of the tail current, V.
    SteeringRange,
    /// White input-referred differential noise density, V/√Hz.
    InputNoise,
    /// The least collector-base reverse bias over the period at an amplitude, V (negative
    /// when a junction is forward-biased: saturation).
    CollectorBaseMargin,
    /// Fraction of the Monte Carlo runs meeting every other budget line (needs `monte_carlo`).
    Yield,
}

/// Every metric name a plan accepts, for messages.
pub const METRIC_NAMES: &str =
    "hd2, hd3, hd5 (any hdN, N ≥ 2), thd, im3, iip3, oip3, p1db, gain, steering_range, input_noise, collector_base_margin, yield";

impl Metric {
    /// The name used in plans and reports (`hd3`, `iip3`, …).
    pub fn name(self) -> String {
        match self {
            Metric::Harmonic(n) => format!("hd{n}"),
            Metric::Thd => "thd".into(),
            Metric::Im3 => "im3".into(),
            Metric::Iip3 => "iip3".into(),
            Metric::Oip3 => "oip3".into(),
            Metric::P1db => "p1db".into(),
            Metric::Gain => "gain".into(),
            Metric::SteeringRange => "steering_range".into(),
            Metric::InputNoise => "input_noise".into(),
            Metric::CollectorBaseMargin => "collector_base_margin".into(),
            Metric::Yield => "yield".into(),
        }
    }

    /// The metric a plan name stands for (`hd3` → third harmonic); `None` for an unknown name.
    ///
    /// ```
    /// use linbudget::Metric;
    /// assert_eq!(Metric::from_name("hd3"), Some(Metric::Harmonic(3)));
    /// assert_eq!(Metric::from_name("iip3"), Some(Metric::Iip3));
    /// assert_eq!(Metric::from_name("hd1"), None);
    /// assert_eq!(Metric::from_name("hd+3"), None);
    /// ```
    pub fn from_name(text: &str) -> Option<Metric> {
        Some(match text {
            "thd" => Metric::Thd,
            "im3" => Metric::Im3,
            "iip3" => Metric::Iip3,
            "oip3" => Metric::Oip3,
            "p1db" => Metric::P1db,
            "gain" => Metric::Gain,
            "steering_range" => Metric::SteeringRange,
            "input_noise" => Metric::InputNoise,
            "collector_base_margin" => Metric::CollectorBaseMargin,
            "yield" => Metric::Yield,
            other => {
                // Digits only: `parse` alone would also take `hd+3`.
                let digits = other.strip_prefix("hd")?;
                if digits.is_empty()
                    || digits.starts_with('0')
                    || !digits.bytes().all(|b| b.is_ascii_digit())
                {
                    return None;
                }
                let order: usize = digits.parse().ok()?;
                if order < 2 {
                    return None;
                }
                Metric::Harmonic(order)
            }
        })
    }

    /// Whether the metric is a level in dB (limits are plain numbers) rather than a quantity.
    pub fn is_decibel(self) -> bool {
        matches!(
            self,
            Metric::Harmonic(_) | Metric::Thd | Metric::Im3 | Metric::Gain
        )
    }

    /// Whether the metric is a level relative to the fundamental (dBc): a distortion product,
    /// which a budget can only bound from above.
    pub fn is_dbc(self) -> bool {
        matches!(self, Metric::Harmonic(_) | Metric::Thd | Metric::Im3)
    }

    /// Whether the metric is judged on the Monte Carlo population rather than on one stage.
    pub fn is_population(self) -> bool {
        self == Metric::Yield
    }

    /// Whether the metric depends on the drive amplitude (`at`).
    pub fn needs_amplitude(self) -> bool {
        matches!(
            self,
            Metric::Harmonic(_) | Metric::Thd | Metric::Im3 | Metric::CollectorBaseMargin
        )
    }

    /// Whether a line's margin is a difference in the metric's own unit (volts) rather than
    /// dB: the collector-base margin, which is negative in saturation.
    pub fn margin_in_volts(self) -> bool {
        self == Metric::CollectorBaseMargin
    }

    /// Unit label of the limit and value.
    pub fn unit_label(self) -> &'static str {
        match self {
            Metric::Harmonic(_) | Metric::Thd | Metric::Im3 => "dBc",
            Metric::Gain => "dB",
            Metric::InputNoise => "V/√Hz",
            Metric::Yield => "fraction",
            _ => "V",
        }
    }
}

/// Whether a budget line is an upper or a lower bound.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Limit {
    /// The value must not exceed this.
    Max(f64),
    /// The value must be at least this.
    Min(f64),
}

impl Limit {
    /// The limit's number.
    pub fn value(self) -> f64 {
        match self {
            Limit::Max(v) | Limit::Min(v) => v,
        }
    }

    /// `max` or `min`.
    pub fn kind(self) -> &'static str {
        match self {
            Limit::Max(_) => "max",
            Limit::Min(_) => "min",
        }
    }
}

/// One budget line.
///
/// ```
/// use linbudget::{BudgetLine, Drive, Limit, Metric};
///
/// let line = BudgetLine::new(Metric::Harmonic(3), Limit::Max(-60.0)).at(0.1);
/// let drive = Drive::new(vec![0.01, 0.1]).frequencies(vec![1e3, 1e6]);
/// assert_eq!(drive.amplitude_of(&line), 0.1);
/// assert_eq!(drive.frequency_of(&line), 1e3); // the first drive frequency by default
/// ```
#[derive(Debug, Clone, PartialEq)]
pub struct BudgetLine {
    /// The constrained figure.
    pub metric: Metric,
    /// Input amplitude, V (amplitude-dependent metrics; default: the largest drive amplitude).
    pub at: Option<f64>,
    /// Frequency, Hz (default: the first drive frequency).
    pub frequency: Option<f64>,
    /// The bound.
    pub limit: Limit,
}

impl BudgetLine {
    /// A line on `metric` with `limit`, at the default amplitude and frequency.
    pub fn new(metric: Metric, limit: Limit) -> Self {
        BudgetLine {
            metric,
            at: None,
            frequency: None,
            limit,
        }
    }

    /// Sets the input amplitude the line applies at, V.
    #[must_use]
    pub fn at(mut self, amplitude_v: f64) -> Self {
        self.at = Some(amplitude_v);
        self
    }

    /// Sets the frequency the line applies at, Hz.
    #[must_use]
    pub fn frequency(mut self, frequency_hz: f64) -> Self {
        self.frequency = Some(frequency_hz);
        self
    }
}
