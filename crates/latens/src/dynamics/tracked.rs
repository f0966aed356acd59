//! What the tracked body is: its own mass and its kind.
//!
//! The mass enters the force model (see [`super::ForceModel`]); the kind
//! decides which alternative explanations of drifting residuals are
//! physically possible (a planet does not outgas; a comet does).

use crate::ephemeris::Body;

/// The kind of a tracked body.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum BodyKind {
    /// A major planet.
    Planet,
    /// A dwarf planet (Pluto, Eris, ...): hundreds of km or more, no
    /// measurable outgassing or thermal recoil at its distance.
    DwarfPlanet,
    /// An asteroid or a distant minor body: thermal recoil (Yarkovsky) is
    /// possible, outgassing is not assumed.
    SmallBody,
    /// A comet: outgassing accelerations are expected.
    Comet,
}

impl BodyKind {
    pub const ALL: [BodyKind; 4] = [BodyKind::Planet, BodyKind::DwarfPlanet, BodyKind::SmallBody, BodyKind::Comet];

    /// The name used on the command line and in files.
    pub fn name(self) -> &'static str {
        match self {
            BodyKind::Planet => "planet",
            BodyKind::DwarfPlanet => "dwarf-planet",
            BodyKind::SmallBody => "small-body",
            BodyKind::Comet => "comet",
        }
    }

    pub fn from_name(text: &str) -> Option<BodyKind> {
        let t = text.trim().to_ascii_lowercase().replace('_', "-");
        BodyKind::ALL.into_iter().find(|k| k.name() == t)
    }
}

/// The tracked body: its GM and kind, and where the GM came from.
#[derive(Clone, Debug, PartialEq)]
pub struct TrackedBody {
    pub gm_au3_per_day2: f64,
    pub kind: BodyKind,
    /// The planet whose GM this is, when it was given by name.
    pub named: Option<Body>,
}

impl TrackedBody {
    /// A massless small body (the default when nothing is said).
    pub fn massless() -> Self {
        TrackedBody { gm_au3_per_day2: 0.0, kind: BodyKind::SmallBody, named: None }
    }

    /// The mass in Earth masses.
    pub fn mass_earth(&self) -> f64 {
        self.gm_au3_per_day2 / crate::units::GM_EARTH_MASS_AU3_PER_DAY2
    }

    /// From the `--tracked-mass` and `--kind` texts. The mass is a body name
    /// (its GM from the constants, see [`Body::gm_au3_per_day2`]) or a number
    /// of Earth masses (0 for a test body). Without a kind, a named planet is
    /// a planet, Pluto a dwarf planet, anything else a small body.
    pub fn parse(mass: &str, kind: Option<&str>) -> Result<TrackedBody, String> {
        let text = mass.trim();
        let (gm, named) = if let Some(body) = Body::from_name(text) {
            if body == Body::Sun {
                return Err("--tracked-mass: the tracked body cannot be the Sun".into());
            }
            (body.gm_au3_per_day2(), Some(body))
        } else {
            let earth: f64 = text.parse().map_err(|_| {
                format!(
                    "--tracked-mass: expected a body name ({}) or a mass in Earth masses, got `{text}`",
                    Body::ALL.iter().filter(|b| **b != Body::Sun).map(|b| b.name()).collect::<Vec<_>>().join(", ")
                )
            })?;
            if !(earth.is_finite() && (0.0..=1000.0).contains(&earth)) {
                return Err(format!(
                    "--tracked-mass: {earth} Earth masses is outside 0 to 1000 (a tracked body heavier than that is not a \
                     tracer of an unseen mass)"
                ));
            }
            (earth * crate::units::GM_EARTH_MASS_AU3_PER_DAY2, None)
        };
        let kind = match kind {
            Some(k) => BodyKind::from_name(k).ok_or_else(|| {
                format!(
                    "--kind: expected one of {}, got `{k}`",
                    BodyKind::ALL.iter().map(|k| k.name()).collect::<Vec<_>>().join(", ")
                )
            })?,
            None => match named {
                Some(Body::Pluto) => BodyKind::DwarfPlanet,
                Some(Body::Moon) => BodyKind::DwarfPlanet,
                Some(_) => BodyKind::Planet,
                None => BodyKind::SmallBody,
            },
        };
        Ok(TrackedBody { gm_au3_per_day2: gm, kind, named })
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn planet_names_give_their_gm_and_kind() {
        let t = TrackedBody::parse("Uranus", None).unwrap();
        assert_eq!(t.kind, BodyKind::Planet);
        assert_eq!(t.gm_au3_per_day2, Body::Uranus.gm_au3_per_day2());
        // Uranus is 14.5 Earth masses (a fact of the trade).
        assert!((t.mass_earth() - 14.54).abs() < 0.05, "{}", t.mass_earth());
        assert_eq!(TrackedBody::parse("pluto", None).unwrap().kind, BodyKind::DwarfPlanet);
        let c = TrackedBody::parse("0", Some("comet")).unwrap();
        assert_eq!((c.gm_au3_per_day2, c.kind), (0.0, BodyKind::Comet));
        assert!(TrackedBody::parse("-1", None).is_err());
        assert!(TrackedBody::parse("sun", None).is_err());
        assert!(TrackedBody::parse("2", Some("asteroidish")).is_err());
        assert_eq!(TrackedBody::parse("0.002", Some("dwarf_planet")).unwrap().kind, BodyKind::DwarfPlanet);
    }
}
