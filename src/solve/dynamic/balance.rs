//! Periodic steady state by harmonic balance in its sampled form (spectral collocation), for
//! any circuit in the charge-based form of [`super::trapezoid`]:
//!
//! ```text
//! f(x_k, t_k) + B·(D q)_k = 0,        k = 0 … N−1,  t_k = k·T/N
//! ```
//!
//! where `x_k` are the unknowns at `N` equally spaced instants of one period and `D` is the
//! exact derivative of the trigonometric polynomial through the charges' samples (FFT,
//! multiply bin `l` by `j·l·ω`, inverse FFT; the Nyquist bin has no derivative). This is
//! harmonic balance with `N/2` harmonics written on the samples: the unknowns are the same
//! numbers, only the basis differs, so the error falls faster than any power of `1/N` for the
//! smooth waveforms of a mildly driven stage, where the trapezoidal rule's falls as `1/N²`.
//!
//! **Newton with the exact Jacobian through the FFT.** The Jacobian is
//! `J·v = Fx_k·v_k + B·(D (Qx·v))_k`; it is never formed (for 7 unknowns and 256 samples
//! it would be 1,792² dense). Each Newton step is solved by GMRES (restarted, right
//! preconditioned, so the residual it measures is the true one) with the Jacobian applied
//! by the FFT. The preconditioner is the Jacobian of the *time-averaged* circuit: with
//! `F̄` and `Q̄` the means of `Fx_k` and `Qx_k` over the period it is block-diagonal in
//! frequency, one `n × n` complex block `F̄ + j·l·ω·B·Q̄` per bin, solved exactly; it is the
//! whole Jacobian for a linear circuit, and close to it for a mild drive.
//!
//! **Self-check.** Newton stops when a full step moves no sample of any unknown by more than
//! [`BalanceTolerance::absolute`] (the error after it is of order the square); a failure —
//! Newton or GMRES not converging within its cap, a non-finite value, a step cut by junction
//! limiting on the last allowed iteration — is returned as a [`BalanceFailure`], and the
//! caller falls back to shooting. The truncation of the spectrum is checked by the caller
//! (the same figures at `N` and `2N` samples).

// Index loops mirror the matrix formulas they implement.
#![allow(clippy::needless_range_loop)]

use super::trapezoid::ChargeSystem;
use num_complex::Complex;
use rustfft::Fft;
use std::sync::Arc;

/// Convergence settings of the harmonic-balance Newton iteration.
#[derive(Debug, Clone, Copy)]
pub struct BalanceTolerance {
    /// Converged once a full Newton step moves no sample of any unknown by more than this
    /// (units of `x`).
    pub absolute: f64,
    /// Newton iteration cap.
    pub max_newton: usize,
    /// GMRES stops when the linear residual has fallen by this factor.
    pub krylov_relative: f64,
    /// GMRES iteration cap per Newton step (over all restarts).
    pub max_krylov: usize,
}

/// Why harmonic balance gave up (the caller falls back to shooting).
#[derive(Debug, Clone, PartialEq)]
pub struct BalanceFailure {
    /// What went wrong.
    pub reason: String,
}

/// A converged harmonic-balance solution.
#[derive(Debug, Clone)]
pub struct BalanceSolution {
    /// Unknowns at the `N` instants (row-major, `N × unknowns`), instant 0 at `t = 0`.
    pub trajectory: Vec<f64>,
    /// Newton iterations taken.
    pub newton_iterations: usize,
    /// GMRES iterations over all Newton steps.
    pub krylov_iterations: usize,
    /// Largest change of any unknown in the last Newton step.
    pub last_step: f64,
}

thread_local! {
    /// Buffers of finished solves, reused by the next ones on the same thread: the large ones
    /// (a few MB at thousands of samples) would otherwise come fresh from the system, zeroed
    /// page by page, at every solve.
    static POOL: std::cell::RefCell<Vec<Vec<f64>>> = const { std::cell::RefCell::new(Vec::new()) };
}

/// A zeroed buffer of `len` values, from the pool when one is free.
fn pooled(len: usize) -> Vec<f64> {
    let mut buffer = POOL
        .with(|pool| {
            let mut pool = pool.borrow_mut();
            // The smallest buffer that holds `len`, else the largest (it grows once).
            let fits = (0..pool.len())
                .filter(|&k| pool[k].capacity() >= len)
                .min_by_key(|&k| pool[k].capacity());
            let best = fits.or_else(|| (0..pool.len()).max_by_key(|&k| pool[k].capacity()))?;
            Some(pool.swap_remove(best))
        })
        .unwrap_or_default();
    buffer.clear();
    buffer.resize(len, 0.0);
    buffer
}

