//! The linearised, orbit-marginalised kernel: the O-C signal of a perturber
//! hypothesis to first order in its mass, at a cost of one pass over a fixed
//! time grid.
//!
//! To first order in the perturber's GM m, the tracked body's extra
//! displacement is
//!
//!   dx(t) = Phi(t, t0) [ dx0 + integral_t0^t Psi(s) a(s) ds ],
//!   Psi(s) = Phi(s, t0)^-1 B,  B = [0; I],
//!
//! with Phi the state-transition matrix of the reference orbit and a(s) the
//! perturber's direct plus indirect acceleration per unit GM,
//! f(r_p - r) - f(r_p), f(d) = d / |d|^3. The flow is Hamiltonian, so Phi is
//! symplectic and Phi^-1 B = [-B'^T; A^T] with A = dr/dr0 and B' = dr/dv0: no
//! inversion is needed.
//!
//! The integral is a composite 4-point Gauss-Legendre rule on equal panels
//! (at least 24, and one per year of arc); the running integral at an
//! observation inside a panel uses the integrated Lagrange basis of that
//! panel's nodes, so observations need no nodes of their own. The orbit
//! correction dx0 enters linearly and is projected out: the whitened signal
//! is made orthogonal to the whitened orbit Jacobian (6 columns), and the
//! mass is then profiled in closed form, m = (s.y)/(s.s) with m >= 0, giving
//! the chi-square drop (s.y)^2/(s.s).
//!
//! The perturber moves on a two-body orbit about the Sun from its state at
//! t0 (the giants' pull on it is ignored here, a 0.3% effect on the signal;
//! the nonlinear refinement includes it).

// The loops below index several arrays in step, as the equations do; the
// iterator forms clippy suggests would hide that.
#![allow(clippy::needless_range_loop)]

use crate::astrometry::radec_partials;
use crate::dynamics::{ForceModel, InitialState, PropagationError, PropagationSettings, Propagator};
use crate::ephemeris::Ephemeris;
use crate::io::observations::Observation;
use crate::reference::{OrbitModel, ReferenceFit, whiten};
use crate::units::RAD_PER_ARCSEC;
use crate::vec3::Vec3;

/// Gauss-Legendre 4-point abscissae and weights on [-1, 1] (Abramowitz &
/// Stegun table 25.4; from memory, checked in the tests by exact integration
/// of polynomials up to degree 7).
const GL4_X: [f64; 4] =
    [-0.861_136_311_594_052_6, -0.339_981_043_584_856_3, 0.339_981_043_584_856_3, 0.861_136_311_594_052_6];
const GL4_W: [f64; 4] =
    [0.347_854_845_137_453_9, 0.652_145_154_862_546_1, 0.652_145_154_862_546_1, 0.347_854_845_137_453_9];

/// A perturber on a two-body orbit, ready for fast positions: elements of an
/// ellipse about the Sun (hyperbolic and parabolic hypotheses are not used by
/// the search).
#[derive(Clone, Copy, Debug)]
pub struct KeplerOrbit {
    a: f64,
    e: f64,
    /// Unit vector to periapsis and the in-plane normal to it (ICRF).
    p: Vec3,
    q: Vec3,
    mean_motion: f64,
    mean_anomaly_t0: f64,
    t0: f64,
}

impl KeplerOrbit {
    /// From a heliocentric ICRF state at `t0`; `None` for an unbound or
    /// degenerate state.
    pub fn from_state(gm: f64, r: Vec3, v: Vec3, t0: f64) -> Option<KeplerOrbit> {
        let h = r.cross(v);
        let rn = r.norm();
        let energy = 0.5 * v.norm_squared() - gm / rn;
        if energy >= 0.0 || h.norm() == 0.0 {
            return None;
        }
        let a = -gm / (2.0 * energy);
        let e_vec = (r * (v.norm_squared() - gm / rn) - v * r.dot(v)) / gm;
        let e = e_vec.norm();
        if e >= 1.0 {
            return None;
        }
        let w = h.unit();
        // For a circular orbit the periapsis direction is arbitrary: take r.
        let p = if e > 1e-12 { e_vec / e } else { r / rn };
        let q = w.cross(p);
        // Eccentric anomaly at t0 from r = a (cos E - e) p + a sqrt(1-e^2) sin E q.
        let b = a * (1.0 - e * e).sqrt();
        let big_e = (r.dot(q) / b).atan2(r.dot(p) / a + e);
        let m0 = big_e - e * big_e.sin();
        Some(KeplerOrbit { a, e, p, q, mean_motion: (gm / (a * a * a)).sqrt(), mean_anomaly_t0: m0, t0 })
    }

