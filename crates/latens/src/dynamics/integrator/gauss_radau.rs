//! A 15th-order Gauss-Radau integrator with adaptive steps and dense output.
//!
//! Within a step from t0 of length dt, the acceleration is a polynomial in the
//! step fraction tau in [0, 1]:
//!
//!   a(tau) = a0 + b0 tau + b1 tau^2 + ... + b6 tau^7,
//!
//! fixed by the accelerations at the seven Gauss-Radau nodes h1..h7 (with
//! h0 = 0), which are found by predictor-corrector iteration. Integrating
//! twice gives position and velocity anywhere in the step; the same formulas
//! serve the nodes, the step's end and any output epoch inside it (dense
//! output), so the step is never cut short to land on an epoch.
//!
//! The b coefficients are held in Newton's divided-difference form g (which
//! each node's acceleration updates directly) and converted with a triangular
//! matrix computed at start-up from the nodes, rather than from typed-in
//! tables. Step size: the relative size of the last coefficient,
//! e = max|b6| / max|a|, should equal the tolerance; the next step is
//! dt (tol / e)^(1/7), and a step whose proposal shrinks below a quarter is
//! redone (the "global" control of IAS15).
//!
//! Reference: Everhart (1985), in *Dynamics of Comets: Their Origin and
//! Evolution*, 185; Rein & Spiegel (2015), MNRAS 446, 1424 (IAS15).

use super::SecondOrderSystem;
use crate::dynamics::PropagationError;

/// The Gauss-Radau nodes on [0, 1] for order 15: t = 0 and the other roots of
/// P_7(2t-1) + P_8(2t-1), as published with IAS15 (Rein & Spiegel 2015;
/// recalled from memory) and checked in the tests to be those roots.
// The published digits are kept, beyond what an f64 holds.
#[allow(clippy::excessive_precision)]
pub const RADAU_NODES: [f64; 8] = [
    0.0,
    0.056_262_560_536_922_146_465_652_191_032,
    0.180_240_691_736_892_364_987_579_942_780,
    0.352_624_717_113_169_637_373_907_769_648,
    0.547_153_626_330_555_383_001_448_554_766,
    0.734_210_177_215_410_531_523_210_605_558,
    0.885_320_946_839_095_768_090_359_771_030,
    0.977_520_613_561_287_501_891_174_488_626,
];

/// Shrinking the step by more than this factor rejects it; growing is
/// limited to its inverse (IAS15's safety factor).
const SAFETY_FACTOR: f64 = 0.25;
/// Most predictor-corrector iterations per step.
const MAX_ITERATIONS: usize = 12;

/// What one call of [`GaussRadau::step`] did.
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum StepOutcome {
    /// The step was taken; `next_dt` is the proposed length of the next one.
    Accepted { dt: f64, next_dt: f64, error: f64 },
    /// The step was too long; the state is unchanged and it should be tried
    /// again with `retry_dt`.
    Rejected { retry_dt: f64, error: f64 },
}

/// The integrator's working state for one system. Holds the last step's
/// polynomial, which also serves dense output until the next step.
#[derive(Clone, Debug)]
pub struct GaussRadau {
    /// Tolerance on max|b6| / max|a| (IAS15's epsilon).
    pub tolerance: f64,
    /// Convergence threshold of the predictor-corrector iteration (relative
    /// change of b6).
    pub corrector_tolerance: f64,
    dim: usize,
    /// Newton-to-monomial matrix: c[k][j] is the coefficient of tau^(k+1) in
    /// tau (tau - h1) ... (tau - hj).
    c: [[f64; 7]; 7],
    // Polynomial of the current (last) step, component-major: b[k * dim + i].
    b: Vec<f64>,
    g: Vec<f64>,
    a0: Vec<f64>,
    x0: Vec<f64>,
    v0: Vec<f64>,
    t0: f64,
    dt: f64,
    has_previous: bool,
    // Scratch space.
    xn: Vec<f64>,
    vn: Vec<f64>,
    an: Vec<f64>,
    /// Force evaluations so far.
    pub evaluations: u64,
    /// Predictor-corrector iterations so far.
    pub iterations: u64,
}

