//! Two-body motion: Kepler's equation, orbital elements <-> state vectors, and
//! universal-variable propagation. Valid for any GM and any conic.
//!
//! Conventions: lengths in au, times in days, GM in au^3/day^2, angles in
//! radians. Elements are referred to whatever axes the state vector uses (Latens
//! shows people heliocentric ecliptic-J2000 elements, computed from ICRF states
//! rotated with `frames::ecliptic_from_icrf`).
//!
//! The conic is described by its periapsis distance `q` rather than the
//! semi-major axis, so parabolae (e = 1) need no special type; `a = q / (1 - e)`
//! is negative for hyperbolae, as in REBOUND.
//!
//! Reference: Vallado, *Fundamentals of Astrodynamics and Applications*, 4th ed.
//! (2013), algorithms 2 (Kepler's equation), 8 (universal variables), 9-10
//! (elements); Curtis, *Orbital Mechanics for Engineering Students* (2005),
//! sec. 3.7 and 4.4; Conway (1986), Celest. Mech. 39, 199 (Laguerre iteration).

use std::f64::consts::PI;

use crate::units::{wrap_pi, wrap_two_pi};
use crate::vec3::Vec3;

/// Errors from two-body computations.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum KeplerError {
    #[error("invalid orbit: {0}")]
    InvalidOrbit(String),
    #[error("Kepler's equation did not converge (M = {mean_anomaly}, e = {eccentricity})")]
    NoConvergence { mean_anomaly: f64, eccentricity: f64 },
}

/// Eccentricities closer to 1 than this, and angular momenta this small
/// relative to r*v, are treated as the limiting case when choosing angles.
const ANGLE_DEGENERACY_TOL: f64 = 1e-11;

/// Classical orbital elements of a conic about a central mass.
///
/// `true_anomaly_rad` locates the body at the epoch of the state it came from.
/// For a circular orbit the argument of periapsis is 0 and the true anomaly is
/// measured from the ascending node; for an orbit in the reference plane the
/// node longitude is 0 and angles are measured from the x axis.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Elements {
    pub periapsis_au: f64,
    pub eccentricity: f64,
    pub inclination_rad: f64,
    pub node_rad: f64,
    pub periapsis_arg_rad: f64,
    pub true_anomaly_rad: f64,
}

impl Elements {
    /// Elements from the semi-major axis (negative for hyperbolae) and the mean
    /// anomaly, for closed and open orbits alike (not parabolae).
    pub fn from_semi_major_axis(
        a_au: f64,
        eccentricity: f64,
        inclination_rad: f64,
        node_rad: f64,
        periapsis_arg_rad: f64,
        mean_anomaly_rad: f64,
    ) -> Result<Elements, KeplerError> {
        let e = eccentricity;
        if !(e.is_finite() && e >= 0.0) || (e - 1.0).abs() < ANGLE_DEGENERACY_TOL {
            return Err(KeplerError::InvalidOrbit(format!(
                "eccentricity {e} needs a periapsis distance, not a semi-major axis"
            )));
        }
        let fits = if e < 1.0 { a_au > 0.0 && a_au.is_finite() } else { a_au < 0.0 && a_au.is_finite() };
        if !fits {
            return Err(KeplerError::InvalidOrbit(format!(
                "semi-major axis {a_au} au does not fit eccentricity {e} (positive for ellipses, negative for hyperbolae)"
            )));
        }
        let nu = true_anomaly_from_mean(mean_anomaly_rad, e)?;
        Ok(Elements {
            periapsis_au: a_au * (1.0 - e),
            eccentricity: e,
            inclination_rad,
            node_rad,
            periapsis_arg_rad,
            true_anomaly_rad: nu,
        })
    }

    /// Semi-major axis, au: positive for ellipses, negative for hyperbolae,
    /// infinite for a parabola.
    pub fn semi_major_axis_au(&self) -> f64 {
        self.periapsis_au / (1.0 - self.eccentricity)
    }