    /// Position at `t`, with `guess` the eccentric anomaly of a nearby time
    /// (NaN when there is none), updated to this one's.
    ///
    /// From a guess within about 1e-3 rad (neighbouring quadrature nodes of a
    /// distant perturber), two Newton steps reach 1e-12 rad; a poorer guess
    /// gets up to 30 steps. The sine and cosine of the final anomaly come from
    /// the last step's by the angle-addition rule, so a node costs two
    /// sin-cos pairs.
    #[inline]
    pub fn position(&self, t: f64, guess: &mut f64) -> Vec3 {
        let m = self.mean_anomaly_t0 + self.mean_motion * (t - self.t0);
        let e = self.e;
        let mut big_e = if guess.is_finite() {
            // Linear prediction from the neighbour's anomaly.
            let (s, c) = guess.sin_cos();
            *guess + (m - (*guess - e * s)) / (1.0 - e * c)
        } else {
            m + e * m.sin()
        };
        let (mut s, mut c) = big_e.sin_cos();
        for _ in 0..30 {
            let d = (big_e - e * s - m) / (1.0 - e * c);
            big_e -= d;
            if d.abs() < 1e-6 {
                // sin and cos at the corrected angle (the error is of order d^2).
                (s, c) = (s - c * d, c + s * d);
                if d.abs() < 1e-12 {
                    break;
                }
                let d2 = (big_e - e * s - m) / (1.0 - e * c);
                big_e -= d2;
                (s, c) = (s - c * d2, c + s * d2);
                break;
            }
            (s, c) = big_e.sin_cos();
        }
        *guess = big_e;
        self.p * (self.a * (c - e)) + self.q * (self.a * (1.0 - e * e).sqrt() * s)
    }
}

/// Per-thread scratch of [`LinearKernel::signal`]: the integrand at the
/// nodes and the running integral at the panel starts.
type Workspace = (Vec<[f64; 6]>, Vec<[f64; 6]>);

/// Everything about the reference orbit the kernel needs, computed once.
#[derive(Clone)]
pub struct LinearKernel {
    pub epoch_tdb_days: f64,
    /// Quadrature nodes: times, tracked-body positions, Psi (6 x 3 rows).
    node_t: Vec<f64>,
    node_r: Vec<Vec3>,
    node_v: Vec<Vec3>,
    node_psi: Vec<[[f64; 3]; 6]>,
    /// Panel length (days) and the start of the first panel.
    panel_days: f64,
    first_t: f64,
    n_panels: usize,
    /// Per observation: its panel and the weights of that panel's 4 nodes in
    /// the integral from the panel start to the observation.
    obs_panel: Vec<usize>,
    obs_w: Vec<[f64; 4]>,
    /// Per observation: whitened d(obs)/d(state at epoch), 2 x 6.
    obs_m: Vec<[[f64; 6]; 2]>,
    /// Orthonormal basis of the orbit-correction space (6 columns of length 2N).
    basis: Vec<Vec<f64>>,
    /// Whitened null residuals (0 for set-aside observations).
    pub residuals: Vec<f64>,
    pub used: Vec<bool>,
    gm_sun: f64,
    /// The far-perturber bound (see [`LinearKernel::far_signal_bound`]):
    /// the largest heliocentric distance at the nodes (au), the signal's
    /// gain per unit acceleration and the residuals' norm.
    r_max_au: f64,
    signal_gain: f64,
    residual_norm: f64,
}

