//! Where the Sun's planets are: heliocentric ICRF states at a TDB epoch.
//!
//! One trait, [`Ephemeris`], answers "where is body B, relative to the Sun, at
//! TDB time t" with position in au and velocity in au/day, ICRF axes. Three
//! implementations:
//! - [`Vsop87`]: the embedded default (the VSOP87A planetary theory through the
//!   `vsop87` crate), needing no data file;
//! - [`SpkFile`]: a reader for JPL SPK files (types 2 and 3), for users with a
//!   DE ephemeris;
//! - [`Tabulated`]: a cache over either, with Hermite interpolation, for hot
//!   loops that ask for the same bodies millions of times.
//!
//! The heliocentric form is what the dynamics needs (see `docs/method.md`): the
//! equations of motion of the tracked body and of a perturber are written
//! relative to the Sun, so the Sun's own motion about the barycentre never
//! enters.

mod spk;
mod table;
mod vsop;

pub use spk::{SpkFile, SpkSegmentInfo};
pub use table::{Tabulated, default_node_spacing_days};
pub use vsop::Vsop87;

use crate::units::{self, gm_au3_per_day2_from_km3_per_s2};
use crate::vec3::Vec3;

/// A body whose position an ephemeris can give. For Mars and the planets beyond,
/// the name means the barycentre of the planet and its satellites: that is what
/// DE files tabulate as the planet, what the VSOP87 theory describes, and what a
/// body far from the planet feels (with the system's total GM).
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub enum Body {
    Sun,
    Mercury,
    Venus,
    Earth,
    Moon,
    EarthMoonBarycenter,
    Mars,
    Jupiter,
    Saturn,
    Uranus,
    Neptune,
    Pluto,
}

impl Body {
    /// Every body, in order from the Sun.
    pub const ALL: [Body; 12] = [
        Body::Sun,
        Body::Mercury,
        Body::Venus,
        Body::Earth,
        Body::Moon,
        Body::EarthMoonBarycenter,
        Body::Mars,
        Body::Jupiter,
        Body::Saturn,
        Body::Uranus,
        Body::Neptune,
        Body::Pluto,
    ];

    /// The lower-case name used on the command line and in files.
    pub fn name(self) -> &'static str {
        match self {
            Body::Sun => "sun",
            Body::Mercury => "mercury",
            Body::Venus => "venus",
            Body::Earth => "earth",
            Body::Moon => "moon",
            Body::EarthMoonBarycenter => "earth-moon",
            Body::Mars => "mars",
            Body::Jupiter => "jupiter",
            Body::Saturn => "saturn",
            Body::Uranus => "uranus",
            Body::Neptune => "neptune",
            Body::Pluto => "pluto",
        }
    }

    /// Looks a body up by [`Body::name`], ignoring case.
    pub fn from_name(name: &str) -> Option<Body> {
        let lower = name.trim().to_ascii_lowercase();
        Body::ALL.into_iter().find(|b| b.name() == lower)
    }

    /// The NAIF integer code of the body in SPK files: the system barycentre
    /// for Mercury, Venus and Mars onwards (NAIF ID conventions).
    pub fn naif_id(self) -> i32 {
        match self {
            Body::Sun => 10,
            Body::Mercury => 1,
            Body::Venus => 2,
            Body::Earth => 399,
            Body::Moon => 301,
            Body::EarthMoonBarycenter => 3,
            Body::Mars => 4,
            Body::Jupiter => 5,
            Body::Saturn => 6,
            Body::Uranus => 7,
            Body::Neptune => 8,
            Body::Pluto => 9,
        }
    }

    /// GM of the body (of the system, from Mars on), au^3/day^2, from DE440
    /// (see `units`).
    pub fn gm_au3_per_day2(self) -> f64 {
        let km3_s2 = match self {
            Body::Sun => units::GM_SUN_KM3_PER_S2,
            Body::Mercury => units::GM_MERCURY_KM3_PER_S2,
            Body::Venus => units::GM_VENUS_KM3_PER_S2,
            Body::Earth => units::GM_EARTH_KM3_PER_S2,
            Body::Moon => units::GM_MOON_KM3_PER_S2,
            Body::EarthMoonBarycenter => units::GM_EARTH_KM3_PER_S2 + units::GM_MOON_KM3_PER_S2,
            Body::Mars => units::GM_MARS_SYSTEM_KM3_PER_S2,
            Body::Jupiter => units::GM_JUPITER_SYSTEM_KM3_PER_S2,
            Body::Saturn => units::GM_SATURN_SYSTEM_KM3_PER_S2,
            Body::Uranus => units::GM_URANUS_SYSTEM_KM3_PER_S2,
            Body::Neptune => units::GM_NEPTUNE_SYSTEM_KM3_PER_S2,
            Body::Pluto => units::GM_PLUTO_SYSTEM_KM3_PER_S2,
        };
        gm_au3_per_day2_from_km3_per_s2(km3_s2)
    }
}