/// Returns a buffer to the pool (at most 32 are kept).
fn release(buffer: Vec<f64>) {
    POOL.with(|pool| {
        let mut pool = pool.borrow_mut();
        if pool.len() < 32 {
            pool.push(buffer);
        }
    });
}

impl<S: ChargeSystem> Drop for Balance<'_, S> {
    fn drop(&mut self) {
        for buffer in [
            &mut self.f,
            &mut self.fx,
            &mut self.q,
            &mut self.qx,
            &mut self.fx_packed,
            &mut self.qx_packed,
            &mut self.charge_work,
            &mut self.derivative_work,
            &mut self.basis,
            &mut self.preconditioned,
        ] {
            release(std::mem::take(buffer));
        }
    }
}

/// Restart length of GMRES.
const RESTART: usize = 30;

/// The sampled periodic problem of one system at one sample count.
struct Balance<'a, S: ChargeSystem> {
    system: &'a S,
    samples: usize,
    n: usize,
    m: usize,
    omega: f64,
    period_s: f64,
    fft: Arc<dyn Fft<f64>>,
    /// Per sample: resistive part, its Jacobian, charges, their Jacobian.
    f: Vec<f64>,
    fx: Vec<f64>,
    q: Vec<f64>,
    qx: Vec<f64>,
    /// Entries (row, column) of `Fx` and `Qx` nonzero at some sample, and their values
    /// sample by sample.
    fx_pattern: Vec<(usize, usize)>,
    qx_pattern: Vec<(usize, usize)>,
    fx_packed: Vec<f64>,
    qx_packed: Vec<f64>,
    /// Nonzero entries of the coupling `B`: (row, charge, value).
    coupling: Vec<(usize, usize, f64)>,
    /// Preconditioner: the LU factors of each bin's complex block, bins `0..=N/2`, row-major,
    /// and their row pivots.
    factors: Vec<Complex<f64>>,
    pivots: Vec<usize>,
    /// Spectra of the unknowns in the preconditioner, bin-major.
    spectra: Vec<Complex<f64>>,
    /// Charges' samples in the Jacobian product, and their derivatives.
    charge_work: Vec<f64>,
    derivative_work: Vec<f64>,
    /// GMRES: the Krylov basis (`RESTART + 1` vectors) and its preconditioned images.
    basis: Vec<f64>,
    preconditioned: Vec<f64>,
    buffer: Vec<Complex<f64>>,
    scratch: Vec<Complex<f64>>,
}

impl<'a, S: ChargeSystem> Balance<'a, S> {
    fn new(system: &'a S, period_s: f64, samples: usize, fft: Arc<dyn Fft<f64>>) -> Self {
        let (n, m) = (system.unknowns(), system.charges());
        let scratch = vec![Complex::new(0.0, 0.0); fft.get_inplace_scratch_len()];
        let b = system.coupling();
        let coupling = (0..n)
            .flat_map(|row| (0..m).map(move |c| (row, c)))
            .filter(|&(row, c)| b[row * m + c] != 0.0)
            .map(|(row, c)| (row, c, b[row * m + c]))
            .collect();
        let zero = Complex::new(0.0, 0.0);
        Balance {
            system,
            samples,
            n,
            m,
            omega: std::f64::consts::TAU / period_s,
            period_s,
            fft,
            f: pooled(samples * n),
            fx: pooled(samples * n * n),
            q: pooled(samples * m),
            qx: pooled(samples * m * n),
            coupling,
            fx_pattern: Vec::new(),
            qx_pattern: Vec::new(),
            fx_packed: pooled(0),
            qx_packed: pooled(0),
            factors: vec![zero; (samples / 2 + 1) * n * n],
            pivots: vec![0; (samples / 2 + 1) * n],
            spectra: vec![zero; (samples / 2 + 1) * n],
            charge_work: pooled(samples * m),
            derivative_work: pooled(samples * m),
            basis: pooled(0),
            preconditioned: pooled(0),
            buffer: vec![zero; samples],
            scratch,
        }
    }

    fn time(&self, k: usize) -> f64 {
        k as f64 * self.period_s / self.samples as f64
    }

    /// Evaluates the system at every sample of `x` and returns the residual.
    fn evaluate(&mut self, x: &[f64], residual: &mut [f64]) {
        let (n, m) = (self.n, self.m);
        for k in 0..self.samples {
            let time_s = self.time(k);
            self.system.evaluate(
                &x[k * n..(k + 1) * n],
                time_s,
                &mut self.f[k * n..(k + 1) * n],
                &mut self.fx[k * n * n..(k + 1) * n * n],
                &mut self.q[k * m..(k + 1) * m],
                &mut self.qx[k * m * n..(k + 1) * m * n],
            );
        }
        self.pack();
        let q = std::mem::take(&mut self.q);
        let mut derivative = std::mem::take(&mut self.derivative_work);
        self.differentiate(&q, m, &mut derivative);
        self.q = q;
        residual.copy_from_slice(&self.f);
        self.couple(&derivative, residual);
        self.derivative_work = derivative;
    }