impl LinearKernel {
    /// Builds the kernel around a fitted reference orbit.
    pub fn build(
        fit: &ReferenceFit,
        observations: &[Observation],
        geometry: Vec<crate::astrometry::ObservingGeometry>,
        model: &ForceModel,
        ephemeris: &dyn Ephemeris,
    ) -> Result<LinearKernel, PropagationError> {
        let t0 = fit.epoch_tdb_days;
        // Light-time epochs and predicted directions of the reference orbit.
        let mut orbit = OrbitModel::new(observations, geometry, t0, model, ephemeris)?;
        let pred = orbit.predict_settled(&fit.state)?;
        let emission = orbit.emission_epochs().to_vec();

        let lo = emission.iter().copied().fold(t0, f64::min) - 1.0;
        let hi = emission.iter().copied().fold(t0, f64::max) + 1.0;
        let years = (hi - lo) / 365.25;
        let n_panels = (years.ceil() as usize).max(24);
        let panel_days = (hi - lo) / n_panels as f64;
        let mut node_t = Vec::with_capacity(4 * n_panels);
        for p in 0..n_panels {
            let a = lo + p as f64 * panel_days;
            for x in GL4_X {
                node_t.push(a + 0.5 * (1.0 + x) * panel_days);
            }
        }
        // One propagation with partials to the nodes and the emission epochs.
        let mut epochs = node_t.clone();
        epochs.extend_from_slice(&emission);
        let settings = PropagationSettings { partials: true, ..PropagationSettings::fast() };
        let mut prop = Propagator::new(model, ephemeris, settings)?;
        let init = InitialState {
            t0_tdb_days: t0,
            tracked_position_au: Vec3::new(fit.state[0], fit.state[1], fit.state[2]),
            tracked_velocity_au_per_day: Vec3::new(fit.state[3], fit.state[4], fit.state[5]),
            perturbers: vec![],
        };
        let traj = prop.propagate(&init, &epochs)?;
        let np = traj.n_params;
        let block = |e: usize, row: usize, col: usize| traj.tracked_partial(e, row, col);
        let _ = np;
        let mut node_r = Vec::with_capacity(node_t.len());
        let mut node_v = Vec::with_capacity(node_t.len());
        let mut node_psi = Vec::with_capacity(node_t.len());
        for e in 0..node_t.len() {
            node_r.push(traj.tracked[e].position_au);
            node_v.push(traj.tracked[e].velocity_au_per_day);
            // Psi = [-B'^T; A^T], A = dr/dr0, B' = dr/dv0.
            let mut psi = [[0.0; 3]; 6];
            for i in 0..3 {
                for j in 0..3 {
                    psi[i][j] = -block(e, j, 3 + i);
                    psi[3 + i][j] = block(e, j, i);
                }
            }
            node_psi.push(psi);
        }
        let nn = node_t.len();
        let n = observations.len();
        let mut obs_panel = Vec::with_capacity(n);
        let mut obs_w = Vec::with_capacity(n);
        let mut obs_m = Vec::with_capacity(n);
        for k in 0..n {
            let t = emission[k];
            let p = (((t - lo) / panel_days).floor() as usize).min(n_panels - 1);
            let u = (t - (lo + p as f64 * panel_days)) / panel_days;
            obs_panel.push(p);
            obs_w.push(partial_weights(u).map(|w| w * panel_days));
            let (pa, pd) = radec_partials(pred[k].rho_au);
            let mut rows = [[0.0; 6]; 2];
            for j in 0..6 {
                let col = [block(nn + k, 0, j), block(nn + k, 1, j), block(nn + k, 2, j)];
                let ra = (pa[0] * col[0] + pa[1] * col[1] + pa[2] * col[2]) / RAD_PER_ARCSEC;
                let de = (pd[0] * col[0] + pd[1] * col[1] + pd[2] * col[2]) / RAD_PER_ARCSEC;
                let (w1, w2) = whiten(&observations[k], (ra, de));
                rows[0][j] = w1;
                rows[1][j] = w2;
            }
            obs_m.push(rows);
        }
        let used: Vec<bool> = fit.residuals.iter().map(|r| r.used).collect();
        let mut residuals = vec![0.0; 2 * n];
        for k in 0..n {
            if used[k] {
                let w = whiten(&observations[k], (fit.residuals[k].ra_arcsec, fit.residuals[k].dec_arcsec));
                residuals[2 * k] = w.0;
                residuals[2 * k + 1] = w.1;
            }
        }
        // Orthonormal basis of the orbit Jacobian's columns (used rows only),
        // by modified Gram-Schmidt applied twice.
        let mut basis: Vec<Vec<f64>> = Vec::with_capacity(6);
        for j in 0..6 {
            let mut col = vec![0.0; 2 * n];
            for k in 0..n {
                if used[k] {
                    col[2 * k] = obs_m[k][0][j];
                    col[2 * k + 1] = obs_m[k][1][j];
                }
            }
            for _ in 0..2 {
                for b in &basis {
                    let d = dot(&col, b);
                    col.iter_mut().zip(b).for_each(|(c, bv)| *c -= d * bv);
                }
            }
            let norm = dot(&col, &col).sqrt();
            if norm > 0.0 {
                col.iter_mut().for_each(|c| *c /= norm);
                basis.push(col);
            }
        }
        Ok(LinearKernel {
            epoch_tdb_days: t0,
            node_t,
            node_r,
            node_v,
            node_psi,
            panel_days,
            first_t: lo,
            n_panels,
            obs_panel,
            obs_w,
            obs_m,
            basis,
            residuals,
            used,
            gm_sun: model.central_gm_au3_per_day2(),
            r_max_au: 0.0,
            signal_gain: 0.0,
            residual_norm: 0.0,
        }
        .with_far_bound())
    }

    /// Sets the constants of [`LinearKernel::far_signal_bound`]. With
    /// |a_i| <= a at every node, the integrand's two halves (its position
    /// and velocity parts, rows of Psi_i) are at most ||Psi_i^r||_F a and
    /// ||Psi_i^v||_F a; the running integral's halves at observation k at
    /// most a sum_i c_ki ||Psi_i^r||_F and a sum_i c_ki ||Psi_i^v||_F (c_ki
    /// the quadrature's coefficients, made positive); and its whitened
    /// signal at most ||M_k^r||_F times the first plus ||M_k^v||_F times the
    /// second (M_k^r, M_k^v: the columns of position and velocity). Kept
    /// apart, the halves' units do not mix: one norm over all six would
    /// multiply the velocity columns (growing with time) by the position
    /// part (growing with its square) and lose a factor of the arc's length.
    fn with_far_bound(mut self) -> LinearKernel {
        let frob = |rows: &[[f64; 3]]| rows.iter().flatten().map(|x| x * x).sum::<f64>().sqrt();
        let psi: Vec<[f64; 2]> = self.node_psi.iter().map(|m| [frob(&m[..3]), frob(&m[3..])]).collect();
        let mut before = vec![[0.0; 2]; self.n_panels + 1];
        for p in 0..self.n_panels {
            let mut next = before[p];
            for j in 0..4 {
                for h in 0..2 {
                    next[h] += 0.5 * GL4_W[j] * self.panel_days * psi[4 * p + j][h];
                }
            }
            before[p + 1] = next;
        }
        let mut gain2 = 0.0;
        for (k, (&p, w)) in self.obs_panel.iter().zip(&self.obs_w).enumerate() {
            if !self.used[k] {
                continue;
            }
            let mut bound = 0.0;
            for h in 0..2 {
                let integral = before[p][h] + (0..4).map(|j| w[j].abs() * psi[4 * p + j][h]).sum::<f64>();
                let m: f64 =
                    self.obs_m[k].iter().map(|row| row[3 * h..3 * h + 3].iter().map(|x| x * x).sum::<f64>()).sum();
                bound += m.sqrt() * integral;
            }
            gain2 += bound * bound;
        }
        self.signal_gain = gain2.sqrt();
        self.r_max_au = self.node_r.iter().map(|r| r.norm()).fold(0.0, f64::max);
        self.residual_norm = dot(&self.residuals, &self.residuals).sqrt();
        self
    }

