//! How a stage linearises its pair: emitter resistors with one tail source, one resistor
//! between the emitters fed by two tail sources (split tail), or several offset pairs in
//! parallel sharing the loads (multi-tanh). Plain data; [`super::circuit`] makes it concrete.

/// The stage's circuit form.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum Topology {
    /// `emitter_resistance` in series with each emitter, one tail source (the default).
    #[default]
    EmitterResistors,
    /// One resistor of `2·emitter_resistance` between the emitters and two tail sources of half
    /// the current, one at each emitter: the same differential transfer as the emitter-resistor
    /// form for ideal sources, without the DC drop `I·R_E/2` below the emitters.
    SplitTail,
    /// Several pairs in parallel on the same inputs and loads, each with its own tail source
    /// and emitter-area ratio (an input offset of `φT·ln(area_p/area_m)`).
    MultiTanh,
}

impl Topology {
    /// The name used in plans and reports.
    pub fn name(self) -> &'static str {
        match self {
            Topology::EmitterResistors => "emitter_resistors",
            Topology::SplitTail => "split_tail",
            Topology::MultiTanh => "multi_tanh",
        }
    }

    /// The topology with the given plan name.
    pub fn from_name(name: &str) -> Option<Self> {
        match name {
            "emitter_resistors" => Some(Topology::EmitterResistors),
            "split_tail" => Some(Topology::SplitTail),
            "multi_tanh" => Some(Topology::MultiTanh),
            _ => None,
        }
    }

    /// Every plan name, for error messages.
    pub const NAMES: [&'static str; 3] = ["emitter_resistors", "split_tail", "multi_tanh"];
}

/// The named symmetric multi-tanh cells, or a list of pairs.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum MultiTanhForm {
    /// Two pairs with areas `A:1` and `1:A`, half the current each.
    #[default]
    Doublet,
    /// Two outer pairs `A:1` and `1:A` and a centre pair `1:1` carrying `centre_fraction` of
    /// the current; the outer pairs share the rest equally.
    Triplet,
    /// The pairs as listed in [`MultiTanh::pairs`].
    Pairs,
}

impl MultiTanhForm {
    /// The name used in plans and reports.
    pub fn name(self) -> &'static str {
        match self {
            MultiTanhForm::Doublet => "doublet",
            MultiTanhForm::Triplet => "triplet",
            MultiTanhForm::Pairs => "pairs",
        }
    }
}

/// One pair of a multi-tanh cell.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct TanhPair {
    /// Emitter area of the P transistor, relative to a unit device.
    pub area_p: f64,
    /// Emitter area of the M transistor, relative to a unit device.
    pub area_m: f64,
    /// Fraction of the stage's tail current this pair's own tail source carries.
    pub tail_fraction: f64,
    /// Emitter resistance per side of this pair, Ω (`None`: the stage's `emitter_resistance`).
    pub emitter_resistance: Option<f64>,
}

impl TanhPair {
    /// A pair with the given areas and tail fraction and the stage's degeneration.
    pub fn new(area_p: f64, area_m: f64, tail_fraction: f64) -> Self {
        TanhPair {
            area_p,
            area_m,
            tail_fraction,
            emitter_resistance: None,
        }
    }
}

/// A multi-tanh cell: the form, its area ratio, and for a triplet the centre pair's share.
///
/// `area_ratio` is a plain field so that a sizing search can set it:
///
/// ```
/// use linbudget::{MultiTanh, Stage};
///
/// let mut stage = Stage::new("cell", 2e-3, 1e3).multi_tanh(MultiTanh::doublet(3.0));
/// stage.multi_tanh.area_ratio = 2.0 + 3f64.sqrt();
/// let pairs = stage.multi_tanh.pairs();
/// assert_eq!(pairs.len(), 2);
/// assert_eq!(pairs[0].area_p, 2.0 + 3f64.sqrt());
/// assert_eq!(pairs[1].area_m, 2.0 + 3f64.sqrt());
/// ```
#[derive(Debug, Clone, PartialEq)]
pub struct MultiTanh {
    /// Which cell.
    pub form: MultiTanhForm,
    /// Emitter-area ratio `A` of the offset pairs (doublet and triplet).
    pub area_ratio: f64,
    /// Share of the tail current in the centre pair of a triplet.
    pub centre_fraction: f64,
    /// The pairs, for [`MultiTanhForm::Pairs`].
    pub list: Vec<TanhPair>,
}

impl Default for MultiTanh {
    /// The doublet at `A = 2 + √3`, where its third-order term vanishes.
    fn default() -> Self {
        MultiTanh::doublet(2.0 + 3f64.sqrt())
    }
}

impl MultiTanh {
    /// A doublet of area ratio `A`.
    pub fn doublet(area_ratio: f64) -> Self {
        MultiTanh {
            form: MultiTanhForm::Doublet,
            area_ratio,
            centre_fraction: 1.0 / 3.0,
            list: Vec::new(),
        }
    }

    /// A triplet of area ratio `A` with `centre_fraction` of the current in the centre pair.
    pub fn triplet(area_ratio: f64, centre_fraction: f64) -> Self {
        MultiTanh {
            form: MultiTanhForm::Triplet,
            area_ratio,
            centre_fraction,
            list: Vec::new(),
        }
    }

    /// A cell of the listed pairs.
    pub fn pairs_of(list: Vec<TanhPair>) -> Self {
        MultiTanh {
            form: MultiTanhForm::Pairs,
            area_ratio: 1.0,
            centre_fraction: 0.0,
            list,
        }
    }

    /// The cell's pairs, P side first in each.
    pub fn pairs(&self) -> Vec<TanhPair> {
        let a = self.area_ratio;
        match self.form {
            MultiTanhForm::Doublet => vec![TanhPair::new(a, 1.0, 0.5), TanhPair::new(1.0, a, 0.5)],
            MultiTanhForm::Triplet => {
                let outer = 0.5 * (1.0 - self.centre_fraction);
                vec![
                    TanhPair::new(a, 1.0, outer),
                    TanhPair::new(1.0, 1.0, self.centre_fraction),
                    TanhPair::new(1.0, a, outer),
                ]
            }
            MultiTanhForm::Pairs => self.list.clone(),
        }
    }
}
