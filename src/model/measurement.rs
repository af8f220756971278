//! Bench measurements and the fit of a stage to them, as plain data: which figures were
//! measured at which temperature, frequency and amplitude, and which stage parameters a fit
//! may move within which bounds. Reading them from CSV is the plan reader's job; fitting is
//! the study layer's.

use super::stage::Stage;

/// A figure a bench sweep can report, with the same meaning as in `report.json`.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub enum BenchFigure {
    /// 20·log10(fundamental / amplitude), dB.
    Gain,
    /// The n-th harmonic of the differential output, dBc (2 ≤ n ≤ 9).
    Harmonic(usize),
    /// Total harmonic distortion, dBc.
    Thd,
    /// Third-order intermodulation of two equal tones, dBc.
    Im3,
    /// Second-order intermodulation of two equal tones, dBc.
    Im2,
    /// Peak differential output fundamental, V.
    Fundamental,
    /// Input offset: the differential input that balances the collector currents, V.
    Offset,
}

/// Highest harmonic a bench file may report (`hd9_dbc`).
pub const HIGHEST_BENCH_HARMONIC: usize = 9;

impl BenchFigure {
    /// Every figure in column order.
    pub fn all() -> Vec<BenchFigure> {
        let mut all = vec![BenchFigure::Gain];
        all.extend((2..=HIGHEST_BENCH_HARMONIC).map(BenchFigure::Harmonic));
        all.extend([
            BenchFigure::Thd,
            BenchFigure::Im3,
            BenchFigure::Im2,
            BenchFigure::Fundamental,
            BenchFigure::Offset,
        ]);
        all
    }

    /// The metric name used in plans and reports (`hd3`, `gain`, `offset`).
    pub fn name(self) -> String {
        match self {
            BenchFigure::Gain => "gain".into(),
            BenchFigure::Harmonic(n) => format!("hd{n}"),
            BenchFigure::Thd => "thd".into(),
            BenchFigure::Im3 => "im3".into(),
            BenchFigure::Im2 => "im2".into(),
            BenchFigure::Fundamental => "fundamental".into(),
            BenchFigure::Offset => "offset".into(),
        }
    }

    /// The figure a metric name stands for; `None` for an unknown name.
    ///
    /// ```
    /// use linbudget::model::measurement::BenchFigure;
    /// assert_eq!(BenchFigure::from_name("hd3"), Some(BenchFigure::Harmonic(3)));
    /// assert_eq!(BenchFigure::from_name("hd10"), None);
    /// ```
    pub fn from_name(name: &str) -> Option<BenchFigure> {
        BenchFigure::all().into_iter().find(|f| f.name() == name)
    }

    /// The CSV column that holds it (`hd3_dbc`, `gain_db`, `offset_v`).
    pub fn column(self) -> String {
        format!("{}_{}", self.name(), self.column_unit())
    }

    /// The unit suffix of its column: `db`, `dbc` or `v`.
    fn column_unit(self) -> &'static str {
        match self {
            BenchFigure::Gain => "db",
            BenchFigure::Fundamental | BenchFigure::Offset => "v",
            _ => "dbc",
        }
    }

    /// The unit label of values and residuals: dB, dBc, or V for the offset. Residuals of
    /// the fundamental are in dB (20·log10 of the ratio).
    pub fn unit_label(self) -> &'static str {
        match self {
            BenchFigure::Gain => "dB",
            BenchFigure::Fundamental => "V",
            BenchFigure::Offset => "V",
            _ => "dBc",
        }
    }

    /// Whether the figure needs the two-tone test.
    pub fn is_two_tone(self) -> bool {
        matches!(self, BenchFigure::Im3 | BenchFigure::Im2)
    }

    /// The residual model − bench in the unit the fit works in: dB for every level
    /// (`20·log10(model/bench)` for the fundamental), millivolts for the offset.
    pub fn residual(self, model: f64, bench: f64) -> f64 {
        match self {
            BenchFigure::Fundamental => 20.0 * (model / bench).log10(),
            BenchFigure::Offset => 1e3 * (model - bench),
            _ => model - bench,
        }
    }

    /// The unit of [`BenchFigure::residual`]: `dB`, or `mV` for the offset.
    pub fn residual_unit(self) -> &'static str {
        match self {
            BenchFigure::Offset => "mV",
            _ => "dB",
        }
    }
}

/// One measured drive point of a bench sweep (one CSV row).
#[derive(Debug, Clone, PartialEq)]
pub struct BenchPoint {
    /// The row of the file it was read from (1-based; the header is row 1).
    pub row: u64,
    /// Temperature, °C.
    pub temperature_c: f64,
    /// Signal frequency, Hz (the lower tone for two-tone figures).
    pub frequency_hz: f64,
    /// Peak differential input per tone, V.
    pub amplitude_v: f64,
    /// The plan's process corner the part belongs to (`None`: typical).
    pub corner: Option<String>,
    /// A free label of the part measured (die, board, sample), if given.
    pub die: Option<String>,
    /// The figures measured at this point, in column order (an empty cell is not measured).
    pub values: Vec<(BenchFigure, f64)>,
}

impl BenchPoint {
    /// The measured value of `figure`, if this row has one.
    pub fn value(&self, figure: BenchFigure) -> Option<f64> {
        self.values
            .iter()
            .find(|(f, _)| *f == figure)
            .map(|(_, v)| *v)
    }
}

/// A bench sweep of one stage, read from one file.
#[derive(Debug, Clone, PartialEq)]
pub struct Measurements {
    /// The plan stage the part implements.
    pub stage: String,
    /// The file as named in the plan (for messages and records).
    pub file: String,
    /// The measured points, in file order.
    pub points: Vec<BenchPoint>,
}