    /// Mean anomaly, radians (for a parabola, Barker's D + D^3/3).
    pub fn mean_anomaly_rad(&self) -> f64 {
        mean_anomaly_from_true(self.true_anomaly_rad, self.eccentricity)
    }
}

/// True for a finite number above zero (false for NaN).
fn is_positive_finite(x: f64) -> bool {
    x.is_finite() && x > 0.0
}

/// x^3/3! + sign x^5/5! + sign^2 x^7/7! + ...: the Taylor tail shared by
/// `x - sin x` (sign = -1) and `sinh x - x` (sign = +1), for |x| < 0.3 where
/// twelve terms reach full precision.
fn odd_taylor_tail(x: f64, sign: f64) -> f64 {
    let x2 = x * x;
    let mut term = x * x2 / 6.0;
    let mut sum = term;
    for k in 1..12 {
        term *= sign * x2 / ((2 * k + 2) as f64 * (2 * k + 3) as f64);
        sum += term;
    }
    sum
}

/// `x - sin(x)` without cancellation for small `x`.
fn x_minus_sin(x: f64) -> f64 {
    if x.abs() < 0.3 { odd_taylor_tail(x, -1.0) } else { x - x.sin() }
}

/// `sinh(x) - x` without cancellation for small `x`.
fn sinh_minus_x(x: f64) -> f64 {
    if x.abs() < 0.3 { odd_taylor_tail(x, 1.0) } else { x.sinh() - x }
}

/// Solves Kepler's equation `M = E - e sin E` for the eccentric anomaly,
/// 0 <= e < 1, returning E in the same revolution as M.
///
/// Newton's method safeguarded by bisection on the bracket [M, M + e] (after
/// reducing M to [0, pi]), so it always converges, including for e near 1 and
/// tiny M, where `E - e sin E` is evaluated as `(E - sin E) + (1 - e) sin E` to
/// avoid cancellation.
pub fn eccentric_anomaly(mean_anomaly_rad: f64, eccentricity: f64) -> Result<f64, KeplerError> {
    let e = eccentricity;
    if !(0.0..1.0).contains(&e) || !mean_anomaly_rad.is_finite() {
        return Err(KeplerError::InvalidOrbit(format!(
            "elliptic Kepler equation needs 0 <= e < 1 and finite M (e = {e}, M = {mean_anomaly_rad})"
        )));
    }
    let m_wrapped = wrap_pi(mean_anomaly_rad);
    let revolutions = mean_anomaly_rad - m_wrapped;
    let sign = if m_wrapped < 0.0 { -1.0 } else { 1.0 };
    let m = m_wrapped.abs();
    if m == 0.0 {
        return Ok(revolutions);
    }
    let one_minus_e = 1.0 - e;
    let f = |x: f64| x_minus_sin(x) + one_minus_e * x.sin() - m;
    let (mut lo, mut hi) = (m, (m + e).min(PI));
    // Starter: for e near 1 and small M the cubic approximation (6M)^(1/3).
    let mut x = if e > 0.8 && m < 0.5 {
        (6.0 * m).cbrt().clamp(lo, hi)
    } else {
        m + e * m.sin() / (1.0 - e * m.cos()).max(1e-3)
    };
    x = x.clamp(lo, hi);
    for _ in 0..100 {
        let fx = f(x);
        if fx == 0.0 {
            return Ok(revolutions + sign * x);
        }
        if fx > 0.0 {
            hi = x;
        } else {
            lo = x;
        }
        let d = 1.0 - e * x.cos();
        let mut next = x - fx / d;
        if !(next > lo && next < hi) {
            next = 0.5 * (lo + hi);
        }
        let converged =
            (next - x).abs() <= 4.0 * f64::EPSILON * x.abs().max(1e-300) || hi - lo <= 4.0 * f64::EPSILON * hi;
        x = next;
        if converged {
            return Ok(revolutions + sign * x);
        }
    }
    if hi - lo <= 1e-12 * hi {
        return Ok(revolutions + sign * x);
    }
    Err(KeplerError::NoConvergence { mean_anomaly: mean_anomaly_rad, eccentricity: e })
}