    /// An upper bound on the norm of the whitened signal (orbit correction
    /// removed or not) of a perturber on `orbit` with GM up to `gm_max`,
    /// and a lower bound on its closest approach (au), when the orbit stays
    /// outside every node of the tracked body's (periapsis q beyond the
    /// largest distance R); `None` otherwise. The perturbing acceleration
    /// f(r_p - r) - f(r_p), f(d) = d/|d|^3, is at most 2 R / (q - R)^3 by
    /// the mean-value theorem (the Jacobian of f has norm 2/|d|^3 and
    /// |d| >= q - R on the segment).
    pub fn far_signal_bound(&self, orbit: &KeplerOrbit, gm_max: f64) -> Option<(f64, f64)> {
        let gap = orbit.a * (1.0 - orbit.e) - self.r_max_au;
        (gap > 0.0).then(|| (gm_max * self.signal_gain * 2.0 * self.r_max_au / gap.powi(3), gap))
    }

    /// The same kernel with other whitened residuals (for simulated data
    /// sets); `residuals` is projected orthogonal to the orbit correction and
    /// zeroed at set-aside observations, as a refitted null model's would be.
    pub fn with_residuals(&self, residuals: &[f64]) -> LinearKernel {
        let mut k = self.clone();
        k.residuals = residuals.to_vec();
        for (i, u) in k.used.iter().enumerate() {
            if !u {
                k.residuals[2 * i] = 0.0;
                k.residuals[2 * i + 1] = 0.0;
            }
        }
        let mut r = std::mem::take(&mut k.residuals);
        k.project(&mut r);
        k.residual_norm = dot(&r, &r).sqrt();
        k.residuals = r;
        k
    }

    pub fn n_residuals(&self) -> usize {
        self.residuals.len()
    }

    /// Number of quadrature nodes.
    pub fn n_nodes(&self) -> usize {
        self.node_t.len()
    }

    /// GM of the central mass used for perturber orbits.
    pub fn central_gm(&self) -> f64 {
        self.gm_sun
    }

    /// The whitened O-C signal per unit perturber GM (au^3/day^2) of a
    /// perturber on `orbit`, with the tracked body's orbit correction not yet
    /// removed, into `out` (length 2N). Returns the closest approach to the
    /// tracked body at the nodes, au.
    pub fn signal(&self, orbit: &KeplerOrbit, out: &mut [f64]) -> f64 {
        let mut guess = f64::NAN;
        let mut closest = f64::INFINITY;
        self.signal_of(
            |_, t, r, _| {
                let rp = orbit.position(t, &mut guess);
                let d = rp - r;
                let dn2 = d.norm_squared();
                closest = closest.min(dn2);
                let rp2 = rp.norm_squared();
                d / (dn2 * dn2.sqrt()) - rp / (rp2 * rp2.sqrt())
            },
            out,
        );
        closest.sqrt()
    }

    /// The whitened O-C signal of an extra acceleration on the tracked body
    /// (au/day^2, ICRF), given at each quadrature node by
    /// `accel(node, t, position, velocity)` of the tracked body's reference
    /// orbit, into `out` (length 2N), orbit correction not removed.
    pub fn signal_of(&self, accel: impl FnMut(usize, f64, Vec3, Vec3) -> Vec3, out: &mut [f64]) {
        thread_local! {
            static WORK: std::cell::RefCell<Workspace> = const { std::cell::RefCell::new((Vec::new(), Vec::new())) };
        }
        WORK.with(|w| {
            let (g, starts) = &mut *w.borrow_mut();
            g.resize(self.node_t.len(), [0.0; 6]);
            starts.resize(self.n_panels + 1, [0.0; 6]);
            self.signal_into(accel, out, g, starts)
        })
    }

    /// Times of the quadrature nodes (TDB days from J2000).
    pub fn node_times(&self) -> &[f64] {
        &self.node_t
    }

    fn signal_into(
        &self,
        mut accel: impl FnMut(usize, f64, Vec3, Vec3) -> Vec3,
        out: &mut [f64],
        g: &mut [[f64; 6]],
        starts: &mut [[f64; 6]],
    ) {
        for (i, &t) in self.node_t.iter().enumerate() {
            let acc = accel(i, t, self.node_r[i], self.node_v[i]);
            let psi = &self.node_psi[i];
            for (gi, row) in g[i].iter_mut().zip(psi) {
                *gi = row[0] * acc.x + row[1] * acc.y + row[2] * acc.z;
            }
        }
        // Cumulative integral at each panel start.
        starts[0] = [0.0; 6];
        for p in 0..self.n_panels {
            let mut s = starts[p];
            for (j, w) in GL4_W.iter().enumerate() {
                let gi = &g[4 * p + j];
                let w = 0.5 * w * self.panel_days;
                for c in 0..6 {
                    s[c] += w * gi[c];
                }
            }
            starts[p + 1] = s;
        }
        for (k, (&p, w)) in self.obs_panel.iter().zip(&self.obs_w).enumerate() {
            let mut integral = starts[p];
            for j in 0..4 {
                let gi = &g[4 * p + j];
                for c in 0..6 {
                    integral[c] += w[j] * gi[c];
                }
            }
            if self.used[k] {
                let m = &self.obs_m[k];
                out[2 * k] = (0..6).map(|c| m[0][c] * integral[c]).sum();
                out[2 * k + 1] = (0..6).map(|c| m[1][c] * integral[c]).sum();
            } else {
                out[2 * k] = 0.0;
                out[2 * k + 1] = 0.0;
            }
        }
        let _ = self.first_t;
    }