    /// The Jacobians' entries that are nonzero at some sample, packed sample by sample.
    fn pack(&mut self) {
        let (n, m, samples) = (self.n, self.m, self.samples);
        let pattern = |values: &[f64], rows: usize| -> Vec<(usize, usize)> {
            let size = rows * n;
            (0..size)
                .filter(|&e| values.chunks_exact(size).any(|block| block[e] != 0.0))
                .map(|e| (e / n, e % n))
                .collect()
        };
        self.fx_pattern = pattern(&self.fx, n);
        self.qx_pattern = pattern(&self.qx, m);
        self.fx_packed.clear();
        self.qx_packed.clear();
        for k in 0..samples {
            let block = &self.fx[k * n * n..(k + 1) * n * n];
            self.fx_packed
                .extend(self.fx_pattern.iter().map(|&(r, c)| block[r * n + c]));
            let block = &self.qx[k * m * n..(k + 1) * m * n];
            self.qx_packed
                .extend(self.qx_pattern.iter().map(|&(r, c)| block[r * n + c]));
        }
    }

    /// `out_k += B·d_k` for every sample.
    fn couple(&self, d: &[f64], out: &mut [f64]) {
        let (n, m) = (self.n, self.m);
        for (out_k, d_k) in out.chunks_exact_mut(n).zip(d.chunks_exact(m)) {
            for &(row, c, value) in &self.coupling {
                out_k[row] += value * d_k[c];
            }
        }
    }

    /// The spectral time derivative of `width` interleaved periodic sequences.
    fn differentiate(&mut self, values: &[f64], width: usize, out: &mut [f64]) {
        let big_n = self.samples;
        let scale = 1.0 / big_n as f64;
        // Two real sequences per complex transform: a + j·b; the derivative is linear and
        // real, so D(a) + j·D(b) comes out of one forward and one inverse transform.
        let mut column = 0;
        while column < width {
            pack_columns(values, width, column, &mut self.buffer);
            self.fft
                .process_with_scratch(&mut self.buffer, &mut self.scratch);
            self.buffer[0] = Complex::new(0.0, 0.0);
            self.buffer[big_n / 2] = Complex::new(0.0, 0.0);
            for l in 1..big_n / 2 {
                let w = l as f64 * self.omega;
                // Multiply by j·w at bin l and by −j·w at bin N−l.
                let a = self.buffer[l];
                self.buffer[l] = Complex::new(-a.im * w, a.re * w);
                let b = self.buffer[big_n - l];
                self.buffer[big_n - l] = Complex::new(b.im * w, -b.re * w);
            }
            inverse_in_place(&*self.fft, &mut self.buffer, &mut self.scratch);
            unpack_columns(&self.buffer, scale, width, column, out);
            column += 2;
        }
    }

    /// `J·v`.
    fn apply(&mut self, v: &[f64], out: &mut [f64]) {
        let (n, m) = (self.n, self.m);
        let mut charge = std::mem::take(&mut self.charge_work);
        // Only the entries nonzero somewhere in the period (the Jacobians are sparse).
        let (f_count, q_count) = (self.fx_pattern.len(), self.qx_pattern.len());
        for k in 0..self.samples {
            let vk = &v[k * n..(k + 1) * n];
            let out_k = &mut out[k * n..(k + 1) * n];
            out_k.fill(0.0);
            let values = &self.fx_packed[k * f_count..(k + 1) * f_count];
            for (&(row, col), value) in self.fx_pattern.iter().zip(values) {
                out_k[row] += value * vk[col];
            }
            let charge_k = &mut charge[k * m..(k + 1) * m];
            charge_k.fill(0.0);
            let values = &self.qx_packed[k * q_count..(k + 1) * q_count];
            for (&(row, col), value) in self.qx_pattern.iter().zip(values) {
                charge_k[row] += value * vk[col];
            }
        }
        let mut derivative = std::mem::take(&mut self.derivative_work);
        self.differentiate(&charge, m, &mut derivative);
        self.couple(&derivative, out);
        self.charge_work = charge;
        self.derivative_work = derivative;
    }