/// Solves the hyperbolic Kepler equation `M = e sinh H - H`, e > 1.
///
/// Safeguarded Newton on the bracket [asinh(M/e), asinh(M/(e-1))], which holds
/// because `e sinh H - H` lies between `(e-1) sinh H` and `e sinh H - asinh(...)`;
/// `(e - 1) sinh H + (sinh H - H)` avoids cancellation for small H.
pub fn hyperbolic_anomaly(mean_anomaly_rad: f64, eccentricity: f64) -> Result<f64, KeplerError> {
    let e = eccentricity;
    if !(e.is_finite() && e > 1.0 && mean_anomaly_rad.is_finite()) {
        return Err(KeplerError::InvalidOrbit(format!(
            "hyperbolic Kepler equation needs e > 1 and finite M (e = {e}, M = {mean_anomaly_rad})"
        )));
    }
    let sign = if mean_anomaly_rad < 0.0 { -1.0 } else { 1.0 };
    let m = mean_anomaly_rad.abs();
    if m == 0.0 {
        return Ok(0.0);
    }
    let e_minus_1 = e - 1.0;
    let f = |h: f64| e_minus_1 * h.sinh() + sinh_minus_x(h) - m;
    let (mut lo, mut hi) = ((m / e).asinh(), (m / e_minus_1).asinh());
    let mut x = if m < 1.0 && e < 1.1 { (6.0 * m).cbrt().clamp(lo, hi) } else { (m / e).asinh().max(lo) };
    x = x.clamp(lo, hi);
    for _ in 0..200 {
        let fx = f(x);
        if fx == 0.0 {
            return Ok(sign * x);
        }
        if fx > 0.0 {
            hi = x;
        } else {
            lo = x;
        }
        let d = e * x.cosh() - 1.0;
        let mut next = x - fx / d;
        if !(next > lo && next < hi) {
            next = 0.5 * (lo + hi);
        }
        let converged = (next - x).abs() <= 4.0 * f64::EPSILON * x.abs() || hi - lo <= 4.0 * f64::EPSILON * hi;
        x = next;
        if converged {
            return Ok(sign * x);
        }
    }
    if hi - lo <= 1e-12 * hi {
        return Ok(sign * x);
    }
    Err(KeplerError::NoConvergence { mean_anomaly: mean_anomaly_rad, eccentricity: e })
}

/// True anomaly from mean anomaly for any conic (e = 1: Barker's equation with
/// M = D + D^3/3, D = tan(nu/2)). Elliptic results are in [-pi, pi).
pub fn true_anomaly_from_mean(mean_anomaly_rad: f64, eccentricity: f64) -> Result<f64, KeplerError> {
    let e = eccentricity;
    if e < 1.0 {
        let big_e = eccentric_anomaly(wrap_pi(mean_anomaly_rad), e)?;
        Ok(true_anomaly_from_eccentric(big_e, e))
    } else if e > 1.0 {
        let h = hyperbolic_anomaly(mean_anomaly_rad, e)?;
        // tan(nu/2) = sqrt((e+1)/(e-1)) tanh(H/2)
        Ok(2.0 * (((e + 1.0) / (e - 1.0)).sqrt() * (0.5 * h).tanh()).atan())
    } else {
        // Barker: D^3/3 + D - M = 0 has one real root (Cardano).
        let m = mean_anomaly_rad;
        let w = (1.5 * m + (1.0 + 2.25 * m * m).sqrt()).cbrt();
        let d = w - 1.0 / w;
        Ok(2.0 * d.atan())
    }
}

/// True anomaly from eccentric anomaly (ellipse), in [-pi, pi).
pub fn true_anomaly_from_eccentric(eccentric_anomaly_rad: f64, eccentricity: f64) -> f64 {
    let e = eccentricity;
    let (s, c) = eccentric_anomaly_rad.sin_cos();
    wrap_pi(((1.0 - e * e).sqrt() * s).atan2(c - e))
}

