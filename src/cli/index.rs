//! `outputs.json`: a machine-readable index of what a run wrote, so that
//! scripts need not guess file names. After a command succeeds, every file
//! under its output directory written during the run is listed with what it
//! is and its format; the formats are those of docs/formats.md at
//! [`SCHEMA_VERSION`]. A later command writing into the same directory
//! (`latens predict` into an `infer` directory) adds its own record; a
//! command run again replaces its old one.

use std::path::{Path, PathBuf};
use std::time::SystemTime;

use serde::{Deserialize, Serialize};

use latens::io::write_atomically;

/// The version of the output formats (docs/formats.md); raised when a
/// column or key changes meaning or disappears.
pub const SCHEMA_VERSION: u32 = 1;

/// The index's file name.
pub const INDEX: &str = "outputs.json";

/// What each output file is, by name (`*` matches one path segment's
/// variable part: a body's directory, a shard's numbers).
const CATALOGUE: &[(&str, &str)] = &[
    ("observations.csv", "astrometric observations (Latens CSV): input of residuals, infer and sensitivity"),
    ("sites.csv", "observing sites: name, geodetic longitude, latitude, height"),
    ("truth.json", "what the simulation put in: the true orbits and the hidden perturber's true place"),
    ("track.csv", "the tracked body's monthly geocentric track and the planets' shift of it"),
    ("bodies/*.csv", "one tracked body's simulated observations (Latens CSV)"),
    ("fit.json", "the reference orbit (no perturber): elements, state, covariance, chi-square, trend"),
    ("residuals.csv", "O-C of every observation against the reference orbit, with sigmas and use"),
    ("residuals.png", "chart of the O-C residuals"),
    ("residuals.svg", "chart of the O-C residuals (vector)"),
    (
        "summary.json",
        "the verdict, the best solution and basins, the posterior summary, evidence, alternatives, sky summary, settings, seed",
    ),
    ("null_fit.json", "the reference orbit (no perturber) the search started from"),
    ("residuals_null_vs_best.png", "O-C of the null model and of the best perturber solution, side by side"),
    ("residuals_null_vs_best.svg", "O-C of the null model and of the best perturber solution (vector)"),
    ("posterior.csv", "equally weighted posterior samples: mass, elements, sky position at the search epoch"),
    ("posterior_corner.png", "the posterior of mass, distance and sky position, pair by pair"),
    ("posterior_corner.svg", "the posterior, pair by pair (vector)"),
    ("posterior_trace.png", "the walkers' paths through the sampler's steps"),
    ("posterior_trace.svg", "the walkers' paths (vector)"),
    ("skymap.fits", "the posterior's multi-order HEALPix sky map (UNIQ, PROBDENSITY per sr)"),
    ("region50.fits", "the 50% credible region on the sky as an IVOA MOC (FITS)"),
    ("region90.fits", "the 90% credible region on the sky as an IVOA MOC (FITS)"),
    ("region50.json", "the 50% credible region as an IVOA MOC (JSON)"),
    ("region90.json", "the 90% credible region as an IVOA MOC (JSON)"),
    ("confidence50.fits", "the 50% confidence region (profile likelihood, no prior volume) as an IVOA MOC (FITS)"),
    ("confidence90.fits", "the 90% confidence region (profile likelihood, no prior volume) as an IVOA MOC (FITS)"),
    ("confidence50.json", "the 50% confidence region as an IVOA MOC (JSON)"),
    ("confidence90.json", "the 90% confidence region as an IVOA MOC (JSON)"),
    ("modes.csv", "each sky mode: centre, areas, distances, brightness, motion, when observable"),
    ("search_chart.png", "where to point: the whole sky and a zoom on each major mode"),
    ("search_chart.svg", "where to point (vector)"),
    ("bodies.csv", "a joint study's bodies: each one's part of the detection, its search alone, its orbit correction"),
    ("bodies/*/fit.json", "one body's reference orbit in a joint study"),
    ("bodies/*/residuals.csv", "one body's O-C in a joint study"),
    ("bodies/*/residuals.png", "chart of one body's O-C"),
    ("bodies/*/residuals.svg", "chart of one body's O-C (vector)"),
    ("residuals_overview.png", "every body's O-C on one page, a row per body with its chi2/dof and RMS"),
    ("residuals_overview.svg", "every body's O-C on one page (vector)"),
    ("sensitivity.csv", "detection probability per perturber mass and distance"),
    ("sensitivity.json", "the sensitivity map's settings and detection threshold"),
    ("sensitivity.png", "chart of the detection probability with the 50%/90% and 95% exclusion curves"),
    ("sensitivity.svg", "chart of the detection probability (vector)"),
    ("sensitivity_sky.csv", "the mass detected with 50%/90% probability per distance and HEALPix cell of the sky"),
    ("sensitivity_sky.png", "chart of where on the sky a perturber would be detected, at three distances"),
    ("sensitivity_sky.svg", "chart of where on the sky a perturber would be detected (vector)"),
    ("sensitivity.part-*.csv", "one shard of the sensitivity map: each trial's signal amplitude per Earth mass"),
    ("sensitivity.part-*.json", "one shard's settings, hypotheses, distances and null-simulation maxima"),
    ("sensitivity_sky.part-*.csv", "one shard of the sky map: each trial's cell and signal amplitude"),
    ("predict.csv", "each sky mode's place date by date, with error ellipse, brightness, motion, solar elongation"),
];