impl GaussRadau {
    /// An integrator for a system of `dim` components.
    pub fn new(dim: usize, tolerance: f64) -> Self {
        let mut c = [[0.0; 7]; 7];
        // Build tau * prod_{i=1..j} (tau - h_i) incrementally, as coefficients
        // of tau^1..tau^7.
        let mut poly = [0.0; 8]; // poly[p] = coefficient of tau^p
        poly[1] = 1.0;
        for j in 0..7 {
            if j > 0 {
                let h = RADAU_NODES[j];
                let mut next = [0.0; 8];
                for p in 1..8 {
                    next[p] = poly[p - 1] - h * poly[p];
                }
                next[0] = 0.0;
                poly = next;
            }
            for k in 0..7 {
                c[k][j] = poly[k + 1];
            }
        }
        GaussRadau {
            tolerance,
            corrector_tolerance: 1e-16,
            dim,
            c,
            b: vec![0.0; 7 * dim],
            g: vec![0.0; 7 * dim],
            a0: vec![0.0; dim],
            x0: vec![0.0; dim],
            v0: vec![0.0; dim],
            t0: 0.0,
            dt: 0.0,
            has_previous: false,
            xn: vec![0.0; dim],
            vn: vec![0.0; dim],
            an: vec![0.0; dim],
            evaluations: 0,
            iterations: 0,
        }
    }

    /// Forgets the previous step's polynomial (call when starting a new
    /// trajectory, so the predictor does not use an unrelated one).
    pub fn reset(&mut self) {
        self.has_previous = false;
        self.b.iter_mut().for_each(|b| *b = 0.0);
    }

    /// Position and velocity at fraction `tau` of the last accepted step
    /// (dense output), into `x` and `v`.
    pub fn interpolate(&self, tau: f64, x: &mut [f64], v: &mut [f64]) {
        interpolate_into(&self.b, &self.a0, &self.x0, &self.v0, self.dim, self.dt, tau, x, v);
    }

    /// Whether a step with this error estimate would be accepted by the
    /// adaptive control (its proposed successor at least a quarter as long).
    pub fn is_acceptable(&self, error: f64) -> bool {
        error <= self.tolerance / SAFETY_FACTOR.powi(7)
    }

    /// Start time and length of the last accepted step.
    pub fn last_step(&self) -> (f64, f64) {
        (self.t0, self.dt)
    }

