//! The heliocentric force model and its variational equations.
//!
//! Propagated bodies: the tracked body (index 0, massless unless its GM is
//! given) and zero or more perturbers (massive, indices 1..). Known bodies (planets) are not
//! integrated: their heliocentric positions come from an ephemeris. In
//! heliocentric coordinates the acceleration of propagated body i is
//!
//!   a_i = -(mu_sun + mu_i) f(r_i) + sum_{j != i} mu_j [ f(r_j - r_i) - f(r_j) ]
//!         (+ the 1PN solar term),       f(d) = d / |d|^3,
//!
//! where j runs over the known bodies and the other massive propagated
//! bodies. The term -mu_j f(r_j) is the indirect term: the Sun's own
//! acceleration towards body j. This form needs only heliocentric positions of
//! the known bodies, so it stays right whatever an unseen body did to the Sun.
//!
//! Variational equations, with F(d) = (I |d|^2 - 3 d d^T) / |d|^5 the gradient
//! of f:
//!
//!   da_i/dr_i  = -(mu_sun + mu_i) F(r_i) - sum_{j != i} mu_j F(r_j - r_i)
//!   da_i/dr_j  = mu_j [ F(r_j - r_i) - F(r_j) ]      (j propagated, massive)
//!   da_i/dmu_m = f(r_m - r_i) - f(r_m)  (m != i),    -f(r_i)  (m = i)
//!
//! With planets folded into the Sun, "heliocentric" above reads "relative to
//! the barycentre of the Sun and the folded planets" and mu_sun is their
//! total GM (see [`ForceModel`]).
//!
//! The 1PN term is left out of the variational equations: it changes a
//! distant body's acceleration by about 1e-8 of itself, and the partials by
//! less.
//!
//! Reference: Murray & Dermott, *Solar System Dynamics* (1999), sec. 6.2
//! (heliocentric equations of motion); the 1PN term for a test particle in the
//! Sun's field in harmonic coordinates, e.g. Moyer (2003), JPL DESCANSO
//! monograph 2, eq. 4-61 with beta = gamma = 1 and only the Sun's terms.

use std::collections::HashMap;

use super::PropagationError;
use super::integrator::{RADAU_NODES, SecondOrderSystem};
use crate::ephemeris::{Body, Ephemeris};
use crate::units::C_AU_PER_DAY;
use crate::vec3::Vec3;

/// A planet whose position comes from the ephemeris, and its GM.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct KnownBody {
    pub body: Body,
    pub gm_au3_per_day2: f64,
}

/// Which forces act on the propagated bodies.
///
/// With `folded` bodies (the inner planets, for a distant target), the Sun and
/// those bodies act as one point mass at their common barycentre B, and the
/// equations of motion are written relative to B instead of the Sun. The
/// choice of origin matters: heliocentric positions of the giant planets carry
/// the Sun's reflex wobble about B (the Earth alone moves the Sun by 650 km
/// over a year, Mercury by 10 000 km... of which a 88-day wiggle of 9 500 km
/// only through Jupiter's indirect term), and an integrator would have to
/// follow those wiggles with steps of days. Relative to B everything is
/// smooth. The propagator converts states to and from heliocentric ones at
/// its boundary, so callers only ever see heliocentric states.
#[derive(Clone, Debug, PartialEq)]
pub struct ForceModel {
    /// GM of the Sun alone.
    pub gm_sun_au3_per_day2: f64,
    /// Planets folded into the central mass (their barycentre with the Sun is
    /// the origin of integration).
    pub folded: Vec<KnownBody>,
    /// Planets taken from the ephemeris as separate attracting bodies.
    pub known: Vec<KnownBody>,
    /// Whether to add the 1PN solar relativistic term.
    pub relativity: bool,
    /// GM of the tracked body itself (0 for a massless test body). A planet's
    /// own mass matters at the precision of real data: in the two-body term
    /// it is -(mu_sun + mu_tracked) f(r), and it pulls on the perturbers
    /// (directly and through the Sun's reflex). Leaving Uranus's GM out
    /// moves its fitted orbit by about 3" over a century (mean motion and
    /// distance no longer obey Kepler's third law with the right GM).
    pub tracked_gm_au3_per_day2: f64,
}

