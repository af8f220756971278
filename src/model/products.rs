//! Where the products of two tones fall: the product frequency algebra `m·f1 + n·f2`.
//!
//! A stage driven by two tones at `f1 = f` and `f2 = f + Δ` produces every product
//! `m·f1 + n·f2` (order `|m| + |n|`). A stage with charge storage is solved over the two
//! tones' common period `1/gcd(f1, f2)`: with `f1 = p·f0` and `f2 = q·f0` every product lands
//! on the FFT bin `|m·p + n·q|` of that period, and products on the same bin cannot be told
//! apart. The figures reported — IM3 (`2f1 − f2`, `2f2 − f1`) and IM2 (`f2 − f1`, `f1 + f2`) —
//! are therefore checked before solving:
//!
//! - a reported product that shares its bin with a product of lower or equal order is
//!   refused (the figure would be the other product's, e.g. IM3 read off IM2 when `f = 2Δ`);
//! - one that shares its bin only with products of higher order (up to
//!   [`ANALYSED_ORDER`]) is reported with an analysis floor set by the lowest of them.
//!
//! A memoryless stage is analysed on the torus of the two tone phases, where every product
//! has its own coefficient: none of this applies to it.

use std::fmt;

/// Largest common period of two tones, in periods of the upper tone.
pub const MAX_COMMON_PERIOD_CYCLES: u64 = 1024;
/// Highest order of the products considered when looking for collisions.
pub const ANALYSED_ORDER: u32 = 40;
/// Common periods of at most this many upper-tone cycles are preferred when suggesting a
/// spacing (they keep a two-tone point cheap).
pub const PREFERRED_CYCLES: u64 = 64;

/// `Δ/f` as a ratio `a/b` of small integers (continued fractions), when one exists with
/// `a + b ≤ MAX_COMMON_PERIOD_CYCLES` to a relative 10⁻⁹: returns `(p, q)` with
/// `f1 = p·f0`, `f2 = q·f0` (`q` upper-tone cycles per common period).
pub fn common_period_cycles(frequency_hz: f64, spacing_hz: f64) -> Option<(u64, u64)> {
    let ratio = spacing_hz / frequency_hz;
    if !(ratio.is_finite() && ratio > 0.0) {
        return None;
    }
    let (mut h0, mut h1) = (0u64, 1u64);
    let (mut k0, mut k1) = (1u64, 0u64);
    let mut value = ratio;
    for _ in 0..64 {
        let whole = value.floor();
        if whole > 1e12 {
            break;
        }
        let a = whole as u64;
        let h2 = a.checked_mul(h1)?.checked_add(h0)?;
        let k2 = a.checked_mul(k1)?.checked_add(k0)?;
        (h0, h1, k0, k1) = (h1, h2, k1, k2);
        if k1 > 0 && h1 + k1 > MAX_COMMON_PERIOD_CYCLES {
            return None;
        }
        if k1 > 0 && (h1 as f64 / k1 as f64 - ratio).abs() <= 1e-9 * ratio {
            return Some((k1, h1 + k1));
        }
        let fraction = value - whole;
        if fraction <= 0.0 {
            break;
        }
        value = 1.0 / fraction;
    }
    None
}

/// The product `first·f1 + second·f2` of two tones.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub struct Product {
    /// Multiple of the lower tone.
    pub first: i32,
    /// Multiple of the upper tone.
    pub second: i32,
}

impl Product {
    /// `first·f1 + second·f2`.
    pub const fn new(first: i32, second: i32) -> Self {
        Product { first, second }
    }

    /// `|m| + |n|`.
    pub fn order(self) -> u32 {
        self.first.unsigned_abs() + self.second.unsigned_abs()
    }

    /// The bin of the common period it lands on, with `f1 = p·f0` and `f2 = q·f0`.
    pub fn bin(self, p: u64, q: u64) -> u64 {
        (self.first as i128 * p as i128 + self.second as i128 * q as i128).unsigned_abs() as u64
    }