    /// Factorises the preconditioner's blocks from the current Jacobians; `false` when one is
    /// singular.
    fn build_preconditioner(&mut self) -> bool {
        let (n, m) = (self.n, self.m);
        let inverse = 1.0 / self.samples as f64;
        let mut mean_fx = vec![0.0; n * n];
        let mut mean_qx = vec![0.0; m * n];
        for k in 0..self.samples {
            for (a, v) in mean_fx.iter_mut().zip(&self.fx[k * n * n..(k + 1) * n * n]) {
                *a += v * inverse;
            }
            for (a, v) in mean_qx.iter_mut().zip(&self.qx[k * m * n..(k + 1) * m * n]) {
                *a += v * inverse;
            }
        }
        // G = B·Q̄.
        let mut g = vec![0.0; n * n];
        for &(row, c, value) in &self.coupling {
            for col in 0..n {
                g[row * n + col] += value * mean_qx[c * n + col];
            }
        }
        let half = self.samples / 2;
        for l in 0..=half {
            // F̄ + j·w·G; the Nyquist bin has no derivative.
            let w = if l == half {
                0.0
            } else {
                l as f64 * self.omega
            };
            let block = &mut self.factors[l * n * n..(l + 1) * n * n];
            for k in 0..n * n {
                block[k] = Complex::new(mean_fx[k], w * g[k]);
            }
            if !factor_complex(block, &mut self.pivots[l * n..(l + 1) * n], n) {
                return false;
            }
        }
        true
    }

    /// `P⁻¹·v` in place: each unknown's samples to bins, each bin's block solved, back.
    fn precondition(&mut self, v: &mut [f64]) {
        let n = self.n;
        let big_n = self.samples;
        let half = big_n / 2;
        // Two real sequences per transform: z = a + j·b gives A[l] = (Z[l] + conj Z[N−l])/2,
        // B[l] = (Z[l] − conj Z[N−l])/(2j).
        let mut unknown = 0;
        while unknown < n {
            let second = unknown + 1 < n;
            pack_columns(v, n, unknown, &mut self.buffer);
            self.fft
                .process_with_scratch(&mut self.buffer, &mut self.scratch);
            for l in 0..=half {
                let z = self.buffer[l];
                let mirror = self.buffer[(big_n - l) % big_n].conj();
                self.spectra[l * n + unknown] = (z + mirror) * 0.5;
                if second {
                    let d = (z - mirror) * 0.5;
                    self.spectra[l * n + unknown + 1] = Complex::new(d.im, -d.re);
                }
            }
            unknown += 2;
        }
        for l in 0..=half {
            solve_complex(
                &self.factors[l * n * n..(l + 1) * n * n],
                &self.pivots[l * n..(l + 1) * n],
                &mut self.spectra[l * n..(l + 1) * n],
            );
        }
        let scale = 1.0 / big_n as f64;
        let mut unknown = 0;
        while unknown < n {
            let second = unknown + 1 < n;
            // The samples are real: the upper bins are the conjugates of the lower ones (the
            // DC and Nyquist blocks are real, so those bins stay real). Two real results per
            // inverse transform: Z = A + j·B.
            for l in 0..=half {
                let a = self.spectra[l * n + unknown];
                let b = if second {
                    self.spectra[l * n + unknown + 1]
                } else {
                    Complex::new(0.0, 0.0)
                };
                self.buffer[l] = a + Complex::new(-b.im, b.re);
                if l != 0 && l != half {
                    self.buffer[big_n - l] = a.conj() + Complex::new(b.im, b.re);
                }
            }
            inverse_in_place(&*self.fft, &mut self.buffer, &mut self.scratch);
            unpack_columns(&self.buffer, scale, n, unknown, v);
            unknown += 2;
        }
    }