impl ForceModel {
    /// The Sun alone (two-body motion for a massless tracked body).
    pub fn sun_only() -> Self {
        ForceModel {
            gm_sun_au3_per_day2: Body::Sun.gm_au3_per_day2(),
            folded: Vec::new(),
            known: Vec::new(),
            relativity: false,
            tracked_gm_au3_per_day2: 0.0,
        }
    }

    /// The Sun and the given planets, with their DE440 GMs.
    pub fn with_known(bodies: &[Body]) -> Self {
        ForceModel {
            gm_sun_au3_per_day2: Body::Sun.gm_au3_per_day2(),
            folded: Vec::new(),
            known: bodies.iter().map(|&b| KnownBody { body: b, gm_au3_per_day2: b.gm_au3_per_day2() }).collect(),
            relativity: false,
            tracked_gm_au3_per_day2: 0.0,
        }
    }

    /// The usual model for a distant target: Jupiter, Saturn, Uranus and
    /// Neptune from the ephemeris, and Mercury, Venus, the Earth-Moon system
    /// and Mars folded into the Sun's mass.
    ///
    /// Folding is accurate for bodies far outside the inner planets: seen from
    /// r, the Sun and the inner planets (within d of it) act as a point mass at
    /// their barycentre plus a quadrupole smaller by (d/r)^2, below 1e-3 of the
    /// inner planets' 6e-6 share of the central pull at 40 au. The integration
    /// origin is that barycentre (see [`ForceModel`]).
    pub fn outer_planets_with_inner_folded() -> Self {
        let inner = [Body::Mercury, Body::Venus, Body::EarthMoonBarycenter, Body::Mars];
        let mut m = ForceModel::with_known(&[Body::Jupiter, Body::Saturn, Body::Uranus, Body::Neptune]);
        m.folded = inner.iter().map(|&b| KnownBody { body: b, gm_au3_per_day2: b.gm_au3_per_day2() }).collect();
        m
    }

    /// Every body this model reads from the ephemeris (known and folded), for
    /// building a [`crate::ephemeris::Tabulated`] cache.
    pub fn ephemeris_bodies(&self) -> Vec<Body> {
        self.known.iter().chain(self.folded.iter()).map(|k| k.body).collect()
    }

    /// A tabulated cache of `source` with every body this model reads, plus
    /// `extra` bodies (e.g. the Earth, for the observer), over `span_tdb_days`.
    /// Folded planets enter only weighted by their tiny mass ratios (below
    /// 3e-6), so their nodes are spaced 4 days apart whatever their own motion
    /// (Mercury's interpolation error of 1e-5 au then moves the origin by 2e-12
    /// au); the rest use the default spacings.
    pub fn tabulate(
        &self,
        source: &dyn Ephemeris,
        extra: &[Body],
        span_tdb_days: (f64, f64),
    ) -> Result<crate::ephemeris::Tabulated, crate::ephemeris::EphemerisError> {
        let mut bodies: Vec<(Body, f64)> = Vec::new();
        for &b in self.known.iter().map(|k| &k.body).chain(extra) {
            if !bodies.iter().any(|(x, _)| *x == b) {
                bodies.push((b, crate::ephemeris::default_node_spacing_days(b)));
            }
        }
        for f in &self.folded {
            if !bodies.iter().any(|(x, _)| *x == f.body) {
                bodies.push((f.body, 4.0));
            }
        }
        crate::ephemeris::Tabulated::with_spacings(source, &bodies, span_tdb_days)
    }

    /// GM of the central point mass: the Sun plus the folded planets.
    pub fn central_gm_au3_per_day2(&self) -> f64 {
        self.gm_sun_au3_per_day2 + self.folded.iter().map(|k| k.gm_au3_per_day2).sum::<f64>()
    }