    /// The same frequency component written with a positive frequency (or `(0, 0)`).
    fn canonical(self, p: u64, q: u64) -> Self {
        let value = self.first as i128 * p as i128 + self.second as i128 * q as i128;
        if value < 0 || (value == 0 && (self.first < 0 || (self.first == 0 && self.second < 0))) {
            Product::new(-self.first, -self.second)
        } else {
            self
        }
    }

    /// The product one step down its family: both multiples one closer to zero (order − 2),
    /// e.g. `9f1 − 8f2` for `10f1 − 9f2`. `None` when a multiple is already zero.
    pub fn family_neighbour(self) -> Option<Product> {
        (self.first != 0 && self.second != 0).then(|| {
            Product::new(
                self.first - self.first.signum(),
                self.second - self.second.signum(),
            )
        })
    }
}

impl fmt::Display for Product {
    /// `2f1 − f2`, `f2 − f1`, `f1 + f2`, `10f1 − 9f2`, `2f1`, `DC`.
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let term = |multiple: i32, name: &str| -> String {
            match multiple.unsigned_abs() {
                1 => name.to_owned(),
                k => format!("{k}{name}"),
            }
        };
        let (m, n) = (self.first, self.second);
        match (m, n) {
            (0, 0) => write!(f, "DC"),
            (m, 0) => write!(f, "{}", term(m, "f1")),
            (0, n) => write!(f, "{}", term(n, "f2")),
            (m, n) if m > 0 && n > 0 => write!(f, "{} + {}", term(m, "f1"), term(n, "f2")),
            (m, n) if m > 0 => write!(f, "{} − {}", term(m, "f1"), term(n, "f2")),
            (m, n) if n > 0 => write!(f, "{} − {}", term(n, "f2"), term(m, "f1")),
            (m, n) => write!(f, "−({} + {})", term(m, "f1"), term(n, "f2")),
        }
    }
}

/// A two-tone figure the reports carry.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum TwoToneFigure {
    /// Third-order intermodulation (`2f1 − f2`, `2f2 − f1`).
    Im3,
    /// Second-order intermodulation (`f2 − f1`, `f1 + f2`).
    Im2,
}

impl TwoToneFigure {
    /// The figure's name in reports (`im3`, `im2`).
    pub fn name(self) -> &'static str {
        match self {
            TwoToneFigure::Im3 => "im3",
            TwoToneFigure::Im2 => "im2",
        }
    }
}

/// The products the reports carry, with the figure each belongs to.
pub const REPORTED: [(Product, TwoToneFigure); 4] = [
    (Product::new(2, -1), TwoToneFigure::Im3),
    (Product::new(-1, 2), TwoToneFigure::Im3),
    (Product::new(-1, 1), TwoToneFigure::Im2),
    (Product::new(1, 1), TwoToneFigure::Im2),
];

/// A reported product sharing its bin with another product.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Collision {
    /// The reported product.
    pub reported: Product,
    /// The figure it belongs to.
    pub figure: TwoToneFigure,
    /// The other product on the same bin.
    pub other: Product,
}

impl Collision {
    /// Whether the other product is of lower or equal order: the figure would be its, and
    /// the plan must be refused.
    pub fn is_refused(&self) -> bool {
        self.other.order() <= self.reported.order()
    }
}

/// Every product of order at most `highest_order` sharing a bin with a reported product, for
/// tones at `f1 = p·f0`, `f2 = q·f0`; per reported product the lowest order first.
pub fn collisions(p: u64, q: u64, highest_order: u32) -> Vec<Collision> {
    let mut found = Vec::new();
    let limit = highest_order as i32;
    for (reported, figure) in REPORTED {
        let bin = reported.bin(p, q);
        let own = reported.canonical(p, q);
        let mut here: Vec<Product> = Vec::new();
        for m in -limit..=limit {
            let rest = limit - m.abs();
            for n in -rest..=rest {
                let product = Product::new(m, n);
                if product.bin(p, q) != bin {
                    continue;
                }
                let canonical = product.canonical(p, q);
                if canonical != own && !here.contains(&canonical) {
                    here.push(canonical);
                }
            }
        }
        here.sort_by_key(|product| (product.order(), product.first.abs(), product.first));
        found.extend(here.into_iter().map(|other| Collision {
            reported,
            figure,
            other,
        }));
    }
    found
}