    /// Closest approach (au) at the quadrature nodes between the tracked body
    /// and a perturber on the two-body orbit through `position`/`velocity`
    /// (infinite for an unbound orbit).
    pub fn closest_approach(&self, position_au: Vec3, velocity_au_per_day: Vec3) -> f64 {
        let Some(orbit) = KeplerOrbit::from_state(self.gm_sun, position_au, velocity_au_per_day, self.epoch_tdb_days)
        else {
            return f64::INFINITY;
        };
        let mut guess = f64::NAN;
        self.node_t
            .iter()
            .zip(&self.node_r)
            .map(|(&t, r)| (orbit.position(t, &mut guess) - *r).norm())
            .fold(f64::INFINITY, f64::min)
    }

    /// Removes the orbit-correction component from a whitened signal.
    pub fn project(&self, signal: &mut [f64]) {
        // The basis is orthonormal, so all six coefficients can be taken
        // from the unprojected signal in one pass.
        let mut coef = [0.0; 6];
        for (c, b) in coef.iter_mut().zip(&self.basis) {
            *c = dot(signal, b);
        }
        for (c, b) in coef.iter().zip(&self.basis) {
            signal.iter_mut().zip(b).for_each(|(s, bv)| *s -= c * bv);
        }
    }

    /// The orbit correction (au, au/day at the epoch) that absorbs the most
    /// of an unprojected whitened signal: the least-squares solution of
    /// M dx = s over the used observations (M: the whitened partials of the
    /// observations with respect to the state at the epoch). A reference
    /// fit made without the perturber has its orbit shifted by this much;
    /// `None` when the partials are degenerate.
    pub fn orbit_correction(&self, signal: &[f64]) -> Option<[f64; 6]> {
        let mut ata = [[0.0; 6]; 6];
        let mut atb = [0.0; 6];
        for (k, m) in self.obs_m.iter().enumerate() {
            if !self.used[k] {
                continue;
            }
            for (row, s) in m.iter().zip(&signal[2 * k..2 * k + 2]) {
                for i in 0..6 {
                    atb[i] += row[i] * s;
                    for j in 0..6 {
                        ata[i][j] += row[i] * row[j];
                    }
                }
            }
        }
        // The normal matrix spans scales from au to au/day: scale it to a
        // unit diagonal, then solve by eigen-decomposition (a pseudo-inverse
        // where a direction is not constrained).
        let d: Vec<f64> = (0..6).map(|i| ata[i][i].sqrt()).collect();
        if d.iter().any(|&x| x.is_nan() || x <= 0.0) {
            return None;
        }
        let scaled = faer::Mat::from_fn(6, 6, |i, j| ata[i][j] / (d[i] * d[j]));
        let eig = scaled.self_adjoint_eigen(faer::Side::Lower).ok()?;
        let (lambda, q) = (eig.S().column_vector(), eig.U());
        let lmax = (0..6).map(|i| lambda[i]).fold(0.0, f64::max);
        let mut x = [0.0; 6];
        for j in 0..6 {
            if lambda[j] <= 1e-12 * lmax {
                continue;
            }
            let qb: f64 = (0..6).map(|i| q[(i, j)] * atb[i] / d[i]).sum();
            for (i, xi) in x.iter_mut().enumerate() {
                *xi += q[(i, j)] * qb / lambda[j];
            }
        }
        for (xi, di) in x.iter_mut().zip(&d) {
            *xi /= di;
        }
        Some(x)
    }

    /// (s.y, s.s) of a projected signal s against the residuals y.
    pub fn signal_products(&self, projected: &[f64]) -> (f64, f64) {
        (dot(projected, &self.residuals), dot(projected, projected))
    }

    /// Profiles the mass for a projected signal: the chi-square drop and the
    /// best GM, with the GM confined to [0, gm_max].
    pub fn profile(&self, projected: &[f64], gm_max: f64) -> (f64, f64) {
        profile_mass(projected, &self.residuals, gm_max)
    }
}

/// The mass profiled in closed form: with s.y and s.s of a projected signal
/// s per unit GM against residuals y, the best GM in [0, gm_max] and the
/// chi-square drop 2 gm s.y - gm^2 s.s it gives.
fn profile_mass(projected: &[f64], residuals: &[f64], gm_max: f64) -> (f64, f64) {
    let sy = dot(projected, residuals);
    let ss = dot(projected, projected);
    if sy <= 0.0 || ss <= 0.0 {
        return (0.0, 0.0);
    }
    let gm = (sy / ss).min(gm_max);
    (2.0 * gm * sy - gm * gm * ss, gm)
}