    /// Tries one step of length `dt` from (`t`, `x`, `v`). On acceptance `x`
    /// and `v` are advanced to `t + dt` and the step's polynomial is kept for
    /// [`GaussRadau::interpolate`]; on rejection nothing changes.
    ///
    /// With `adaptive == false` the step is taken whatever its error (a fixed
    /// step plan); the error is still reported.
    pub fn step<S: SecondOrderSystem + ?Sized>(
        &mut self,
        system: &mut S,
        t: f64,
        x: &mut [f64],
        v: &mut [f64],
        dt: f64,
        adaptive: bool,
    ) -> Result<StepOutcome, PropagationError> {
        let n = self.dim;
        let control = system.control_dim().min(n);
        system.begin_step(t, dt)?;
        let mut a0 = std::mem::take(&mut self.a0);
        system.accelerations(0, t, x, v, &mut a0)?;
        self.evaluations += 1;

        // Predict b from the previous step's polynomial, continued past its
        // end: a_old(1 + q tau) - a_old(1), re-expanded in powers of tau.
        let mut b = vec![0.0; 7 * n];
        if self.has_previous && self.dt != 0.0 {
            let q = dt / self.dt;
            for m in 1..=7 {
                let qm = q.powi(m as i32);
                for nn in m..=7 {
                    let binom = binomial(nn, m) * qm;
                    let (dst, src) = ((m - 1) * n, (nn - 1) * n);
                    for i in 0..n {
                        b[dst + i] += binom * self.b[src + i];
                    }
                }
            }
        }
        // g from b: b_k = sum_{j >= k} c[k][j] g_j, upper triangular.
        let mut g = vec![0.0; 7 * n];
        for k in (0..7).rev() {
            for i in 0..n {
                let mut s = b[k * n + i];
                for j in k + 1..7 {
                    s -= self.c[k][j] * g[j * n + i];
                }
                g[k * n + i] = s;
            }
        }

        let mut previous_change = f64::INFINITY;
        for iteration in 0..MAX_ITERATIONS {
            self.iterations += 1;
            let mut b6_change: f64 = 0.0;
            let mut a_scale: f64 = 0.0;
            for (node, &h) in RADAU_NODES.iter().enumerate().skip(1) {
                interpolate_into(&b, &a0, x, v, n, dt, h, &mut self.xn, &mut self.vn);
                system.accelerations(node, t + h * dt, &self.xn, &self.vn, &mut self.an)?;
                self.evaluations += 1;
                let j = node - 1;
                for i in 0..n {
                    // Newton divided difference for g_j from a at h_node.
                    let mut r = (self.an[i] - a0[i]) / h;
                    for (jj, hj) in RADAU_NODES.iter().enumerate().take(node).skip(1) {
                        r = (r - g[(jj - 1) * n + i]) / (h - hj);
                    }
                    let dg = r - g[j * n + i];
                    g[j * n + i] = r;
                    for k in 0..=j {
                        b[k * n + i] += self.c[k][j] * dg;
                    }
                    if node == 7 && i < control {
                        b6_change = b6_change.max(dg.abs());
                    }
                }
                if node == 7 {
                    for i in 0..control {
                        a_scale = a_scale.max(self.an[i].abs());
                    }
                }
            }
            let change = if a_scale > 0.0 { b6_change / a_scale } else { 0.0 };
            if !change.is_finite() {
                self.a0 = a0;
                return Err(PropagationError::NonFinite { t_tdb_days: t });
            }
            if change < self.corrector_tolerance || (iteration > 1 && change >= previous_change) {
                break;
            }
            previous_change = change;
        }

        // Error estimate and the next step size.
        let mut b6_max: f64 = 0.0;
        let mut a_max: f64 = 0.0;
        for i in 0..control {
            b6_max = b6_max.max(b[6 * n + i].abs());
            a_max = a_max.max(self.an[i].abs());
        }
        let error = if a_max > 0.0 { b6_max / a_max } else { 0.0 };
        let ratio = if error > 0.0 { (self.tolerance / error).powf(1.0 / 7.0) } else { 1.0 / SAFETY_FACTOR };
        if adaptive && ratio < SAFETY_FACTOR {
            self.a0 = a0;
            return Ok(StepOutcome::Rejected { retry_dt: dt * ratio, error });
        }
        let next_dt = dt * ratio.min(1.0 / SAFETY_FACTOR);

        // Accept: keep the polynomial for dense output and advance the state.
        self.x0.copy_from_slice(x);
        self.v0.copy_from_slice(v);
        self.a0 = a0;
        self.b = b;
        self.g = g;
        self.t0 = t;
        self.dt = dt;
        self.has_previous = true;
        let (x0, v0) = (self.x0.clone(), self.v0.clone());
        interpolate_into(&self.b, &self.a0, &x0, &v0, n, dt, 1.0, x, v);
        Ok(StepOutcome::Accepted { dt, next_dt, error })
    }
}