/// Mean anomaly from true anomaly for any conic; elliptic results in [0, 2 pi).
pub fn mean_anomaly_from_true(true_anomaly_rad: f64, eccentricity: f64) -> f64 {
    let e = eccentricity;
    let nu = true_anomaly_rad;
    if e < 1.0 {
        let (s, c) = nu.sin_cos();
        let big_e = ((1.0 - e * e).sqrt() * s).atan2(e + c);
        wrap_two_pi(x_minus_sin(big_e) + (1.0 - e) * big_e.sin())
    } else if e > 1.0 {
        let h = 2.0 * (((e - 1.0) / (e + 1.0)).sqrt() * (0.5 * nu).tan()).atanh();
        (e - 1.0) * h.sinh() + sinh_minus_x(h)
    } else {
        let d = (0.5 * nu).tan();
        d + d * d * d / 3.0
    }
}

/// Heliocentric (or planetocentric) position (au) and velocity (au/day) from
/// elements, for central body `gm_au3_per_day2`.
pub fn state_from_elements(gm_au3_per_day2: f64, el: &Elements) -> Result<(Vec3, Vec3), KeplerError> {
    let e = el.eccentricity;
    let q = el.periapsis_au;
    if !is_positive_finite(gm_au3_per_day2) {
        return Err(KeplerError::InvalidOrbit(format!("GM must be positive, got {gm_au3_per_day2}")));
    }
    if !(is_positive_finite(q) && e.is_finite() && e >= 0.0) {
        return Err(KeplerError::InvalidOrbit(format!(
            "periapsis {q} au and eccentricity {e} do not describe a conic"
        )));
    }
    let nu = el.true_anomaly_rad;
    let denom = 1.0 + e * nu.cos();
    if denom <= 1e-12 {
        return Err(KeplerError::InvalidOrbit(format!(
            "true anomaly {nu} rad lies beyond the asymptotes of an e = {e} hyperbola"
        )));
    }
    let p = q * (1.0 + e);
    let r = p / denom;
    let (sn, cn) = nu.sin_cos();
    let pos_pf = Vec3::new(r * cn, r * sn, 0.0);
    let k = (gm_au3_per_day2 / p).sqrt();
    let vel_pf = Vec3::new(-k * sn, k * (e + cn), 0.0);
    let (so, co) = el.node_rad.sin_cos();
    let (si, ci) = el.inclination_rad.sin_cos();
    let (sw, cw) = el.periapsis_arg_rad.sin_cos();
    // Columns of R3(-node) R1(-i) R3(-w): the periapsis direction P and the
    // in-plane direction Q at 90 degrees of motion further on.
    let pvec = Vec3::new(co * cw - so * sw * ci, so * cw + co * sw * ci, sw * si);
    let qvec = Vec3::new(-co * sw - so * cw * ci, -so * sw + co * cw * ci, cw * si);
    Ok((pvec * pos_pf.x + qvec * pos_pf.y, pvec * vel_pf.x + qvec * vel_pf.y))
}

/// Elements as every output file states them: osculating heliocentric
/// elements in the ecliptic and equinox J2000 (IAU 2006), angles in
/// degrees, computed with the GM of the Sun alone, whatever a force model
/// folds into the central body (the one rule, so files from different
/// models compare; the dynamics use the model's own central GM).
///
/// Result files flatten it (`#[serde(flatten)]`): its six fields appear in
/// them by these names.
#[derive(Clone, Copy, Debug, PartialEq, serde::Serialize)]
pub struct OutputElements {
    pub a_au: f64,
    pub e: f64,
    pub inc_deg: f64,
    pub node_deg: f64,
    pub peri_deg: f64,
    pub mean_anomaly_deg: f64,
}

/// The frame statement written beside [`OutputElements`] and the states in
/// every output file.
pub const OUTPUT_FRAME: &str = "elements: heliocentric ecliptic J2000 (IAU 2006 mean ecliptic and equinox), osculating, \
     GM of the Sun; state: heliocentric ICRF (au, au/day)";