    /// Solves `J·δ = b` by restarted, right-preconditioned GMRES; returns the iterations used,
    /// or `None` when the residual did not fall by `relative` within `max_iterations`.
    fn gmres(
        &mut self,
        b: &[f64],
        delta: &mut [f64],
        relative: f64,
        max_iterations: usize,
    ) -> Option<usize> {
        let size = b.len();
        delta.fill(0.0);
        let target = relative * norm(b);
        let mut residual = pooled(size);
        residual.copy_from_slice(b);
        let mut used = 0;
        let mut w = pooled(size);
        let mut basis = std::mem::take(&mut self.basis);
        let mut preconditioned = std::mem::take(&mut self.preconditioned);
        let outcome = loop {
            let beta = norm(&residual);
            if beta <= target || beta == 0.0 {
                break Some(used);
            }
            if used >= max_iterations {
                break None;
            }
            if basis.len() < size {
                basis.resize(size, 0.0);
            }
            for (v, r) in basis[..size].iter_mut().zip(&residual) {
                *v = r / beta;
            }
            let mut hessenberg: Vec<Vec<f64>> = Vec::with_capacity(RESTART);
            let mut rotations: Vec<(f64, f64)> = Vec::with_capacity(RESTART);
            let mut g = vec![beta];
            let mut converged = false;
            let mut broken = false;
            for j in 0..RESTART {
                if used >= max_iterations {
                    break;
                }
                used += 1;
                if preconditioned.len() < (j + 1) * size {
                    preconditioned.resize((j + 1) * size, 0.0);
                }
                let z = &mut preconditioned[j * size..(j + 1) * size];
                z.copy_from_slice(&basis[j * size..(j + 1) * size]);
                self.precondition(z);
                self.apply(z, &mut w);
                let mut column = vec![0.0; j + 2];
                for i in 0..=j {
                    let v = &basis[i * size..(i + 1) * size];
                    let h = dot(&w, v);
                    column[i] = h;
                    for (a, b) in w.iter_mut().zip(v) {
                        *a -= h * b;
                    }
                }
                let h_next = norm(&w);
                column[j + 1] = h_next;
                for (i, &(c, s)) in rotations.iter().enumerate() {
                    let (a, b) = (column[i], column[i + 1]);
                    column[i] = c * a + s * b;
                    column[i + 1] = -s * a + c * b;
                }
                let (a, b) = (column[j], column[j + 1]);
                let r = a.hypot(b);
                if !(r.is_finite() && r > 0.0) {
                    broken = true;
                    break;
                }
                let (c, s) = (a / r, b / r);
                column[j] = r;
                column[j + 1] = 0.0;
                rotations.push((c, s));
                g.push(-s * g[j]);
                g[j] *= c;
                hessenberg.push(column);
                if g[j + 1].abs() <= target || h_next == 0.0 {
                    converged = true;
                    break;
                }
                if basis.len() < (j + 2) * size {
                    basis.resize((j + 2) * size, 0.0);
                }
                for (v, x) in basis[(j + 1) * size..(j + 2) * size].iter_mut().zip(&w) {
                    *v = x / h_next;
                }
            }
            if broken {
                break None;
            }
            // Back substitution for the coefficients, then δ += Σ y_j·z_j.
            let k = hessenberg.len();
            let mut y = vec![0.0; k];
            for i in (0..k).rev() {
                let mut sum = g[i];
                for j in i + 1..k {
                    sum -= hessenberg[j][i] * y[j];
                }
                y[i] = sum / hessenberg[i][i];
            }
            for (j, coefficient) in y.iter().enumerate() {
                for (d, v) in delta
                    .iter_mut()
                    .zip(&preconditioned[j * size..(j + 1) * size])
                {
                    *d += coefficient * v;
                }
            }
            if converged {
                break Some(used);
            }
            // Restart from the true residual b − J·δ.
            self.apply(delta, &mut w);
            for ((r, b), a) in residual.iter_mut().zip(b).zip(&w) {
                *r = b - a;
            }
        };
        self.basis = basis;
        self.preconditioned = preconditioned;
        release(residual);
        release(w);
        outcome
    }
}

/// LU factorisation with partial pivoting of the complex row-major `n × n` matrix `a` in
/// place (unit lower factor below the diagonal, upper above it and the reciprocals of its
/// diagonal on the diagonal; row `k` was swapped with `pivots[k]`); `false` when a pivot is zero or not finite. A third of the work of an
/// inversion, and solving with the factors costs what a product with the inverse does.
fn factor_complex(a: &mut [Complex<f64>], pivots: &mut [usize], n: usize) -> bool {
    match n {
        7 => factor_complex_sized::<7>(a, pivots),
        9 => factor_complex_sized::<9>(a, pivots),
        _ => factor_complex_dynamic(a, pivots, n),
    }
}

fn factor_complex_sized<const N: usize>(a: &mut [Complex<f64>], pivots: &mut [usize]) -> bool {
    factor_complex_dynamic(&mut a[..N * N], &mut pivots[..N], N)
}

#[inline(always)]
fn factor_complex_dynamic(a: &mut [Complex<f64>], pivots: &mut [usize], n: usize) -> bool {
    for col in 0..n {
        let mut best = col;
        let mut best_value = a[col * n + col].norm_sqr();
        for row in col + 1..n {
            let value = a[row * n + col].norm_sqr();
            if value > best_value {
                best = row;
                best_value = value;
            }
        }
        if !(best_value > 0.0 && best_value.is_finite()) {
            return false;
        }
        pivots[col] = best;
        if best != col {
            for k in 0..n {
                a.swap(col * n + k, best * n + k);
            }
        }
        let pivot = a[col * n + col].inv();
        // The diagonal keeps its reciprocal: the solve multiplies instead of dividing.
        a[col * n + col] = pivot;
        for row in col + 1..n {
            let factor = a[row * n + col] * pivot;
            a[row * n + col] = factor;
            if factor != Complex::new(0.0, 0.0) {
                for k in col + 1..n {
                    let above = a[col * n + k];
                    a[row * n + k] -= factor * above;
                }
            }
        }
    }
    true
}