/// Two tones whose common period spans more than [`MAX_COMMON_PERIOD_CYCLES`] upper-tone
/// cycles.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct PeriodTooLong;

/// The first refused collision of a two-tone drive at `frequency_hz` and `spacing_hz`, or
/// `None` when every reported product stands on its own bin (or only shares it with
/// higher orders).
pub fn refused_collision(
    frequency_hz: f64,
    spacing_hz: f64,
) -> Result<Option<Collision>, PeriodTooLong> {
    let (p, q) = common_period_cycles(frequency_hz, spacing_hz).ok_or(PeriodTooLong)?;
    // Refusal needs an order no higher than the reported products' (3): a cheap search.
    Ok(collisions(p, q, 3).into_iter().find(Collision::is_refused))
}

/// The spacing nearest to `spacing_hz` (three significant digits) whose common period with
/// `frequency_hz` is within [`PREFERRED_CYCLES`] upper-tone cycles (else within
/// [`MAX_COMMON_PERIOD_CYCLES`]) and whose reported products collide with no product of
/// lower or equal order.
pub fn separating_spacing(frequency_hz: f64, spacing_hz: f64) -> Option<f64> {
    if !(frequency_hz.is_finite()
        && spacing_hz.is_finite()
        && frequency_hz > 0.0
        && spacing_hz > 0.0)
    {
        return None;
    }
    let decade = spacing_hz.log10().floor() as i32;
    let mut candidates: Vec<f64> = Vec::new();
    for exponent in decade - 2..=decade + 1 {
        for digits in 100..1000 {
            // Three significant digits, parsed from text so the value is the one typed.
            let value: f64 = format!("{digits}e{}", exponent - 2).parse().unwrap_or(0.0);
            if value >= 0.25 * spacing_hz && value <= 4.0 * spacing_hz && value != spacing_hz {
                candidates.push(value);
            }
        }
    }
    candidates.sort_by(|a, b| {
        let distance = |x: f64| (x / spacing_hz).ln().abs();
        distance(*a).total_cmp(&distance(*b))
    });
    candidates.dedup();
    for cap in [PREFERRED_CYCLES, MAX_COMMON_PERIOD_CYCLES] {
        let found = candidates.iter().copied().find(|&candidate| {
            common_period_cycles(frequency_hz, candidate).is_some_and(|(_, q)| q <= cap)
                && refused_collision(frequency_hz, candidate).is_ok_and(|c| c.is_none())
        });
        if found.is_some() {
            return found;
        }
    }
    None
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn common_periods_are_found_for_simple_ratios_only() {
        assert_eq!(common_period_cycles(1e6, 1e5), Some((10, 11)));
        assert_eq!(common_period_cycles(1e3, 1e5), Some((1, 101)));
        assert_eq!(common_period_cycles(3e6, 2e6), Some((3, 5)));
        assert_eq!(common_period_cycles(1e7, 1.0), None);
        assert_eq!(common_period_cycles(1e6, 1e6 / std::f64::consts::PI), None);
    }

    /// Product frequency algebra m·f1 + n·f2 (common practice): at f = 1 MHz with a 500 kHz
    /// spacing, f1 = 2·f0 and f2 = 3·f0 (f0 = 500 kHz), so 2f1 − f2 = f0 = f2 − f1 (IM3 on
    /// IM2) and 2f2 − f1 = 4·f0 = 2f1 (IM3 on the lower tone's second harmonic).
    #[test]
    fn im3_on_im2_and_on_a_harmonic_is_refused() {
        let (p, q) = common_period_cycles(1e6, 5e5).unwrap();
        assert_eq!((p, q), (2, 3));
        let found = collisions(p, q, 3);
        let refused: Vec<_> = found.iter().filter(|c| c.is_refused()).collect();
        assert!(refused
            .iter()
            .any(|c| c.reported == Product::new(2, -1) && c.other == Product::new(-1, 1)));
        assert!(refused
            .iter()
            .any(|c| c.reported == Product::new(-1, 2) && c.other == Product::new(2, 0)));
        let first = refused_collision(1e6, 5e5).unwrap().unwrap();
        assert_eq!(first.figure, TwoToneFigure::Im3);
        assert_eq!(first.other.to_string(), "f2 − f1");
    }

    /// IM2 on a harmonic: f = 1 MHz, Δ = 1 MHz puts f2 − f1 on f1 itself (order 1), and
    /// 2f1 − f2 at DC (order 0).
    #[test]
    fn im2_on_the_fundamental_and_im3_at_dc_are_refused() {
        let (p, q) = common_period_cycles(1e6, 1e6).unwrap();
        let found = collisions(p, q, 3);
        assert!(found.iter().any(|c| c.reported == Product::new(-1, 1)
            && c.other == Product::new(1, 0)
            && c.is_refused()));
        assert!(found
            .iter()
            .any(|c| c.reported == Product::new(2, -1) && c.other == Product::new(0, 0)));
        // IM2 on the second harmonic of f1: Δ = 2f (f1 = f0, f2 = 3f0, f2 − f1 = 2f0 = 2f1).
        let (p, q) = common_period_cycles(1e6, 2e6).unwrap();
        assert!(collisions(p, q, 3)
            .iter()
            .any(|c| c.reported == Product::new(-1, 1)
                && c.other == Product::new(2, 0)
                && c.is_refused()));
    }

    /// With Δ dividing f (f/Δ = 10: f1 = 10·f0, f2 = 11·f0) the odd products 2f1 − f2,
    /// 3f1 − 2f2, … step down by Δ until 10f1 − 9f2 (order 19) lands on f2 − f1: a
    /// higher-order collision, reported as IM2's floor, not refused.
    #[test]
    fn a_much_higher_order_product_on_im2_limits_it_without_refusal() {
        let (p, q) = common_period_cycles(1e6, 1e5).unwrap();
        let found = collisions(p, q, ANALYSED_ORDER);
        let on_im2: Vec<_> = found
            .iter()
            .filter(|c| c.reported == Product::new(-1, 1))
            .collect();
        assert_eq!(on_im2[0].other, Product::new(10, -9));
        assert_eq!(on_im2[0].other.order(), 19);
        assert!(!on_im2[0].is_refused());
        assert!(refused_collision(1e6, 1e5).unwrap().is_none());
        assert_eq!(
            Product::new(10, -9).family_neighbour(),
            Some(Product::new(9, -8))
        );
    }

    #[test]
    fn the_suggested_spacing_separates_the_products_and_is_typed_exactly() {
        let suggested = separating_spacing(1e6, 5e5).unwrap();
        assert!(refused_collision(1e6, suggested).unwrap().is_none());
        let (_, q) = common_period_cycles(1e6, suggested).unwrap();
        assert!(q <= PREFERRED_CYCLES);
        // Within 20 % of the spacing asked for, and the value printed is the value typed.
        assert!((suggested / 5e5 - 1.0).abs() <= 0.2, "{suggested}");
        let typed: f64 = crate::units::short_number(suggested).parse().unwrap();
        assert_eq!(typed, suggested);
    }

    #[test]
    fn products_are_named_by_their_tones() {
        assert_eq!(Product::new(2, -1).to_string(), "2f1 − f2");
        assert_eq!(Product::new(-1, 2).to_string(), "2f2 − f1");
        assert_eq!(Product::new(-1, 1).to_string(), "f2 − f1");
        assert_eq!(Product::new(1, 1).to_string(), "f1 + f2");
        assert_eq!(Product::new(2, 0).to_string(), "2f1");
        assert_eq!(Product::new(0, 0).to_string(), "DC");
    }
}