impl OutputElements {
    /// From a heliocentric ICRF state.
    pub fn from_icrf_state(position_au: Vec3, velocity_au_per_day: Vec3) -> Result<OutputElements, KeplerError> {
        let el = elements_from_state(
            crate::units::GM_SUN_AU3_PER_DAY2,
            crate::frames::ecliptic_from_icrf(position_au),
            crate::frames::ecliptic_from_icrf(velocity_au_per_day),
        )?;
        Ok(OutputElements::from_elements(&el))
    }

    /// From elements already computed with the GM of the Sun.
    pub fn from_elements(el: &Elements) -> OutputElements {
        let deg = |x: f64| x / crate::units::RAD_PER_DEG;
        OutputElements {
            a_au: el.semi_major_axis_au(),
            e: el.eccentricity,
            inc_deg: deg(el.inclination_rad),
            node_deg: deg(el.node_rad),
            peri_deg: deg(el.periapsis_arg_rad),
            mean_anomaly_deg: deg(el.mean_anomaly_rad()),
        }
    }

    /// Every element NaN (for an orbit that has none, e.g. unbound).
    pub fn nan() -> OutputElements {
        OutputElements {
            a_au: f64::NAN,
            e: f64::NAN,
            inc_deg: f64::NAN,
            node_deg: f64::NAN,
            peri_deg: f64::NAN,
            mean_anomaly_deg: f64::NAN,
        }
    }
}

/// Elements from a position (au) and velocity (au/day) about a central body.
/// See [`Elements`] for the angles chosen in the circular and in-plane cases.
pub fn elements_from_state(
    gm_au3_per_day2: f64,
    position_au: Vec3,
    velocity_au_per_day: Vec3,
) -> Result<Elements, KeplerError> {
    let mu = gm_au3_per_day2;
    let (r, v) = (position_au, velocity_au_per_day);
    if !is_positive_finite(mu) || !r.is_finite() || !v.is_finite() || r.norm() == 0.0 {
        return Err(KeplerError::InvalidOrbit("a state needs a finite, non-zero position and a positive GM".into()));
    }
    let h = r.cross(v);
    let hn = h.norm();
    if hn <= ANGLE_DEGENERACY_TOL * r.norm() * v.norm() || hn == 0.0 {
        return Err(KeplerError::InvalidOrbit("the motion is radial (zero angular momentum): no orbital plane".into()));
    }
    let h_xy = h.x.hypot(h.y);
    let inclination = h_xy.atan2(h.z);
    let node = if h_xy > ANGLE_DEGENERACY_TOL * hn { wrap_two_pi(h.x.atan2(-h.y)) } else { 0.0 };
    let n_hat = Vec3::new(node.cos(), node.sin(), 0.0);
    let w_hat = (h / hn).cross(n_hat);
    let rn = r.norm();
    let e_vec = (r * (v.norm_squared() - mu / rn) - v * r.dot(v)) / mu;
    let e = e_vec.norm();
    let u = r.dot(w_hat).atan2(r.dot(n_hat));
    let (peri, nu) = if e > ANGLE_DEGENERACY_TOL {
        let w = e_vec.dot(w_hat).atan2(e_vec.dot(n_hat));
        (wrap_two_pi(w), wrap_two_pi(u - w))
    } else {
        (0.0, wrap_two_pi(u))
    };
    let p = hn * hn / mu;
    Ok(Elements {
        periapsis_au: p / (1.0 + e),
        eccentricity: e,
        inclination_rad: inclination,
        node_rad: node,
        periapsis_arg_rad: peri,
        true_anomaly_rad: nu,
    })
}

/// Stumpff functions C(z) = (1 - cos sqrt z)/z and S(z) = (sqrt z - sin sqrt z)/sqrt(z)^3,
/// by series near z = 0.
fn stumpff(z: f64) -> (f64, f64) {
    if z.abs() < 0.1 {
        // C = 1/2! - z/4! + z^2/6! - ...; S = 1/3! - z/5! + z^2/7! - ...
        let mut c = 0.0;
        let mut s = 0.0;
        let mut tc = 0.5;
        let mut ts = 1.0 / 6.0;
        for k in 0..10 {
            c += tc;
            s += ts;
            let k2 = 2.0 * k as f64;
            tc *= -z / ((k2 + 3.0) * (k2 + 4.0));
            ts *= -z / ((k2 + 4.0) * (k2 + 5.0));
        }
        (c, s)
    } else if z > 0.0 {
        let sz = z.sqrt();
        ((1.0 - sz.cos()) / z, (sz - sz.sin()) / (sz * z))
    } else {
        let sz = (-z).sqrt();
        ((sz.cosh() - 1.0) / (-z), (sz.sinh() - sz) / (sz * -z))
    }
}