impl std::fmt::Display for Body {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(self.name())
    }
}

/// The heliocentric state of a body: position in au and velocity in au/day,
/// ICRF axes, at `t_tdb_days` TDB days after J2000.0.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct HeliocentricState {
    pub body: Body,
    pub t_tdb_days: f64,
    pub position_au: Vec3,
    pub velocity_au_per_day: Vec3,
}

/// Errors from ephemerides.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum EphemerisError {
    #[error(
        "{ephemeris} covers {body} from {} to {} (TDB), but {} was asked for",
        tdb_label(covered_tdb_days.0), tdb_label(covered_tdb_days.1), tdb_label(*t_tdb_days)
    )]
    OutOfRange { ephemeris: String, body: String, t_tdb_days: f64, covered_tdb_days: (f64, f64) },
    #[error("{ephemeris} has no data for {body}")]
    NotProvided { ephemeris: String, body: String },
    #[error("{path}: {reason}")]
    File { path: String, reason: String },
}

/// A TDB day count shown as a calendar date for error messages.
fn tdb_label(t_tdb_days: f64) -> String {
    if !t_tdb_days.is_finite() {
        return format!("{t_tdb_days} days after J2000.0");
    }
    let e = crate::time::epoch_from_tdb_days(t_tdb_days);
    let (y, mo, d, h, mi, _, _) = e.to_gregorian(hifitime::TimeScale::TDB);
    format!("{y:04}-{mo:02}-{d:02}T{h:02}:{mi:02}")
}

/// Heliocentric positions and velocities of the Sun's planets.
///
/// Implementations are immutable after construction and shareable between
/// threads.
pub trait Ephemeris: Send + Sync {
    /// A short description for reports, e.g. "VSOP87A (embedded)".
    fn description(&self) -> String;

    /// The TDB span (days after J2000.0) over which `body` is available, or
    /// `None` when this ephemeris does not have it.
    fn covered_tdb_days(&self, body: Body) -> Option<(f64, f64)>;

    /// The heliocentric ICRF state of `body` at `t_tdb_days`.
    fn heliocentric_state(&self, body: Body, t_tdb_days: f64) -> Result<HeliocentricState, EphemerisError>;

    /// The heliocentric ICRF position of `body` at `t_tdb_days`, au.
    fn heliocentric_position_au(&self, body: Body, t_tdb_days: f64) -> Result<Vec3, EphemerisError> {
        Ok(self.heliocentric_state(body, t_tdb_days)?.position_au)
    }

    /// Checks that `t_tdb_days` lies inside the coverage of `body`.
    fn check_covered(&self, body: Body, t_tdb_days: f64) -> Result<(), EphemerisError> {
        match self.covered_tdb_days(body) {
            None => Err(EphemerisError::NotProvided { ephemeris: self.description(), body: body.to_string() }),
            Some((a, b)) if t_tdb_days >= a && t_tdb_days <= b => Ok(()),
            Some(span) => Err(EphemerisError::OutOfRange {
                ephemeris: self.description(),
                body: body.to_string(),
                t_tdb_days,
                covered_tdb_days: span,
            }),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn names_round_trip() {
        for b in Body::ALL {
            assert_eq!(Body::from_name(b.name()), Some(b));
        }
        assert_eq!(Body::from_name(" Jupiter "), Some(Body::Jupiter));
        assert_eq!(Body::from_name("vulcan"), None);
    }

    #[test]
    fn out_of_range_message_names_body_epoch_and_span() {
        let e = EphemerisError::OutOfRange {
            ephemeris: "test".into(),
            body: "jupiter".into(),
            t_tdb_days: 20_000.0,
            covered_tdb_days: (0.0, 365.25),
        };
        let text = e.to_string();
        assert!(text.contains("jupiter") && text.contains("2000-01-01") && text.contains("2054-"), "{text}");
    }
}