/// What the search, the refinement in the kernel and the posterior need of
/// a kernel: one tracked body's ([`LinearKernel`]) or several bodies'
/// together ([`JointKernel`]). Signals and residuals are whitened vectors
/// of length [`SignalKernel::n_residuals`].
pub trait SignalKernel: Sync {
    /// The epoch of the perturber hypotheses' states, TDB days.
    fn epoch_tdb_days(&self) -> f64;
    /// GM of the central mass the perturber orbits.
    fn central_gm(&self) -> f64;
    fn n_residuals(&self) -> usize;
    /// The whitened null residuals, orbit corrections projected out.
    fn residuals(&self) -> &[f64];
    /// The whitened signal per unit GM of a perturber on `orbit` into `out`,
    /// orbit corrections not removed; returns the closest approach, au.
    fn signal(&self, orbit: &KeplerOrbit, out: &mut [f64]) -> f64;
    /// [`SignalKernel::signal`] for a search that allows GMs up to
    /// `gm_max`: a joint kernel leaves out (zeroes) the parts of the bodies
    /// such a perturber cannot reach (see [`JointKernel::far_bodies`]), and
    /// the closest approach it returns is then a lower bound.
    fn signal_up_to(&self, orbit: &KeplerOrbit, gm_max: f64, out: &mut [f64]) -> f64 {
        let _ = gm_max;
        self.signal(orbit, out)
    }
    /// Removes the orbit corrections from a whitened signal.
    fn project(&self, signal: &mut [f64]);
    /// The kernel's parts (each body's rows of a joint kernel; one part for
    /// one body), for work done a part at a time.
    #[allow(clippy::single_range_in_vec_init)] // one range, the whole: meant
    fn parts(&self) -> Vec<std::ops::Range<usize>> {
        vec![0..self.n_residuals()]
    }
    /// Part `p` of what [`SignalKernel::signal_up_to`] then
    /// [`SignalKernel::project`] give for `orbit`, into `out` (the part's
    /// length).
    fn projected_part(&self, p: usize, orbit: &KeplerOrbit, gm_max: f64, out: &mut [f64]) {
        debug_assert_eq!(p, 0);
        self.signal_up_to(orbit, gm_max, out);
        self.project(out);
    }
    /// The chi-square drop and the best GM in [0, gm_max] for a projected
    /// signal per unit GM.
    fn profile(&self, projected: &[f64], gm_max: f64) -> (f64, f64) {
        profile_mass(projected, self.residuals(), gm_max)
    }
    /// (s.y, s.s) of a projected signal s against the residuals y.
    fn signal_products(&self, projected: &[f64]) -> (f64, f64) {
        (dot(projected, self.residuals()), dot(projected, projected))
    }
    /// The whitened signal of a perturber with GM `gm` on the two-body orbit
    /// through `position`/`velocity` at the epoch, with the orbit
    /// corrections removed; `None` for an unbound orbit.
    fn projected_signal(&self, position_au: Vec3, velocity_au_per_day: Vec3, gm: f64) -> Option<Vec<f64>> {
        let orbit =
            KeplerOrbit::from_state(self.central_gm(), position_au, velocity_au_per_day, self.epoch_tdb_days())?;
        let mut s = vec![0.0; self.n_residuals()];
        self.signal(&orbit, &mut s);
        s.iter_mut().for_each(|x| *x *= gm);
        self.project(&mut s);
        Some(s)
    }
}

impl SignalKernel for LinearKernel {
    fn epoch_tdb_days(&self) -> f64 {
        self.epoch_tdb_days
    }
    fn central_gm(&self) -> f64 {
        self.gm_sun
    }
    fn n_residuals(&self) -> usize {
        self.residuals.len()
    }
    fn residuals(&self) -> &[f64] {
        &self.residuals
    }
    fn signal(&self, orbit: &KeplerOrbit, out: &mut [f64]) -> f64 {
        LinearKernel::signal(self, orbit, out)
    }
    fn project(&self, signal: &mut [f64]) {
        LinearKernel::project(self, signal)
    }
}

/// Bodies too far from a perturber to feel it cost nothing in a joint
/// search: body b is left out of a hypothesis's signal when the bound of
/// [`LinearKernel::far_signal_bound`] on its whitened signal, at the
/// search's largest GM, is at most eps_b = min(FAR_SIGNAL_TOTAL,
/// FAR_CHI2_TOTAL / (2 |y_b| + 3 FAR_SIGNAL_TOTAL)) / (number of bodies),
/// y_b its whitened residuals. Leaving it out changes the chi-square of any
/// mass up to the cap by at most 2 |y_b - m s_b| eps_b + eps_b^2 <=
/// eps_b (2 |y_b| + 3 eps_b), so every hypothesis's profiled drop moves by
/// at most FAR_CHI2_TOTAL summed over all bodies, and its signal (hence its
/// null statistics, through the subspace) by at most FAR_SIGNAL_TOTAL in
/// whitened norm.
pub const FAR_SIGNAL_TOTAL: f64 = 1e-3;
/// See [`FAR_SIGNAL_TOTAL`].
pub const FAR_CHI2_TOTAL: f64 = 0.01;

