//! Gauss's method: a preliminary orbit from three directions.
//!
//! Given the observed unit directions rho1..rho3 at t1 < t2 < t3 and the
//! observer's heliocentric positions R1..R3, the distance r2 of the body at
//! the middle time solves the eighth-degree equation
//!
//!   r2^8 + a r2^6 + b r2^3 + c = 0,
//!
//! after which the three slant ranges, the positions and, through truncated
//! f and g series, the velocity at t2 follow. Every positive real root gives a
//! candidate; the caller chooses by the fit to all the data.
//!
//! Reference: Curtis, *Orbital Mechanics for Engineering Students* (2005),
//! sec. 5.10, algorithm 5.5 (notation followed; from memory); Gauss (1809).

use crate::vec3::Vec3;

/// A preliminary heliocentric state at `t_tdb_days`.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Candidate {
    pub t_tdb_days: f64,
    pub position_au: Vec3,
    pub velocity_au_per_day: Vec3,
}

/// One sight line: time, unit direction from the observer, observer position.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct SightLine {
    pub t_tdb_days: f64,
    pub direction: Vec3,
    pub observer_au: Vec3,
}

/// Candidate states at the middle time from three sight lines (central body
/// GM `mu`). Returns nothing when the geometry is degenerate (coplanar sight
/// lines) or no root gives positive distances.
pub fn gauss_candidates(lines: [SightLine; 3], mu: f64) -> Vec<Candidate> {
    let [o1, o2, o3] = lines;
    let (t1, t2, t3) = (o1.t_tdb_days, o2.t_tdb_days, o3.t_tdb_days);
    let (tau1, tau3) = (t1 - t2, t3 - t2);
    let tau = tau3 - tau1;
    if !(tau1 < 0.0 && tau3 > 0.0) {
        return Vec::new();
    }
    let (q1, q2, q3) = (o1.direction, o2.direction, o3.direction);
    let p1 = q2.cross(q3);
    let p2 = q1.cross(q3);
    let p3 = q1.cross(q2);
    let d0 = q1.dot(p1);
    if d0.abs() < 1e-14 {
        return Vec::new();
    }
    let r = [o1.observer_au, o2.observer_au, o3.observer_au];
    let p = [p1, p2, p3];
    let d = |i: usize, j: usize| r[i].dot(p[j]);
    let a_coef = (-d(0, 1) * tau3 / tau + d(1, 1) + d(2, 1) * tau1 / tau) / d0;
    let b_coef = (d(0, 1) * (tau3 * tau3 - tau * tau) * tau3 / tau + d(2, 1) * (tau * tau - tau1 * tau1) * tau1 / tau)
        / (6.0 * d0);
    let e = r[1].dot(q2);
    let r2sq = r[1].norm_squared();
    let a = -(a_coef * a_coef + 2.0 * a_coef * e + r2sq);
    let b = -2.0 * mu * b_coef * (a_coef + e);
    let c = -mu * mu * b_coef * b_coef;
    let poly = |x: f64| x.powi(8) + a * x.powi(6) + b * x.powi(3) + c;

    let mut out = Vec::new();
    for root in positive_roots(poly, 1e-3, 1e4) {
        let r2_3 = root * root * root;
        let rho1 = ((6.0 * (d(2, 0) * tau1 / tau3 + d(1, 0) * tau / tau3) * r2_3
            + mu * d(2, 0) * (tau * tau - tau1 * tau1) * tau1 / tau3)
            / (6.0 * r2_3 + mu * (tau * tau - tau3 * tau3))
            - d(0, 0))
            / d0;
        let rho2 = a_coef + mu * b_coef / r2_3;
        let rho3 = ((6.0 * (d(0, 2) * tau3 / tau1 - d(1, 2) * tau / tau1) * r2_3
            + mu * d(0, 2) * (tau * tau - tau3 * tau3) * tau3 / tau1)
            / (6.0 * r2_3 + mu * (tau * tau - tau1 * tau1))
            - d(2, 2))
            / d0;
        if !(rho1 > 0.0 && rho2 > 0.0 && rho3 > 0.0) {
            continue;
        }
        let pos1 = r[0] + q1 * rho1;
        let pos2 = r[1] + q2 * rho2;
        let pos3 = r[2] + q3 * rho3;
        let f1 = 1.0 - 0.5 * mu * tau1 * tau1 / r2_3;
        let f3 = 1.0 - 0.5 * mu * tau3 * tau3 / r2_3;
        let g1 = tau1 - mu * tau1 * tau1 * tau1 / (6.0 * r2_3);
        let g3 = tau3 - mu * tau3 * tau3 * tau3 / (6.0 * r2_3);
        let den = f1 * g3 - f3 * g1;
        if den.abs() < 1e-300 {
            continue;
        }
        let vel2 = (pos3 * f1 - pos1 * f3) / den;
        if pos2.is_finite() && vel2.is_finite() {
            out.push(Candidate { t_tdb_days: t2, position_au: pos2, velocity_au_per_day: vel2 });
        }
    }
    out
}

/// Positive real roots of `f` in [lo, hi], by a logarithmic scan for sign
/// changes and bisection.
fn positive_roots(f: impl Fn(f64) -> f64, lo: f64, hi: f64) -> Vec<f64> {
    let steps = 2000;
    let ratio = (hi / lo).powf(1.0 / steps as f64);
    let mut roots = Vec::new();
    let mut x0 = lo;
    let mut f0 = f(x0);
    for _ in 0..steps {
        let x1 = x0 * ratio;
        let f1 = f(x1);
        if f0 == 0.0 {
            roots.push(x0);
        } else if f0.signum() != f1.signum() {
            let (mut a, mut b, mut fa) = (x0, x1, f0);
            for _ in 0..200 {
                let m = 0.5 * (a + b);
                let fm = f(m);
                if fm.signum() == fa.signum() {
                    a = m;
                    fa = fm;
                } else {
                    b = m;
                }
                if b - a <= 1e-15 * b {
                    break;
                }
            }
            roots.push(0.5 * (a + b));
        }
        x0 = x1;
        f0 = f1;
    }
    roots
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::dynamics::kepler::{Elements, propagate, state_from_elements};
    use crate::units::GM_SUN_AU3_PER_DAY2;

    #[test]
    fn recovers_a_known_orbit_from_three_exact_sight_lines() {
        // An invented body at 3 au observed from a circular 1 au "Earth":
        // exact directions (no light time), 20 days apart.
        let mu = GM_SUN_AU3_PER_DAY2;
        let el = Elements::from_semi_major_axis(3.0, 0.1, 0.2, 1.0, 2.0, 0.3).unwrap();
        let (r0, v0) = state_from_elements(mu, &el).unwrap();
        let earth = |t: f64| {
            let n = (mu / 1.0f64).sqrt();
            Vec3::new((n * t).cos(), (n * t).sin(), 0.0)
        };
        let lines: Vec<SightLine> = [-20.0, 0.0, 20.0]
            .iter()
            .map(|&t| {
                let (r, _) = propagate(mu, r0, v0, t).unwrap();
                SightLine { t_tdb_days: t, direction: (r - earth(t)).unit(), observer_au: earth(t) }
            })
            .collect();
        let cands = gauss_candidates([lines[0], lines[1], lines[2]], mu);
        let best = cands.iter().map(|c| (c.position_au - r0).norm()).fold(f64::INFINITY, f64::min);
        // Truncated f and g series over 20 days: a few 1e-4 au.
        assert!(best < 1e-3, "{cands:?}");
    }
}