    /// Heliocentric position (au) and velocity (au/day) of the integration
    /// origin: the barycentre of the Sun and the folded planets (the Sun itself
    /// when nothing is folded).
    pub fn origin_heliocentric_state(
        &self,
        ephemeris: &dyn Ephemeris,
        t_tdb_days: f64,
    ) -> Result<(Vec3, Vec3), PropagationError> {
        let mut p = Vec3::ZERO;
        let mut v = Vec3::ZERO;
        for f in &self.folded {
            let s = ephemeris.heliocentric_state(f.body, t_tdb_days)?;
            p += s.position_au * f.gm_au3_per_day2;
            v += s.velocity_au_per_day * f.gm_au3_per_day2;
        }
        let m = self.central_gm_au3_per_day2();
        Ok((p / m, v / m))
    }

    /// The same model with the tracked body's own GM (au^3/day^2).
    pub fn with_tracked_gm(mut self, gm_au3_per_day2: f64) -> Self {
        self.tracked_gm_au3_per_day2 = gm_au3_per_day2;
        self
    }

    /// GM of the two-body problem of the tracked body about the central
    /// mass: what Kepler's third law uses for it.
    pub fn tracked_two_body_gm_au3_per_day2(&self) -> f64 {
        self.central_gm_au3_per_day2() + self.tracked_gm_au3_per_day2
    }

    /// The same model with the 1PN solar term switched on or off.
    pub fn with_relativity(mut self, on: bool) -> Self {
        self.relativity = on;
        self
    }
}

/// f(d) = d / |d|^3.
#[inline]
fn inverse_square(d: Vec3) -> Vec3 {
    let r2 = d.norm_squared();
    d / (r2 * r2.sqrt())
}

/// F(d) = (I |d|^2 - 3 d d^T) / |d|^5, the gradient of f.
#[inline]
fn gradient(d: Vec3) -> [[f64; 3]; 3] {
    let r2 = d.norm_squared();
    let r5 = r2 * r2 * r2.sqrt();
    let dd = d.to_array();
    let mut m = [[0.0; 3]; 3];
    for (i, row) in m.iter_mut().enumerate() {
        for (j, cell) in row.iter_mut().enumerate() {
            let delta = if i == j { r2 } else { 0.0 };
            *cell = (delta - 3.0 * dd[i] * dd[j]) / r5;
        }
    }
    m
}

#[inline]
fn add_scaled(acc: &mut [[f64; 3]; 3], m: &[[f64; 3]; 3], s: f64) {
    for i in 0..3 {
        for j in 0..3 {
            acc[i][j] += s * m[i][j];
        }
    }
}

/// Known-body positions at the eight nodes of each step, by step, for a step
/// plan that is reused across propagations.
pub(crate) type NodeCache = HashMap<(u64, u64), Vec<Vec3>>;

/// The force model bound to an ephemeris and a set of propagated bodies: the
/// second-order system the integrator advances.
///
/// Component layout of x (and v, a): the positions of the propagated bodies
/// (3 per body), then for each parameter the variations of those positions.
pub(crate) struct GravitySystem<'a> {
    model: &'a ForceModel,
    ephemeris: &'a dyn Ephemeris,
    /// GM of each propagated body (the tracked body first).
    masses: Vec<f64>,
    /// Number of parameters with variational equations (0 for none).
    n_params: usize,
    /// For each parameter, the propagated body whose GM it is, if any.
    mass_param_body: Vec<Option<usize>>,
    /// Known-body positions at the nodes of the current step: [node][known].
    node_positions: Vec<Vec3>,
    /// Sum over known bodies of -mu_j f(R_j) at each node.
    node_indirect: [Vec3; 8],
    cache: Option<&'a mut NodeCache>,
    pub ephemeris_evaluations: u64,
    // Scratch.
    positions: Vec<Vec3>,
}