/// Several tracked bodies' kernels side by side, for one perturber shared
/// by all: a hypothesis's signal is the concatenation of each body's
/// signal, each body's own 6 orbit corrections are projected out of its
/// own part, and the mass is profiled once over all. For a fixed mass the
/// chi-square drop is therefore the sum of the bodies' drops.
///
/// Every body's kernel must be built at the same epoch (the hypotheses are
/// states at that epoch) and about the same central mass.
#[derive(Clone)]
pub struct JointKernel {
    bodies: Vec<LinearKernel>,
    /// Start of each body's part, and the total length at the end.
    offsets: Vec<usize>,
    residuals: Vec<f64>,
    /// Per body, the largest bound on its signal at which a hypothesis
    /// leaves it out (eps_b of [`FAR_SIGNAL_TOTAL`]).
    far_limits: Vec<f64>,
}

impl JointKernel {
    /// Joins the bodies' kernels; an error names what does not match.
    pub fn new(bodies: Vec<LinearKernel>) -> Result<JointKernel, String> {
        let Some(first) = bodies.first() else {
            return Err("a joint kernel needs at least one body".into());
        };
        for (i, b) in bodies.iter().enumerate() {
            if (b.epoch_tdb_days - first.epoch_tdb_days).abs() > 1e-9 {
                return Err(format!(
                    "body {} has its kernel at epoch {} TDB days, body 1 at {}: one epoch for all is needed",
                    i + 1,
                    b.epoch_tdb_days,
                    first.epoch_tdb_days
                ));
            }
            if b.gm_sun != first.gm_sun {
                return Err(format!("body {} orbits another central mass than body 1", i + 1));
            }
        }
        let mut offsets = vec![0];
        let mut residuals = Vec::new();
        for b in &bodies {
            residuals.extend_from_slice(&b.residuals);
            offsets.push(residuals.len());
        }
        let n = bodies.len() as f64;
        let far_limits = bodies
            .iter()
            .map(|k| FAR_SIGNAL_TOTAL.min(FAR_CHI2_TOTAL / (2.0 * k.residual_norm + 3.0 * FAR_SIGNAL_TOTAL)) / n)
            .collect();
        Ok(JointKernel { bodies, offsets, residuals, far_limits })
    }

    /// The bodies' own kernels, in order.
    pub fn bodies(&self) -> &[LinearKernel] {
        &self.bodies
    }

    /// Where body `b`'s part lies in a joint vector.
    pub fn part(&self, b: usize) -> std::ops::Range<usize> {
        self.offsets[b]..self.offsets[b + 1]
    }

    /// Each body's chi-square drop for a projected joint signal per unit GM
    /// at the GM `gm`: 2 gm s.y - gm^2 s.s over its part (they sum to the
    /// joint drop at that GM).
    pub fn drops_by_body(&self, projected: &[f64], gm: f64) -> Vec<f64> {
        (0..self.bodies.len())
            .map(|b| {
                let r = self.part(b);
                let (s, y) = (&projected[r.clone()], &self.residuals[r]);
                2.0 * gm * dot(s, y) - gm * gm * dot(s, s)
            })
            .collect()
    }

    /// The same bodies with other whitened residuals (joint layout), each
    /// part treated as [`LinearKernel::with_residuals`] does.
    pub fn with_residuals(&self, residuals: &[f64]) -> JointKernel {
        let bodies: Vec<LinearKernel> =
            (0..self.bodies.len()).map(|b| self.bodies[b].with_residuals(&residuals[self.part(b)])).collect();
        JointKernel::new(bodies).expect("the same epochs as before")
    }

    /// Whether a perturber on `orbit` with a GM up to `gm_max` is too far
    /// from body `b` to matter, by a bound (see [`FAR_SIGNAL_TOTAL`]):
    /// `Some(lower bound on the closest approach, au)` when it is.
    fn far(&self, b: usize, orbit: &KeplerOrbit, gm_max: f64) -> Option<f64> {
        let (bound, gap) = self.bodies[b].far_signal_bound(orbit, gm_max)?;
        (bound <= self.far_limits[b]).then_some(gap)
    }

    /// Body `b`'s part of [`SignalKernel::signal_up_to`] into `out` (its
    /// part's length): zero when it is out of reach, else its signal.
    /// Returns its closest approach (a lower bound when out of reach).
    fn body_signal_up_to(&self, b: usize, orbit: &KeplerOrbit, gm_max: f64, out: &mut [f64]) -> f64 {
        match self.far(b, orbit, gm_max) {
            Some(gap) => {
                out.fill(0.0);
                gap
            }
            None => self.bodies[b].signal(orbit, out),
        }
    }

    /// How many bodies a search with GMs up to `gm_max` leaves out of a
    /// perturber on `orbit`'s signal as too far to matter.
    pub fn far_bodies(&self, orbit: &KeplerOrbit, gm_max: f64) -> usize {
        (0..self.bodies.len()).filter(|&b| self.far(b, orbit, gm_max).is_some()).count()
    }

    /// The joint kernel without body `b` (`None` when it is the only one).
    pub fn without(&self, b: usize) -> Option<JointKernel> {
        let rest: Vec<LinearKernel> =
            self.bodies.iter().enumerate().filter(|(i, _)| *i != b).map(|(_, k)| k.clone()).collect();
        JointKernel::new(rest).ok()
    }
}