/// Solves `A·x = b` in place with the factors of [`factor_complex`].
fn solve_complex(factors: &[Complex<f64>], pivots: &[usize], b: &mut [Complex<f64>]) {
    // The pair's sizes get a copy with the size known at compile time (unrolled loops
    // without bounds checks); the arithmetic is the same.
    match b.len() {
        7 => solve_complex_sized::<7>(factors, pivots, b),
        9 => solve_complex_sized::<9>(factors, pivots, b),
        n => solve_complex_dynamic(factors, pivots, b, n),
    }
}

fn solve_complex_sized<const N: usize>(
    factors: &[Complex<f64>],
    pivots: &[usize],
    b: &mut [Complex<f64>],
) {
    solve_complex_dynamic(&factors[..N * N], &pivots[..N], &mut b[..N], N)
}

#[inline(always)]
fn solve_complex_dynamic(
    factors: &[Complex<f64>],
    pivots: &[usize],
    b: &mut [Complex<f64>],
    n: usize,
) {
    for col in 0..n {
        b.swap(col, pivots[col]);
    }
    for row in 1..n {
        let mut sum = b[row];
        for k in 0..row {
            sum -= factors[row * n + k] * b[k];
        }
        b[row] = sum;
    }
    for row in (0..n).rev() {
        let mut sum = b[row];
        for k in row + 1..n {
            sum -= factors[row * n + k] * b[k];
        }
        b[row] = sum * factors[row * n + row];
    }
}

/// Packs column `column` of `width` interleaved real sequences, and the next column when
/// there is one, into `buffer` as `a + j·b` (two real sequences per complex transform).
fn pack_columns(values: &[f64], width: usize, column: usize, buffer: &mut [Complex<f64>]) {
    let second = column + 1 < width;
    for (k, z) in buffer.iter_mut().enumerate() {
        let row = &values[k * width..];
        *z = Complex::new(row[column], if second { row[column + 1] } else { 0.0 });
    }
}

/// The inverse of [`pack_columns`] after a complex-linear, real-preserving transform: the
/// real parts times `scale` into column `column`, the imaginary parts into the next column
/// when there is one.
fn unpack_columns(
    buffer: &[Complex<f64>],
    scale: f64,
    width: usize,
    column: usize,
    out: &mut [f64],
) {
    let second = column + 1 < width;
    for (k, z) in buffer.iter().enumerate() {
        out[k * width + column] = z.re * scale;
        if second {
            out[k * width + column + 1] = z.im * scale;
        }
    }
}

/// Inverse DFT without the 1/N factor, through the forward transform: `conj(F(conj(X)))`.
fn inverse_in_place(fft: &dyn Fft<f64>, buffer: &mut [Complex<f64>], scratch: &mut [Complex<f64>]) {
    for v in buffer.iter_mut() {
        *v = v.conj();
    }
    fft.process_with_scratch(buffer, scratch);
    for v in buffer.iter_mut() {
        *v = v.conj();
    }
}

/// Dot product with four running sums (lets the compiler use vector registers).
fn dot(a: &[f64], b: &[f64]) -> f64 {
    let mut sums = [0.0; 4];
    let (a4, b4) = (a.chunks_exact(4), b.chunks_exact(4));
    let tail: f64 = a4
        .remainder()
        .iter()
        .zip(b4.remainder())
        .map(|(x, y)| x * y)
        .sum();
    for (x, y) in a4.zip(b4) {
        for k in 0..4 {
            sums[k] += x[k] * y[k];
        }
    }
    (sums[0] + sums[1]) + (sums[2] + sums[3]) + tail
}

fn norm(a: &[f64]) -> f64 {
    dot(a, a).sqrt()
}