impl<'a> GravitySystem<'a> {
    /// `masses[0]` is the tracked body's GM (0 for a test body). With `partials`, parameters are
    /// the tracked body's initial state (6), then per perturber its initial
    /// state (6) and GM (1).
    pub(crate) fn new(
        model: &'a ForceModel,
        ephemeris: &'a dyn Ephemeris,
        masses: Vec<f64>,
        partials: bool,
        cache: Option<&'a mut NodeCache>,
    ) -> Self {
        let nb = masses.len();
        let (n_params, mass_param_body) = if partials {
            let mut owners = vec![None; 6];
            for body in 1..nb {
                owners.extend(std::iter::repeat_n(None, 6));
                owners.push(Some(body));
            }
            (owners.len(), owners)
        } else {
            (0, Vec::new())
        };
        GravitySystem {
            model,
            ephemeris,
            masses,
            n_params,
            mass_param_body,
            node_positions: vec![Vec3::ZERO; 8 * model.known.len()],
            node_indirect: [Vec3::ZERO; 8],
            cache,
            ephemeris_evaluations: 0,
            positions: vec![Vec3::ZERO; nb],
        }
    }

    pub(crate) fn n_bodies(&self) -> usize {
        self.masses.len()
    }

    pub(crate) fn n_params(&self) -> usize {
        self.n_params
    }
}