/// Position and velocity at step fraction `tau` from the polynomial `b`.
#[allow(clippy::too_many_arguments)]
fn interpolate_into(
    b: &[f64],
    a0: &[f64],
    x0: &[f64],
    v0: &[f64],
    n: usize,
    dt: f64,
    tau: f64,
    x: &mut [f64],
    v: &mut [f64],
) {
    let dtt = dt * tau;
    for i in 0..n {
        let (b0, b1, b2, b3, b4, b5, b6) =
            (b[i], b[n + i], b[2 * n + i], b[3 * n + i], b[4 * n + i], b[5 * n + i], b[6 * n + i]);
        let px = a0[i] / 2.0
            + tau
                * (b0 / 6.0
                    + tau
                        * (b1 / 12.0
                            + tau
                                * (b2 / 20.0
                                    + tau * (b3 / 30.0 + tau * (b4 / 42.0 + tau * (b5 / 56.0 + tau * b6 / 72.0))))));
        let pv = a0[i]
            + tau
                * (b0 / 2.0
                    + tau
                        * (b1 / 3.0
                            + tau
                                * (b2 / 4.0
                                    + tau * (b3 / 5.0 + tau * (b4 / 6.0 + tau * (b5 / 7.0 + tau * b6 / 8.0))))));
        x[i] = x0[i] + dtt * v0[i] + dtt * dtt * px;
        v[i] = v0[i] + dtt * pv;
    }
}

fn binomial(n: usize, k: usize) -> f64 {
    let mut r = 1.0;
    for i in 0..k {
        r = r * (n - i) as f64 / (i + 1) as f64;
    }
    r
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Legendre polynomial P_n(x) by the three-term recurrence.
    fn legendre(n: usize, x: f64) -> f64 {
        let (mut p0, mut p1) = (1.0, x);
        if n == 0 {
            return 1.0;
        }
        for k in 1..n {
            let p2 = ((2 * k + 1) as f64 * x * p1 - k as f64 * p0) / (k + 1) as f64;
            (p0, p1) = (p1, p2);
        }
        p1
    }

    #[test]
    fn nodes_are_the_radau_points() {
        // Radau quadrature with the left end point fixed: the nodes are the
        // roots of P_7(s) + P_8(s), s = 2t - 1, which include s = -1 (t = 0)
        // (Abramowitz & Stegun 25.4.31, from memory).
        for &h in &RADAU_NODES[1..] {
            let s = 2.0 * h - 1.0;
            let f = legendre(7, s) + legendre(8, s);
            assert!(f.abs() < 1e-13, "node {h}: {f}");
        }
    }

    /// x'' = -x: a harmonic oscillator, solution cos t.
    struct Oscillator;
    impl SecondOrderSystem for Oscillator {
        fn dim(&self) -> usize {
            1
        }
        fn begin_step(&mut self, _t0: f64, _dt: f64) -> Result<(), PropagationError> {
            Ok(())
        }
        fn accelerations(
            &mut self,
            _node: usize,
            _t: f64,
            x: &[f64],
            _v: &[f64],
            a: &mut [f64],
        ) -> Result<(), PropagationError> {
            a[0] = -x[0];
            Ok(())
        }
    }

    #[test]
    fn oscillator_over_a_hundred_periods_with_dense_output() {
        let mut gr = GaussRadau::new(1, 1e-10);
        let (mut x, mut v) = ([1.0], [0.0]);
        let mut t = 0.0;
        let mut dt: f64 = 0.1;
        let end = 200.0 * std::f64::consts::PI;
        let mut worst_dense: f64 = 0.0;
        while t < end {
            dt = dt.min(end - t);
            match gr.step(&mut Oscillator, t, &mut x, &mut v, dt, true).unwrap() {
                StepOutcome::Accepted { next_dt, .. } => {
                    // Dense output in the middle of the step.
                    let (mut xm, mut vm) = ([0.0], [0.0]);
                    gr.interpolate(0.37, &mut xm, &mut vm);
                    let tm = t + 0.37 * dt;
                    worst_dense = worst_dense.max((xm[0] - tm.cos()).abs()).max((vm[0] + tm.sin()).abs());
                    t += dt;
                    dt = next_dt;
                }
                StepOutcome::Rejected { retry_dt, .. } => dt = retry_dt,
            }
        }
        assert!((x[0] - 1.0).abs() < 1e-11, "{}", x[0]);
        assert!(v[0].abs() < 1e-11);
        assert!(worst_dense < 1e-11, "{worst_dense}");
    }
}
