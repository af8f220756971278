//! Small dense linear algebra for the time stepper: LU factorisation with partial pivoting of
//! row-major square matrices (a handful to a few dozen unknowns).

// Index loops mirror the matrix formulas they implement.
#![allow(clippy::needless_range_loop)]

/// An LU factorisation `P·A = L·U` of a square matrix, stored in place.
#[derive(Debug, Clone)]
pub struct Lu {
    size: usize,
    factors: Vec<f64>,
    pivots: Vec<usize>,
}

impl Lu {
    /// Factorises the row-major `size × size` matrix `matrix`; `None` when a pivot is zero or
    /// not finite (the matrix is singular to working precision).
    pub fn factor(matrix: &[f64], size: usize) -> Option<Lu> {
        let mut lu = Lu {
            size,
            factors: Vec::with_capacity(size * size),
            pivots: vec![0; size],
        };
        lu.refactor(matrix).then_some(lu)
    }

    /// An empty factorisation whose buffers [`Lu::refactor`] fills (no allocation per use).
    pub fn with_size(size: usize) -> Lu {
        Lu {
            size,
            factors: vec![0.0; size * size],
            pivots: vec![0; size],
        }
    }

    /// Factorises `matrix` (row-major, this factorisation's size) into the existing buffers;
    /// `false` when a pivot is zero or not finite (the factors are then unusable).
    pub fn refactor(&mut self, matrix: &[f64]) -> bool {
        let size = self.size;
        self.factors.clear();
        self.factors.extend_from_slice(&matrix[..size * size]);
        self.pivots.resize(size, 0);
        // The sizes the pair's systems use get a copy with the size known at compile time
        // (unrolled loops without bounds checks); the arithmetic is the same.
        match size {
            7 => factor_in_place::<7>(&mut self.factors, &mut self.pivots),
            9 => factor_in_place::<9>(&mut self.factors, &mut self.pivots),
            _ => factor_dynamic(&mut self.factors, &mut self.pivots, size),
        }
    }

    /// Solves `A·x = b` in place (`b` becomes `x`).
    pub fn solve(&self, b: &mut [f64]) {
        let n = self.size;
        for col in 0..n {
            b.swap(col, self.pivots[col]);
        }
        for row in 0..n {
            let mut sum = b[row];
            for k in 0..row {
                sum -= self.factors[row * n + k] * b[k];
            }
            b[row] = sum;
        }
        for row in (0..n).rev() {
            let mut sum = b[row];
            for k in row + 1..n {
                sum -= self.factors[row * n + k] * b[k];
            }
            b[row] = sum / self.factors[row * n + row];
        }
    }

    /// Solves `A·X = B` for a row-major `size × columns` right-hand side, in place (row
    /// operations over all columns at once).
    pub fn solve_columns(&self, b: &mut [f64], columns: usize, scratch: &mut Vec<f64>) {
        let n = self.size;
        scratch.resize(columns, 0.0);
        for col in 0..n {
            let p = self.pivots[col];
            if p != col {
                for c in 0..columns {
                    b.swap(col * columns + c, p * columns + c);
                }
            }
        }
        for row in 0..n {
            let (done, rest) = b.split_at_mut(row * columns);
            let target = &mut rest[..columns];
            for k in 0..row {
                let factor = self.factors[row * n + k];
                if factor != 0.0 {
                    for (t, v) in target
                        .iter_mut()
                        .zip(&done[k * columns..k * columns + columns])
                    {
                        *t -= factor * v;
                    }
                }
            }
        }
        for row in (0..n).rev() {
            let (head, tail) = b.split_at_mut((row + 1) * columns);
            let target = &mut head[row * columns..];
            for k in row + 1..n {
                let factor = self.factors[row * n + k];
                if factor != 0.0 {
                    let source = &tail[(k - row - 1) * columns..(k - row) * columns];
                    for (t, v) in target.iter_mut().zip(source) {
                        *t -= factor * v;
                    }
                }
            }
            let inverse = 1.0 / self.factors[row * n + row];
            for t in target.iter_mut() {
                *t *= inverse;
            }
        }
    }
}

/// Partial-pivoting LU of a row-major `N × N` matrix in place; `false` on a zero or
/// non-finite pivot. The size is a constant here, so the inlined loops below are unrolled
/// for the pair's 7 and 9 unknowns.
fn factor_in_place<const N: usize>(a: &mut [f64], pivots: &mut [usize]) -> bool {
    factor_dynamic(&mut a[..N * N], &mut pivots[..N], N)
}

/// [`factor_in_place`] for any size.
#[inline(always)]
fn factor_dynamic(a: &mut [f64], pivots: &mut [usize], size: usize) -> bool {
    for col in 0..size {
        let mut best = col;
        let mut best_value = a[col * size + col].abs();
        for row in col + 1..size {
            let value = a[row * size + col].abs();
            if value > best_value {
                best = row;
                best_value = value;
            }
        }
        if best_value == 0.0 || !best_value.is_finite() {
            return false;
        }
        pivots[col] = best;
        if best != col {
            for k in 0..size {
                a.swap(col * size + k, best * size + k);
            }
        }
        let pivot = a[col * size + col];
        for row in col + 1..size {
            let factor = a[row * size + col] / pivot;
            a[row * size + col] = factor;
            if factor != 0.0 {
                for k in col + 1..size {
                    a[row * size + k] -= factor * a[col * size + k];
                }
            }
        }
    }
    true
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn solves_a_permuted_system_exactly() {
        // A 3×3 system with a zero leading entry (needs pivoting); solution (1, 2, 3).
        let a = [0.0, 2.0, 1.0, 1.0, 1.0, 1.0, 4.0, 0.0, 3.0];
        let mut b = [7.0, 6.0, 13.0];
        let lu = Lu::factor(&a, 3).expect("regular");
        lu.solve(&mut b);
        for (x, want) in b.iter().zip([1.0, 2.0, 3.0]) {
            assert!((x - want).abs() < 1e-14, "{b:?}");
        }
        assert!(Lu::factor(&[1.0, 2.0, 2.0, 4.0], 2).is_none());
        // Several right-hand sides at once give the same solutions as one at a time.
        let mut columns = [7.0, 1.0, 6.0, 0.0, 13.0, 4.0];
        lu.solve_columns(&mut columns, 2, &mut Vec::new());
        let mut second = [1.0, 0.0, 4.0];
        lu.solve(&mut second);
        for k in 0..3 {
            assert!(
                (columns[2 * k] - [1.0, 2.0, 3.0][k]).abs() < 1e-14,
                "{columns:?}"
            );
            assert!(
                (columns[2 * k + 1] - second[k]).abs() < 1e-14,
                "{columns:?}"
            );
        }
    }
}