/// Solves the sampled periodic problem of `system` over `period_s` with `start.len() /
/// unknowns` samples (a power of two or 2^a·3^b·5^c is fastest), Newton from `start`. `fft` is the forward
/// transform of that length.
pub fn periodic_balance<S: ChargeSystem>(
    system: &S,
    period_s: f64,
    start: &[f64],
    fft: Arc<dyn Fft<f64>>,
    tolerance: BalanceTolerance,
) -> Result<BalanceSolution, BalanceFailure> {
    let n = system.unknowns();
    let samples = start.len() / n;
    if samples < 4 || samples % 2 != 0 || samples * n != start.len() || fft.len() != samples {
        return Err(BalanceFailure {
            reason: format!("{samples} samples: an even count of at least 4 is needed"),
        });
    }
    let mut problem = Balance::new(system, period_s, samples, fft);
    let mut x = start.to_vec();
    let mut residual = vec![0.0; x.len()];
    let mut delta = vec![0.0; x.len()];
    let mut krylov = 0;
    let mut previous_step = f64::INFINITY;
    for iteration in 0..tolerance.max_newton {
        problem.evaluate(&x, &mut residual);
        if residual.iter().any(|r| !r.is_finite()) {
            return Err(BalanceFailure {
                reason: "the residual is not finite".into(),
            });
        }
        // The averaged Jacobian barely moves between Newton iterations (it only steers
        // GMRES, not where Newton converges to): built once per solve.
        if iteration == 0 && !problem.build_preconditioner() {
            return Err(BalanceFailure {
                reason: "the averaged Jacobian is singular".into(),
            });
        }
        // The linear solve need only be as exact as the step will be used: near the solution
        // (a residual of a few tolerances) a relative 1e-2 leaves a step error far below the
        // tolerance, and further GMRES iterations would be wasted.
        let residual_size = residual.iter().fold(0.0f64, |a, r| a.max(r.abs()));
        let relative =
            (0.05 * tolerance.absolute / residual_size).clamp(tolerance.krylov_relative, 1e-2);
        for r in residual.iter_mut() {
            *r = -*r;
        }
        let used = problem
            .gmres(&residual, &mut delta, relative, tolerance.max_krylov)
            .ok_or_else(|| BalanceFailure {
                reason: format!(
                    "the linear solve did not converge within {} iterations",
                    tolerance.max_krylov
                ),
            })?;
        krylov += used;
        let mut fraction: f64 = 1.0;
        let mut largest: f64 = 0.0;
        for k in 0..samples {
            let (xk, dk) = (&x[k * n..(k + 1) * n], &delta[k * n..(k + 1) * n]);
            fraction = fraction.min(system.step_fraction(xk, dk));
            largest = dk.iter().fold(largest, |a, v| a.max(v.abs()));
        }
        if !largest.is_finite() {
            return Err(BalanceFailure {
                reason: "a Newton step is not finite".into(),
            });
        }
        for (v, d) in x.iter_mut().zip(&delta) {
            *v += fraction * d;
        }
        // Converged when this full step was within the tolerance, or when the convergence
        // seen so far predicts it for the next one: a step δ after δ₋₁ leaves about
        // δ·(δ/δ₋₁) (superlinear convergence: each step's ratio is smaller than the one
        // before), asked to be a tenth of the tolerance.
        let predicted = if previous_step.is_finite() {
            largest * (largest / previous_step)
        } else {
            f64::INFINITY
        };
        if fraction == 1.0
            && (largest <= tolerance.absolute || predicted <= 0.1 * tolerance.absolute)
        {
            return Ok(BalanceSolution {
                trajectory: x,
                newton_iterations: iteration + 1,
                krylov_iterations: krylov,
                last_step: largest,
            });
        }
        previous_step = if fraction == 1.0 {
            largest
        } else {
            f64::INFINITY
        };
    }
    Err(BalanceFailure {
        reason: format!(
            "Newton did not settle to {:e} within {} iterations",
            tolerance.absolute, tolerance.max_newton
        ),
    })
}