/// One file of a run.
#[derive(Debug, Serialize, Deserialize, Clone, PartialEq)]
pub struct IndexedFile {
    /// Path relative to the indexed directory, `/`-separated.
    pub file: String,
    /// csv, json, fits, png, svg.
    pub format: String,
    pub what: String,
}

/// What one command wrote.
#[derive(Debug, Serialize, Deserialize, Clone, PartialEq)]
pub struct RunRecord {
    pub command: String,
    pub finished_utc: String,
    pub files: Vec<IndexedFile>,
}

/// `outputs.json`.
#[derive(Debug, Serialize, Deserialize, Clone, PartialEq)]
pub struct OutputIndex {
    pub schema_version: u32,
    pub latens_version: String,
    pub runs: Vec<RunRecord>,
}

/// What the catalogue says of a relative path (None: not a Latens output).
fn describe(relative: &str) -> Option<&'static str> {
    let in_subdir = |pattern: &str| {
        // A file of the demo's subdirectories is described by its name,
        // and a population's body files by the last two segments.
        relative == pattern || relative.ends_with(&format!("/{pattern}"))
    };
    CATALOGUE.iter().find(|(pattern, _)| matches(pattern, relative) || in_subdir(pattern)).map(|(_, what)| *what)
}

/// `pattern` against `path`, segment by segment; `*` in a segment matches
/// any text there.
fn matches(pattern: &str, path: &str) -> bool {
    let (p, s): (Vec<&str>, Vec<&str>) = (pattern.split('/').collect(), path.split('/').collect());
    if p.len() > s.len() {
        return false;
    }
    let s = &s[s.len() - p.len()..];
    p.iter().zip(s).all(|(p, s)| match p.split_once('*') {
        Some((a, b)) => s.len() >= a.len() + b.len() && s.starts_with(a) && s.ends_with(b),
        None => p == s,
    })
}

/// Every file under `dir` modified at or after `since`, relative.
fn written_since(dir: &Path, since: SystemTime) -> Vec<PathBuf> {
    let mut out = Vec::new();
    let mut stack = vec![dir.to_path_buf()];
    while let Some(d) = stack.pop() {
        let Ok(entries) = std::fs::read_dir(&d) else { continue };
        for e in entries.flatten() {
            let path = e.path();
            let Ok(meta) = e.metadata() else { continue };
            if meta.is_dir() {
                stack.push(path);
            } else if meta.is_file()
                && meta.modified().is_ok_and(|m| m >= since)
                && let Ok(rel) = path.strip_prefix(dir)
            {
                out.push(rel.to_path_buf());
            }
        }
    }
    out.sort();
    out
}

/// Writes (or updates) `dir/outputs.json` with what `command` wrote there
/// since `started`: files the catalogue knows, with their descriptions.
pub fn write_index(dir: &Path, command: &str, started: SystemTime) -> anyhow::Result<Option<RunRecord>> {
    if !dir.is_dir() {
        return Ok(None);
    }
    let files: Vec<IndexedFile> = written_since(dir, started)
        .into_iter()
        .filter_map(|rel| {
            let text = rel.to_string_lossy().replace('\\', "/");
            if text == INDEX || text.contains(".tmp") {
                return None;
            }
            let what = describe(&text)?;
            let format = rel.extension().map_or(String::new(), |x| x.to_string_lossy().to_lowercase());
            Some(IndexedFile { file: text, format, what: what.to_string() })
        })
        .collect();
    let path = dir.join(INDEX);
    let mut index = std::fs::read_to_string(&path)
        .ok()
        .and_then(|t| serde_json::from_str::<OutputIndex>(&t).ok())
        .filter(|i| i.schema_version == SCHEMA_VERSION)
        .unwrap_or(OutputIndex {
            schema_version: SCHEMA_VERSION,
            latens_version: env!("CARGO_PKG_VERSION").to_string(),
            runs: Vec::new(),
        });
    // Another command's record stays, without files since rewritten or gone.
    let rewritten: Vec<&str> = files.iter().map(|f| f.file.as_str()).collect();
    index.runs.retain(|r| r.command != command);
    for r in &mut index.runs {
        r.files.retain(|f| !rewritten.contains(&f.file.as_str()) && dir.join(&f.file).is_file());
    }
    index.runs.retain(|r| !r.files.is_empty());
    let finished = latens::time::utc_iso_from_epoch(
        hifitime::Epoch::now().map_err(|e| anyhow::anyhow!("reading the clock: {e}"))?,
    );
    let record = RunRecord { command: command.to_string(), finished_utc: finished, files };
    index.runs.push(record.clone());
    index.latens_version = env!("CARGO_PKG_VERSION").to_string();
    let json = serde_json::to_string_pretty(&index)? + "\n";
    write_atomically(&path, json.as_bytes())?;
    Ok(Some(record))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn patterns_match_by_segment() {
        assert!(matches("bodies/*/fit.json", "bodies/Arvel/fit.json"));
        assert!(matches("bodies/*/fit.json", "population/search/bodies/Arvel/fit.json"));
        assert!(!matches("bodies/*/fit.json", "bodies/fit.json"));
        assert!(matches("sensitivity.part-*.csv", "sensitivity.part-2-of-4.csv"));
        assert!(!matches("sensitivity.part-*.csv", "sensitivity.csv"));
        assert!(matches("bodies/*.csv", "population/bodies/Irvo.csv"));
    }

    #[test]
    fn every_catalogued_name_is_described_and_unknown_files_are_not() {
        assert!(describe("search/skymap.fits").is_some());
        assert!(describe("fit.json").is_some());
        assert!(describe("notes.txt").is_none());
        assert!(describe("checkpoint.json").is_none());
    }
}