impl SecondOrderSystem for GravitySystem<'_> {
    fn dim(&self) -> usize {
        3 * self.masses.len() * (1 + self.n_params)
    }

    fn control_dim(&self) -> usize {
        3 * self.masses.len()
    }

    fn begin_step(&mut self, t0: f64, dt: f64) -> Result<(), PropagationError> {
        let k = self.model.known.len();
        if k == 0 {
            return Ok(());
        }
        let key = (t0.to_bits(), dt.to_bits());
        if let Some(cached) = self.cache.as_ref().and_then(|c| c.get(&key)) {
            self.node_positions.copy_from_slice(cached);
        } else {
            for (node, h) in RADAU_NODES.iter().enumerate() {
                let t = t0 + h * dt;
                for (j, kb) in self.model.known.iter().enumerate() {
                    self.node_positions[node * k + j] = self.ephemeris.heliocentric_position_au(kb.body, t)?;
                }
            }
            self.ephemeris_evaluations += (8 * k) as u64;
            if let Some(c) = self.cache.as_mut() {
                c.insert(key, self.node_positions.clone());
            }
        }
        for node in 0..8 {
            let mut s = Vec3::ZERO;
            for (j, kb) in self.model.known.iter().enumerate() {
                s -= inverse_square(self.node_positions[node * k + j]) * kb.gm_au3_per_day2;
            }
            self.node_indirect[node] = s;
        }
        Ok(())
    }

    fn accelerations(
        &mut self,
        node: usize,
        _t: f64,
        x: &[f64],
        v: &[f64],
        a: &mut [f64],
    ) -> Result<(), PropagationError> {
        let nb = self.masses.len();
        let k = self.model.known.len();
        let mu_sun = self.model.central_gm_au3_per_day2();
        for i in 0..nb {
            self.positions[i] = Vec3::new(x[3 * i], x[3 * i + 1], x[3 * i + 2]);
        }
        let known = &self.node_positions[node * k..(node + 1) * k];
        for i in 0..nb {
            let r = self.positions[i];
            let mut acc = -(mu_sun + self.masses[i]) * inverse_square(r) + self.node_indirect[node];
            for (j, kb) in self.model.known.iter().enumerate() {
                acc += inverse_square(known[j] - r) * kb.gm_au3_per_day2;
            }
            for j in 0..nb {
                if j != i && self.masses[j] > 0.0 {
                    let rj = self.positions[j];
                    acc += (inverse_square(rj - r) - inverse_square(rj)) * self.masses[j];
                }
            }
            if self.model.relativity {
                let vel = Vec3::new(v[3 * i], v[3 * i + 1], v[3 * i + 2]);
                let rn = r.norm();
                let c2 = C_AU_PER_DAY * C_AU_PER_DAY;
                let factor = mu_sun / (c2 * rn * rn * rn);
                acc += (r * (4.0 * mu_sun / rn - vel.norm_squared()) + vel * (4.0 * r.dot(vel))) * factor;
            }
            a[3 * i] = acc.x;
            a[3 * i + 1] = acc.y;
            a[3 * i + 2] = acc.z;
        }
        if self.n_params == 0 {
            return Ok(());
        }

        // Gradients: jac[i][j] = da_i/dr_j, dmu[i][m] = da_i/dmu_m.
        let mut jac = vec![[[0.0; 3]; 3]; nb * nb];
        let mut dmu = vec![Vec3::ZERO; nb * nb];
        for i in 0..nb {
            let r = self.positions[i];
            let mut own = [[0.0; 3]; 3];
            add_scaled(&mut own, &gradient(r), -(mu_sun + self.masses[i]));
            for (j, kb) in self.model.known.iter().enumerate() {
                add_scaled(&mut own, &gradient(known[j] - r), -kb.gm_au3_per_day2);
            }
            for j in 0..nb {
                if j == i || self.masses[j] <= 0.0 && !self.mass_param_body.contains(&Some(j)) {
                    continue;
                }
                let rj = self.positions[j];
                let g_rel = gradient(rj - r);
                add_scaled(&mut own, &g_rel, -self.masses[j]);
                let mut cross = [[0.0; 3]; 3];
                add_scaled(&mut cross, &g_rel, self.masses[j]);
                add_scaled(&mut cross, &gradient(rj), -self.masses[j]);
                jac[i * nb + j] = cross;
                dmu[i * nb + j] = inverse_square(rj - r) - inverse_square(rj);
            }
            jac[i * nb + i] = own;
            dmu[i * nb + i] = -inverse_square(r);
        }
        let block = 3 * nb;
        for p in 0..self.n_params {
            let base = block * (1 + p);
            let dx = &x[base..base + block];
            for i in 0..nb {
                let mut acc = [0.0; 3];
                for j in 0..nb {
                    let m = &jac[i * nb + j];
                    let (u0, u1, u2) = (dx[3 * j], dx[3 * j + 1], dx[3 * j + 2]);
                    for (c, row) in m.iter().enumerate() {
                        acc[c] += row[0] * u0 + row[1] * u1 + row[2] * u2;
                    }
                }
                if let Some(m) = self.mass_param_body[p] {
                    let d = dmu[i * nb + m];
                    acc[0] += d.x;
                    acc[1] += d.y;
                    acc[2] += d.z;
                }
                a[base + 3 * i..base + 3 * i + 3].copy_from_slice(&acc);
            }
        }
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn gradient_matches_finite_differences_of_inverse_square() {
        let d = Vec3::new(0.7, -1.3, 2.1);
        let g = gradient(d);
        let h = 1e-6;
        for j in 0..3 {
            let mut e = [0.0; 3];
            e[j] = h;
            let dp = inverse_square(d + Vec3::from_array(e)).to_array();
            let dm = inverse_square(d - Vec3::from_array(e)).to_array();
            for i in 0..3 {
                let fd = (dp[i] - dm[i]) / (2.0 * h);
                assert!((fd - g[i][j]).abs() < 1e-9, "{i}{j}: {fd} vs {}", g[i][j]);
            }
        }
    }

    #[test]
    fn folded_model_adds_inner_masses_to_the_sun() {
        let m = ForceModel::outer_planets_with_inner_folded();
        assert_eq!(m.known.len(), 4);
        let ratio = m.central_gm_au3_per_day2() / Body::Sun.gm_au3_per_day2() - 1.0;
        // Mercury..Mars together are about 6.0e-6 solar masses (DE440 GMs).
        assert!((ratio - 6.0e-6).abs() < 0.1e-6, "{ratio}");
    }
}
