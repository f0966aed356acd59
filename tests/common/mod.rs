//! Helpers shared by the reference tests: fixture loading and comparisons with
//! tolerances in named units.
#![allow(dead_code)]

use std::collections::HashMap;
use std::path::PathBuf;

pub const MICROSECOND: f64 = 1e-6;
/// One metre in au (IAU 2012 au).
pub const METRE_AU: f64 = 1.0 / 149_597_870_700.0;
pub const ARCSEC_RAD: f64 = std::f64::consts::PI / 180.0 / 3600.0;
pub const MAS_RAD: f64 = ARCSEC_RAD / 1000.0;

pub fn data_path(rel: &str) -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("tests/data").join(rel)
}

/// Rows of a plain comma-separated fixture (no quoting), keyed by header.
pub fn read_rows(rel: &str) -> Vec<HashMap<String, String>> {
    let text = std::fs::read_to_string(data_path(rel)).unwrap_or_else(|e| panic!("{rel}: {e}"));
    let mut lines = text.lines().filter(|l| !l.trim().is_empty());
    let header: Vec<String> = lines.next().expect("header").split(',').map(|s| s.trim().to_string()).collect();
    lines.map(|l| header.iter().cloned().zip(l.split(',').map(|s| s.trim().to_string())).collect()).collect()
}

pub fn num(row: &HashMap<String, String>, key: &str) -> f64 {
    row.get(key).unwrap_or_else(|| panic!("no column {key}")).parse().unwrap_or_else(|e| panic!("{key}: {e}"))
}

/// Asserts |got - want| <= tol and says both values and the unit otherwise.
#[track_caller]
pub fn compare(what: &str, got: f64, want: f64, tol: f64, unit: &str) {
    let d = (got - want).abs();
    assert!(d <= tol, "{what}: got {got}, expected {want}: off by {d:e} {unit} (tolerance {tol:e} {unit})");
}

/// Like [`read_rows`] but skipping `#` comment lines before the header.
pub fn read_rows_skipping_comments(rel: &str) -> Vec<HashMap<String, String>> {
    let text = std::fs::read_to_string(data_path(rel)).unwrap_or_else(|e| panic!("{rel}: {e}"));
    let mut lines = text.lines().filter(|l| !l.trim().is_empty() && !l.starts_with('#'));
    let header: Vec<String> = lines.next().expect("header").split(',').map(|s| s.trim().to_string()).collect();
    lines.map(|l| header.iter().cloned().zip(l.split(',').map(|s| s.trim().to_string())).collect()).collect()
}
