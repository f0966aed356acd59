//! # Latens
//!
//! Latens takes the astrometric observations of a tracked body, fits its orbit
//! under the Sun and the known planets, and decides whether the leftover drift
//! (the O-C residuals) means an unseen mass is pulling on it; if so, it fits
//! that perturber and says where on the sky to look.
//!
//! Modules, in pipeline order (see `docs/architecture.md`):
//! - [`units`], [`vec3`]: constants with their sources; a small 3-vector.
//! - [`time`]: UTC/TT/TDB and the parsing of times people write.
//! - [`frames`]: ICRF and ecliptic axes, directions on the sky.
//! - [`ephemeris`]: where the planets are (embedded VSOP87A, JPL SPK files).
//! - [`dynamics`]: orbits: two-body motion, the N-body force model, the
//!   integrator, propagation with variational equations.
//! - [`fit`]: Levenberg-Marquardt least squares (knows nothing of orbits).
//! - [`reference`]: the reference orbit fit and its O-C residuals.
//! - [`perturber`]: the perturber search (linearised kernel, grid, detection).
//! - [`posterior`]: the perturber's posterior (tempered ensemble MCMC), the
//!   evidence and the alternative explanations.
//! - [`skymap`]: the search products on the sky: HEALPix probability map,
//!   credible regions as MOCs, modes, brightness and observability.
//! - [`astrometry`]: the observation model (light time, observing sites).
//! - [`io`]: reading observations, writing output files safely.
//! - [`pipeline`]: the job as typed stages on one [`pipeline::Study`].
//! - [`progress`]: the [`progress::Observer`] a caller passes to long stages
//!   (progress, stop requests).
//! - [`simulate`]: simulated survey astrometry with seeded noise.
//!
//! This crate prints nothing and has no command-line, terminal or signal
//! dependencies; charts are the `latens-charts` crate and the command line
//! is the `latens` binary (the workspace's root package).

pub mod astrometry;
pub mod dynamics;
pub mod ephemeris;
pub mod fit;
pub mod frames;
pub mod io;
pub mod perturber;
pub mod pipeline;
pub mod posterior;
pub mod progress;
pub mod reference;
pub mod simulate;
pub mod skymap;
pub mod stats;
pub mod time;
pub mod units;
pub mod vec3;
