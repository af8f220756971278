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
        let mut a = matrix.to_vec();
        let mut pivots = vec![0; size];
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
                return None;
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
        Some(Lu {
            size,
            factors: a,
            pivots,
        })
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

    /// Solves `A·X = B` for a row-major `size × columns` right-hand side, in place.
    pub fn solve_columns(&self, b: &mut [f64], columns: usize, scratch: &mut Vec<f64>) {
        let n = self.size;
        scratch.resize(n, 0.0);
        for c in 0..columns {
            for r in 0..n {
                scratch[r] = b[r * columns + c];
            }
            self.solve(scratch);
            for r in 0..n {
                b[r * columns + c] = scratch[r];
            }
        }
    }
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
    }
}