/// One stage parameter a fit may move, with its bounds, in SI base units.
#[derive(Debug, Clone, PartialEq)]
pub struct FitParameter {
    /// The stage key, dotted for nested ones (`emitter_resistance`,
    /// `transistor.base_resistance`, `mismatch.saturation_current`).
    pub key: String,
    /// Lower bound.
    pub from: f64,
    /// Upper bound.
    pub to: f64,
}

/// What to fit and how, for every stage with measurements.
#[derive(Debug, Clone, PartialEq)]
pub struct FitSettings {
    /// The parameters moved, in plan order.
    pub parameters: Vec<FitParameter>,
    /// The figures whose model − bench residuals are minimised.
    pub metrics: Vec<BenchFigure>,
    /// Relative weight of each metric's squared residuals (absent: 1).
    pub weights: Vec<(BenchFigure, f64)>,
}

impl FitSettings {
    /// The weight of a metric's squared residuals.
    pub fn weight(&self, figure: BenchFigure) -> f64 {
        self.weights
            .iter()
            .find(|(f, _)| *f == figure)
            .map_or(1.0, |(_, w)| *w)
    }
}

/// Suffix of the name of a stage fitted to bench data (`input-pair@fitted`).
pub const FITTED_SUFFIX: &str = "@fitted";

/// The name of the fitted twin of a stage.
pub fn fitted_name(stage: &str) -> String {
    format!("{stage}{FITTED_SUFFIX}")
}

/// A stage parameter a fit can move: its dotted key, unit symbol and how to read and set it.
pub struct StageParameter {
    /// The dotted key (`transistor.base_resistance`).
    pub key: &'static str,
    /// Unit symbol of its values (`Ω`, `A`, empty for ratios and numbers).
    pub unit: &'static str,
    get: fn(&Stage) -> f64,
    set: fn(&mut Stage, f64),
}

impl StageParameter {
    /// The parameter's value in `stage`.
    pub fn get(&self, stage: &Stage) -> f64 {
        (self.get)(stage)
    }

    /// Sets the parameter in `stage`.
    pub fn set(&self, stage: &mut Stage, value: f64) {
        (self.set)(stage, value)
    }

    /// The parameter of a dotted key, if a fit can move it.
    ///
    /// ```
    /// use linbudget::Stage;
    /// use linbudget::model::measurement::StageParameter;
    ///
    /// let key = StageParameter::find("transistor.base_resistance").unwrap();
    /// let mut stage = Stage::new("s", 1e-3, 2e3);
    /// key.set(&mut stage, 150.0);
    /// assert_eq!(stage.transistor.base_resistance, 150.0);
    /// assert!(StageParameter::find("name").is_none());
    /// ```
    pub fn find(key: &str) -> Option<&'static StageParameter> {
        STAGE_PARAMETERS.iter().find(|p| p.key == key)
    }

    /// Every key a fit can move.
    pub fn keys() -> impl Iterator<Item = &'static str> {
        STAGE_PARAMETERS.iter().map(|p| p.key)
    }
}

macro_rules! parameters {
    ($($key:literal, $unit:literal, |$s:ident| $($field:ident).+;)*) => {
        /// Every stage parameter a fit can move.
        pub static STAGE_PARAMETERS: &[StageParameter] = &[
            $(StageParameter {
                key: $key,
                unit: $unit,
                get: |$s: &Stage| $s.$($field).+,
                set: |$s: &mut Stage, value: f64| $s.$($field).+ = value,
            },)*
        ];
    };
}

parameters! {
    "tail_current", "A", |s| tail_current;
    "load_resistance", "Ω", |s| load_resistance;
    "emitter_resistance", "Ω", |s| emitter_resistance;
    "source_resistance", "Ω", |s| source_resistance;
    "tail_resistance", "Ω", |s| tail_resistance;
    "load_capacitance", "F", |s| load_capacitance;
    "tail_capacitance", "F", |s| tail_capacitance;
    "transistor.saturation_current", "A", |s| transistor.saturation_current;
    "transistor.beta", "", |s| transistor.beta;
    "transistor.early_voltage", "V", |s| transistor.early_voltage;
    "transistor.base_resistance", "Ω", |s| transistor.base_resistance;
    "transistor.transit_time", "s", |s| transistor.transit_time;
    "transistor.emitter_junction_capacitance", "F", |s| transistor.emitter_junction_capacitance;
    "transistor.collector_junction_capacitance", "F", |s| transistor.collector_junction_capacitance;
    "mismatch.saturation_current", "", |s| mismatch.saturation_current;
    "mismatch.emitter_resistance", "", |s| mismatch.emitter_resistance;
    "mismatch.load_resistance", "", |s| mismatch.load_resistance;
    "mismatch.base_resistance", "", |s| mismatch.base_resistance;
    "mismatch.beta", "", |s| mismatch.beta;
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn every_figure_has_a_column_that_names_it_back() {
        for figure in BenchFigure::all() {
            assert_eq!(BenchFigure::from_name(&figure.name()), Some(figure));
        }
        assert_eq!(BenchFigure::Harmonic(3).column(), "hd3_dbc");
        assert_eq!(BenchFigure::Gain.column(), "gain_db");
        assert_eq!(BenchFigure::Offset.column(), "offset_v");
    }

    #[test]
    fn every_parameter_reads_back_what_it_set() {
        for parameter in STAGE_PARAMETERS {
            let mut stage = Stage::default();
            parameter.set(&mut stage, 0.125);
            assert_eq!(parameter.get(&stage), 0.125, "{}", parameter.key);
        }
    }
}