/// Propagates a two-body state by `dt_days` (either direction) with the
/// universal-variable formulation, valid for every conic.
///
/// The universal Kepler equation is solved by the Laguerre-Conway iteration,
/// which converges from a poor start; for ellipses, whole periods are removed
/// from `dt` first so the universal anomaly stays small.
pub fn propagate(
    gm_au3_per_day2: f64,
    position_au: Vec3,
    velocity_au_per_day: Vec3,
    dt_days: f64,
) -> Result<(Vec3, Vec3), KeplerError> {
    let mu = gm_au3_per_day2;
    let (r0, v0) = (position_au, velocity_au_per_day);
    let r0n = r0.norm();
    if !is_positive_finite(mu) || r0n == 0.0 || !r0.is_finite() || !v0.is_finite() || !dt_days.is_finite() {
        return Err(KeplerError::InvalidOrbit(
            "propagation needs a finite non-zero position, a positive GM and a finite time".into(),
        ));
    }
    let sqrt_mu = mu.sqrt();
    let alpha = 2.0 / r0n - v0.norm_squared() / mu; // 1/a
    let sigma0 = r0.dot(v0) / sqrt_mu;
    let mut dt = dt_days;
    if alpha > 0.0 {
        let period = 2.0 * PI / (sqrt_mu * alpha.powf(1.5));
        dt -= (dt / period).round() * period;
    }
    if dt == 0.0 {
        return Ok((r0, v0));
    }
    // Universal Kepler equation: sqrt(mu) dt = sigma0 x^2 C + (1 - alpha r0) x^3 S + r0 x.
    // Besides f and its derivatives, `f_of` returns the size of the terms that
    // f sums, which sets the rounding noise of f.
    let f_of = |x: f64| {
        let z = alpha * x * x;
        let (c, s) = stumpff(z);
        let x2 = x * x;
        let terms = [sigma0 * x2 * c, (1.0 - alpha * r0n) * x2 * x * s, r0n * x, -sqrt_mu * dt];
        let f: f64 = terms.iter().sum();
        let scale: f64 = terms.iter().map(|t| t.abs()).sum();
        let df = sigma0 * x * (1.0 - z * s) + (1.0 - alpha * r0n) * x2 * c + r0n; // = r(x)
        let d2f = sigma0 * (1.0 - z * c) + (1.0 - alpha * r0n) * x * (1.0 - z * s);
        (f, df, d2f, scale, c, s)
    };
    // Starting values (Vallado, algorithm 8): for hyperbolae the logarithmic
    // guess, without which Laguerre's method creeps down from a far too large
    // start one unit of x at a time.
    let mut x = if alpha > 1e-12 {
        sqrt_mu * dt * alpha
    } else if alpha < -1e-12 {
        let a = 1.0 / alpha;
        let s = dt.signum();
        let arg = (-2.0 * mu * alpha * dt) / (r0.dot(v0) + s * (-mu * a).sqrt() * (1.0 - r0n * alpha));
        if arg > 0.0 && arg.is_finite() { s * (-a).sqrt() * arg.ln() } else { sqrt_mu * dt / r0n }
    } else {
        sqrt_mu * dt / r0n
    };
    let n = 5.0;
    let mut converged = false;
    let mut previous_step = f64::INFINITY;
    for _ in 0..500 {
        let (f, df, d2f, scale, _, _) = f_of(x);
        let disc = ((n - 1.0) * (n - 1.0) * df * df - n * (n - 1.0) * f * d2f).abs().sqrt();
        let denom = if df >= 0.0 { df + disc } else { df - disc };
        let dx = n * f / denom;
        // Converged when the step reaches the last bits of x, or the rounding
        // noise of f: the terms can cancel (a start far out on a hyperbola
        // passing close to the Sun), and x is then known only to that noise.
        let noise = 4.0 * f64::EPSILON * scale / df.abs().max(f64::MIN_POSITIVE);
        if dx.abs() <= noise {
            converged = true;
            break;
        }
        x -= dx;
        let step = dx.abs();
        if step <= 1e-15 * x.abs().max(1e-300) || (step >= previous_step && step <= 1e3 * noise) {
            converged = true;
            break;
        }
        previous_step = step;
    }
    if !converged || !x.is_finite() {
        return Err(KeplerError::NoConvergence { mean_anomaly: dt, eccentricity: f64::NAN });
    }
    let (_, rn, _, _, c, s) = f_of(x);
    let x2 = x * x;
    let f = 1.0 - x2 / r0n * c;
    let g = dt - x2 * x / sqrt_mu * s;
    let r = r0 * f + v0 * g;
    let fdot = sqrt_mu / (rn * r0n) * x * (alpha * x2 * s - 1.0);
    let gdot = 1.0 - x2 / rn * c;
    let v = r0 * fdot + v0 * gdot;
    Ok((r, v))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn stumpff_series_and_closed_forms_agree() {
        for z in [-0.1000001, -0.0999999, 0.0999999, 0.1000001] {
            let (c, s) = stumpff(z);
            let (cl, sl) = if z > 0.0 {
                let q = z.sqrt();
                ((1.0 - q.cos()) / z, (q - q.sin()) / (q * z))
            } else {
                let q = (-z).sqrt();
                ((q.cosh() - 1.0) / -z, (q.sinh() - q) / (q * -z))
            };
            assert!((c - cl).abs() < 1e-13 && (s - sl).abs() < 1e-13);
        }
    }

    #[test]
    fn kepler_equation_near_parabolic_and_tiny_m() {
        for &e in &[0.0, 0.5, 0.99, 0.999999, 1.0 - 1e-12] {
            for &m in &[1e-12, 1e-6, 1e-3, 0.5, 3.0, PI, -2.0, 40.0] {
                let big_e = eccentric_anomaly(m, e).unwrap();
                let back = x_minus_sin(big_e) + (1.0 - e) * big_e.sin();
                let rel = ((back - m) / m).abs();
                assert!(rel < 1e-13, "e = {e}, M = {m}: M back = {back}, rel {rel:e}");
            }
        }
    }

    #[test]
    fn hyperbolic_kepler_equation() {
        for &e in &[1.0 + 1e-9, 1.001, 1.5, 10.0] {
            for &m in &[1e-10, 1e-3, 1.0, 50.0, -7.0, 1e4] {
                let h = hyperbolic_anomaly(m, e).unwrap();
                let back = (e - 1.0) * h.sinh() + sinh_minus_x(h);
                assert!(((back - m) / m).abs() < 1e-13, "e = {e}, M = {m}");
            }
        }
    }

    #[test]
    fn parabola_round_trip() {
        let el = Elements {
            periapsis_au: 1.3,
            eccentricity: 1.0,
            inclination_rad: 0.4,
            node_rad: 1.0,
            periapsis_arg_rad: 2.0,
            true_anomaly_rad: 1.1,
        };
        let m = el.mean_anomaly_rad();
        let nu = true_anomaly_from_mean(m, 1.0).unwrap();
        assert!((nu - 1.1).abs() < 1e-14);
        let gm = 2.959e-4;
        let (r, v) = state_from_elements(gm, &el).unwrap();
        // On a parabola v^2 = 2 GM / r exactly.
        assert!((v.norm_squared() * r.norm() / (2.0 * gm) - 1.0).abs() < 1e-14);
    }

    #[test]
    fn radial_motion_is_refused() {
        let r = Vec3::new(1.0, 0.0, 0.0);
        assert!(elements_from_state(1.0, r, r * 0.3).is_err());
    }
}