impl SignalKernel for JointKernel {
    fn epoch_tdb_days(&self) -> f64 {
        self.bodies[0].epoch_tdb_days
    }
    fn central_gm(&self) -> f64 {
        self.bodies[0].gm_sun
    }
    fn n_residuals(&self) -> usize {
        self.residuals.len()
    }
    fn residuals(&self) -> &[f64] {
        &self.residuals
    }
    fn signal(&self, orbit: &KeplerOrbit, out: &mut [f64]) -> f64 {
        let mut closest = f64::INFINITY;
        for (b, k) in self.bodies.iter().enumerate() {
            closest = closest.min(k.signal(orbit, &mut out[self.part(b)]));
        }
        closest
    }
    fn signal_up_to(&self, orbit: &KeplerOrbit, gm_max: f64, out: &mut [f64]) -> f64 {
        (0..self.bodies.len())
            .map(|b| self.body_signal_up_to(b, orbit, gm_max, &mut out[self.part(b)]))
            .fold(f64::INFINITY, f64::min)
    }
    fn project(&self, signal: &mut [f64]) {
        for (b, k) in self.bodies.iter().enumerate() {
            k.project(&mut signal[self.part(b)]);
        }
    }
    fn parts(&self) -> Vec<std::ops::Range<usize>> {
        (0..self.bodies.len()).map(|b| self.part(b)).collect()
    }
    fn projected_part(&self, p: usize, orbit: &KeplerOrbit, gm_max: f64, out: &mut [f64]) {
        self.body_signal_up_to(p, orbit, gm_max, out);
        self.bodies[p].project(out);
    }
}

/// Dot product with four accumulators (lets the compiler vectorise it).
fn dot(a: &[f64], b: &[f64]) -> f64 {
    let mut acc = [0.0; 4];
    let (ca, cb) = (a.chunks_exact(4), b.chunks_exact(4));
    let (ra, rb) = (ca.remainder(), cb.remainder());
    for (x, y) in ca.zip(cb) {
        for k in 0..4 {
            acc[k] += x[k] * y[k];
        }
    }
    let tail: f64 = ra.iter().zip(rb).map(|(x, y)| x * y).sum();
    acc[0] + acc[1] + acc[2] + acc[3] + tail
}

/// Integrals from 0 to u (u in [0, 1]) of the Lagrange basis polynomials on
/// the panel's 4 Gauss-Legendre nodes (in panel units).
fn partial_weights(u: f64) -> [f64; 4] {
    let nodes: [f64; 4] = GL4_X.map(|x| 0.5 * (1.0 + x));
    let mut out = [0.0; 4];
    for j in 0..4 {
        // Coefficients of L_j(u) = prod_{m != j} (u - u_m) / (u_j - u_m).
        let mut poly = [1.0, 0.0, 0.0, 0.0];
        let mut denom = 1.0;
        let mut degree = 0;
        for m in 0..4 {
            if m == j {
                continue;
            }
            let mut next = [0.0; 4];
            for d in 0..=degree {
                next[d + 1] += poly[d];
                next[d] -= nodes[m] * poly[d];
            }
            poly = next;
            degree += 1;
            denom *= nodes[j] - nodes[m];
        }
        out[j] = (0..4).map(|d| poly[d] * u.powi(d as i32 + 1) / (d as f64 + 1.0)).sum::<f64>() / denom;
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn gauss_legendre_integrates_degree_seven_exactly() {
        for deg in 0..8 {
            let exact = if deg % 2 == 1 { 0.0 } else { 2.0 / (deg as f64 + 1.0) };
            let got: f64 = GL4_X.iter().zip(GL4_W).map(|(x, w)| w * x.powi(deg)).sum();
            assert!((got - exact).abs() < 1e-15, "degree {deg}");
        }
    }

    #[test]
    fn partial_weights_integrate_cubics_to_any_point() {
        // f(u) = 1 + 2u - u^2 + 3u^3 sampled at the nodes.
        let f = |u: f64| 1.0 + 2.0 * u - u * u + 3.0 * u * u * u;
        let nodes: [f64; 4] = GL4_X.map(|x| 0.5 * (1.0 + x));
        for u in [0.0, 0.1, 0.5, 0.77, 1.0] {
            let w = partial_weights(u);
            let got: f64 = (0..4).map(|j| w[j] * f(nodes[j])).sum();
            let exact = u + u * u - u * u * u / 3.0 + 0.75 * u.powi(4);
            assert!((got - exact).abs() < 1e-14, "{u}");
        }
    }

    #[test]
    fn kepler_orbit_matches_the_universal_variable_propagator() {
        let gm = crate::units::GM_SUN_AU3_PER_DAY2;
        let r = Vec3::new(40.0, -60.0, 25.0);
        let v = Vec3::new(0.0011, 0.0008, -0.0004);
        let orbit = KeplerOrbit::from_state(gm, r, v, 100.0).unwrap();
        let mut guess = f64::NAN;
        for dt in [-9000.0, -10.0, 0.0, 3000.0, 20000.0] {
            let (want, _) = crate::dynamics::kepler::propagate(gm, r, v, dt).unwrap();
            let got = orbit.position(100.0 + dt, &mut guess);
            assert!((got - want).norm() < 1e-9, "{dt}: {:e}", (got - want).norm());
        }
        assert!(KeplerOrbit::from_state(gm, r, v * 10.0, 0.0).is_none());
    }
}