/// A periodic trajectory of `from` rows (each `width` unknowns) resampled onto `to` rows
/// (both even) through its trigonometric interpolant: exact for a trajectory of harmonic
/// balance, whose samples *are* such a polynomial. `forward_from` and `forward_to` are the
/// forward transforms of those lengths.
pub fn interpolate_spectral(
    rows: &[f64],
    from: usize,
    to: usize,
    width: usize,
    forward_from: &dyn Fft<f64>,
    forward_to: &dyn Fft<f64>,
) -> Vec<f64> {
    let mut out = vec![0.0; to * width];
    let mut source = vec![Complex::new(0.0, 0.0); from];
    let mut target = vec![Complex::new(0.0, 0.0); to];
    let scratch_len = forward_from
        .get_inplace_scratch_len()
        .max(forward_to.get_inplace_scratch_len());
    let mut scratch = vec![Complex::new(0.0, 0.0); scratch_len];
    let shared = from.min(to) / 2;
    // Two columns per transform, as a + j·b: every step below is linear over the complex
    // numbers and maps a real sequence to a real one, so the real and imaginary parts of
    // the result are the two columns' interpolants.
    let mut column = 0;
    while column < width {
        pack_columns(rows, width, column, &mut source);
        forward_from.process_with_scratch(
            &mut source,
            &mut scratch[..forward_from.get_inplace_scratch_len()],
        );
        target.fill(Complex::new(0.0, 0.0));
        target[0] = source[0];
        for l in 1..shared {
            target[l] = source[l];
            target[to - l] = source[from - l];
        }
        // The shared Nyquist-most bin: split evenly when growing (keeps the samples real),
        // folded when shrinking.
        if to > from {
            let half = source[shared] * 0.5;
            target[shared] = half;
            target[to - shared] = half;
        } else if to < from {
            target[shared] = source[shared] + source[from - shared];
        } else {
            target[shared] = source[shared];
        }
        inverse_in_place(
            forward_to,
            &mut target,
            &mut scratch[..forward_to.get_inplace_scratch_len()],
        );
        unpack_columns(&target, 1.0 / from as f64, width, column, &mut out);
        column += 2;
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;
    use rustfft::FftPlanner;
    use std::f64::consts::TAU;

    /// A source `V·cos(ωt)` through `R` into `C`: `x − v_s(t) + R·dq/dt = 0`, `q = C·x`.
    struct SeriesRc {
        amplitude: f64,
        frequency: f64,
        resistance: f64,
        capacitance: f64,
        coupling: [f64; 1],
    }

    impl ChargeSystem for SeriesRc {
        fn unknowns(&self) -> usize {
            1
        }
        fn charges(&self) -> usize {
            1
        }
        fn resistive(&self, x: &[f64], time_s: f64, f: &mut [f64], jacobian: &mut [f64]) {
            f[0] = x[0] - self.amplitude * (TAU * self.frequency * time_s).cos();
            jacobian[0] = 1.0;
        }
        fn charge(&self, x: &[f64], q: &mut [f64], jacobian: &mut [f64]) {
            q[0] = self.capacitance * x[0];
            jacobian[0] = self.capacitance;
        }
        fn coupling(&self) -> &[f64] {
            &self.coupling
        }
    }

    impl SeriesRc {
        /// 0.7 V at 3 MHz through 1 kΩ into 100 pF (a pole at 1.6 MHz).
        fn example() -> Self {
            SeriesRc {
                amplitude: 0.7,
                frequency: 3e6,
                resistance: 1e3,
                capacitance: 100e-12,
                coupling: [1e3],
            }
        }
    }

    fn forward(n: usize) -> Arc<dyn Fft<f64>> {
        FftPlanner::new().plan_fft_forward(n)
    }

    const TOLERANCE: BalanceTolerance = BalanceTolerance {
        absolute: 1e-13,
        max_newton: 10,
        krylov_relative: 1e-10,
        max_krylov: 60,
    };

    #[test]
    fn a_driven_rc_matches_its_phasor_solution() {
        // Linear circuit theory (common practice): the steady state of V·cos(ωt) through R
        // into C is V·|H|·cos(ωt + arg H) with H = 1/(1 + jωRC). Harmonic balance of a
        // linear circuit is exact once the drive's harmonic has its own bin.
        let rc = SeriesRc::example();
        let samples = 16;
        let period = 1.0 / rc.frequency;
        let solution = periodic_balance(
            &rc,
            period,
            &vec![0.0; samples],
            forward(samples),
            TOLERANCE,
        )
        .expect("converges");
        let h = num_complex::Complex::new(1.0, TAU * rc.frequency * rc.resistance * rc.capacitance)
            .inv();
        for (k, x) in solution.trajectory.iter().enumerate() {
            let phase = TAU * k as f64 / samples as f64;
            let exact = rc.amplitude * h.norm() * (phase + h.arg()).cos();
            assert!((x - exact).abs() < 1e-12, "sample {k}: {x} vs {exact}");
        }
        // A linear circuit: Newton lands in one step (plus the one that confirms it).
        assert!(
            solution.newton_iterations <= 2,
            "{}",
            solution.newton_iterations
        );
        assert!(solution.last_step <= TOLERANCE.absolute);
    }

    #[test]
    fn a_newton_that_does_not_settle_is_a_failure_not_a_result() {
        let rc = SeriesRc::example();
        let tolerance = BalanceTolerance {
            max_newton: 1,
            ..TOLERANCE
        };
        let result = periodic_balance(&rc, 1.0 / rc.frequency, &[0.0; 16], forward(16), tolerance);
        let failure = result.expect_err("one iteration cannot confirm convergence");
        assert!(
            failure.reason.contains("did not settle"),
            "{}",
            failure.reason
        );
    }

    #[test]
    fn spectral_interpolation_is_exact_for_a_trigonometric_polynomial() {
        // A trigonometric polynomial of degree 3 is fixed by 16 samples (sampling theorem):
        // its interpolant at 64 points is the polynomial itself.
        let value = |t: f64| 0.3 + (TAU * t).sin() - 0.25 * (3.0 * TAU * t).cos();
        let from = 16;
        let to = 64;
        let rows: Vec<f64> = (0..from)
            .flat_map(|k| {
                let t = k as f64 / from as f64;
                [value(t), -value(t)]
            })
            .collect();
        let dense = interpolate_spectral(&rows, from, to, 2, &*forward(from), &*forward(to));
        for k in 0..to {
            let t = k as f64 / to as f64;
            assert!((dense[2 * k] - value(t)).abs() < 1e-14);
            assert!((dense[2 * k + 1] + value(t)).abs() < 1e-14);
        }
    }
}
