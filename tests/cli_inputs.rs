//! `latens residuals` on bad input: every case exits with status 2, names
//! the file, the line and the field, and writes nothing. Accepted oddities
//! (byte-order mark, CRLF line ends, unsorted rows) are checked to work.

use std::path::{Path, PathBuf};
use std::process::Command;

fn latens() -> Command {
    Command::new(env!("CARGO_BIN_EXE_latens"))
}

struct Case {
    dir: PathBuf,
}

impl Case {
    fn new(name: &str) -> Case {
        let dir = std::env::temp_dir().join(format!("latens-input-{name}-{}", std::process::id()));
        let _ = std::fs::remove_dir_all(&dir);
        std::fs::create_dir_all(&dir).unwrap();
        Case { dir }
    }

    fn file(&self, name: &str, bytes: &[u8]) -> PathBuf {
        let p = self.dir.join(name);
        std::fs::write(&p, bytes).unwrap();
        p
    }

    /// Runs `latens residuals` and returns (exit code, stderr).
    fn run(&self, obs: &Path, extra: &[&str]) -> (Option<i32>, String) {
        let out = latens()
            .arg("residuals")
            .arg("--obs")
            .arg(obs)
            .arg("--out")
            .arg(self.dir.join("out"))
            .args(extra)
            .output()
            .unwrap();
        (out.status.code(), String::from_utf8_lossy(&out.stderr).into_owned())
    }

    fn nothing_written(&self) -> bool {
        !self.dir.join("out").exists()
    }
}

impl Drop for Case {
    fn drop(&mut self) {
        let _ = std::fs::remove_dir_all(&self.dir);
    }
}

const HEADER: &str = "epoch_utc,ra_deg,dec_deg,sigma_ra_arcsec,sigma_dec_arcsec\n";

fn good_rows() -> String {
    [
        "2020-01-10T03:00:00Z,52.40,16.70,0.1,0.1",
        "2020-02-10T03:00:00Z,52.30,16.72,0.1,0.1",
        "2020-03-10T03:00:00Z,52.25,16.75,0.1,0.1",
        "2020-04-10T03:00:00Z,52.20,16.78,0.1,0.1",
    ]
    .join("\n")
}

/// Replaces the value of `field` on data row `row` (0-based) of the good file.
fn with_field(row: usize, field: usize, value: &str) -> String {
    let mut lines: Vec<String> = good_rows().lines().map(String::from).collect();
    let mut f: Vec<String> = lines[row].split(',').map(String::from).collect();
    f[field] = value.to_string();
    lines[row] = f.join(",");
    format!("{HEADER}{}\n", lines.join("\n"))
}

#[track_caller]
fn expect_bad(name: &str, contents: &str, extra: &[&str], needles: &[&str]) {
    let case = Case::new(name);
    let obs = case.file("obs.csv", contents.as_bytes());
    let (code, err) = case.run(&obs, extra);
    assert_eq!(code, Some(2), "{name}: exit {code:?}, stderr: {err}");
    assert!(
        err.contains("obs.csv") || needles.iter().any(|n| n.starts_with("!")),
        "{name}: the file is not named: {err}"
    );
    for n in needles {
        let n = n.trim_start_matches('!');
        assert!(err.contains(n), "{name}: `{n}` not in: {err}");
    }
    assert!(case.nothing_written(), "{name}: something was written");
}

#[test]
fn missing_required_column() {
    let text = "epoch_utc,ra_deg,dec_deg,sigma_ra_arcsec\n2020-01-10T03:00:00Z,52.4,16.7,0.1\n";
    expect_bad("missing-column", text, &[], &["obs.csv:1", "sigma_dec_arcsec", "missing"]);
}

#[test]
fn unknown_column() {
    let text = format!(
        "epoch_utc,ra_deg,dec_deg,sigma_ra_arcsec,sigma_dec_arcsec,magnitude\n{}\n",
        good_rows().replace('\n', ",19.5\n") + ",19.5"
    );
    expect_bad("unknown-column", &text, &[], &["obs.csv:1", "magnitude", "unknown column"]);
}

#[test]
fn non_numeric_value() {
    expect_bad("non-numeric", &with_field(1, 1, "52.3x"), &[], &["obs.csv:3", "ra_deg", "not a number"]);
}

#[test]
fn non_finite_value() {
    expect_bad("non-finite", &with_field(2, 2, "NaN"), &[], &["obs.csv:4", "dec_deg", "not a finite number"]);
    expect_bad("infinite", &with_field(2, 3, "inf"), &[], &["obs.csv:4", "sigma_ra_arcsec"]);
}

#[test]
fn ra_out_of_range() {
    expect_bad("ra-360", &with_field(0, 1, "360.0"), &[], &["obs.csv:2", "ra_deg", "[0, 360)"]);
    expect_bad("ra-negative", &with_field(0, 1, "-0.5"), &[], &["obs.csv:2", "ra_deg"]);
}

#[test]
fn dec_out_of_range() {
    expect_bad("dec", &with_field(3, 2, "90.5"), &[], &["obs.csv:5", "dec_deg", "[-90, 90]"]);
}

#[test]
fn sigma_not_positive() {
    expect_bad("sigma-zero", &with_field(1, 3, "0"), &[], &["obs.csv:3", "sigma_ra_arcsec", "positive"]);
    expect_bad("sigma-negative", &with_field(1, 4, "-0.1"), &[], &["obs.csv:3", "sigma_dec_arcsec", "positive"]);
}

#[test]
fn unparseable_and_impossible_dates() {
    expect_bad("date-text", &with_field(0, 0, "yesterday"), &[], &["obs.csv:2", "epoch_utc"]);
    expect_bad(
        "date-impossible",
        &with_field(0, 0, "2021-02-29T00:00:00Z"),
        &[],
        &["obs.csv:2", "epoch_utc", "does not exist"],
    );
}

#[test]
fn epoch_outside_the_ephemeris() {
    // The test excerpt of DE421 covers 2000-2025.
    let spk = PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("tests/data/de421/excerpt.bsp");
    let contents = with_field(3, 0, "2031-01-01T00:00:00Z");
    expect_bad("coverage", &contents, &["--ephemeris", spk.to_str().unwrap()], &["obs.csv:5", "epoch_utc", "covers"]);
}

#[test]
fn unknown_site() {
    let text = with_field(0, 0, "2020-01-10T03:00:00Z")
        .replace("sigma_dec_arcsec\n", "sigma_dec_arcsec,site\n")
        .lines()
        .enumerate()
        .map(|(i, l)| {
            if i == 0 {
                l.to_string()
            } else if i == 2 {
                format!("{l},nowhere")
            } else {
                format!("{l},geocenter")
            }
        })
        .collect::<Vec<_>>()
        .join("\n");
    expect_bad("site", &text, &[], &["obs.csv:3", "site", "unknown site `nowhere`"]);
}

#[test]
fn duplicate_rows() {
    let mut text = with_field(0, 0, "2020-01-10T03:00:00Z");
    text.push_str("2020-02-10T03:00:00Z,52.31,16.72,0.1,0.1\n");
    expect_bad("duplicate", &text, &[], &["obs.csv:6", "duplicates the observation on line 3"]);
}

#[test]
fn too_few_observations() {
    let text = format!("{HEADER}2020-01-10T03:00:00Z,52.40,16.70,0.1,0.1\n2020-02-10T03:00:00Z,52.30,16.72,0.1,0.1\n");
    expect_bad("few", &text, &[], &["obs.csv", "at least 3"]);
}

#[test]
fn empty_file() {
    expect_bad("empty", "", &[], &["obs.csv", "no header"]);
    expect_bad("comments-only", "# nothing here\n\n", &[], &["obs.csv", "no header"]);
}

#[test]
fn wrong_field_count() {
    let text = format!("{HEADER}2020-01-10T03:00:00Z,52.40,16.70,0.1\n");
    expect_bad("fields", &text, &[], &["obs.csv:2", "4 fields where the header has 5"]);
}

#[test]
fn bad_correlation() {
    let text = with_field(0, 0, "2020-01-10T03:00:00Z")
        .replace("sigma_dec_arcsec\n", "sigma_dec_arcsec,corr\n")
        .lines()
        .enumerate()
        .map(|(i, l)| {
            if i == 0 {
                l.to_string()
            } else if i == 1 {
                format!("{l},1.0")
            } else {
                format!("{l},0.2")
            }
        })
        .collect::<Vec<_>>()
        .join("\n");
    expect_bad("corr", &text, &[], &["obs.csv:2", "corr", "between -1 and 1"]);
}

#[test]
fn unknown_known_body_and_bad_epoch_option() {
    let contents = with_field(0, 0, "2020-01-10T03:00:00Z");
    expect_bad("known", &contents, &["--known", "jupiter,vulcan"], &["!vulcan"]);
    expect_bad("epoch-option", &contents, &["--epoch", "JD 2459000.5"], &["!--epoch", "!time scale"]);
}

#[test]
fn bom_crlf_and_unsorted_rows_are_accepted() {
    // A BOM, CRLF line ends and rows out of time order are all fine: the
    // file reaches the fit (which, on these invented positions, runs and
    // writes its products).
    let case = Case::new("accepted");
    let good = good_rows();
    let mut rows: Vec<&str> = good.lines().collect();
    rows.reverse();
    let text = format!("\u{feff}# a comment\r\n{}{}\r\n", HEADER.replace('\n', "\r\n"), rows.join("\r\n"));
    let obs = case.file("obs.csv", text.as_bytes());
    let (code, err) = case.run(&obs, &["--known", "none"]);
    assert_ne!(code, Some(2), "refused: {err}");
    let original = std::fs::read(&obs).unwrap();
    assert_eq!(original, text.as_bytes(), "the input was modified");
}

#[test]
fn ades_psv_is_read_like_the_csv() {
    // The same four observations in the IAU ADES pipe-separated form: rmsRA
    // is already the uncertainty of RA*cos(Dec) (ADES convention), in arcsec.
    let case = Case::new("ades");
    let psv = "# version=2017\n# observatory\n! mpcCode 500\n\
               permID |obsTime                 |ra        |dec      |rmsRA|rmsDec|stn\n\
               x      |2020-01-10T03:00:00Z    |52.40     |16.70    |0.1  |0.1   |geocenter\n\
               x      |2020-02-10T03:00:00Z    |52.30     |16.72    |0.1  |0.1   |geocenter\n\
               x      |2020-03-10T03:00:00Z    |52.25     |16.75    |0.1  |0.1   |geocenter\n\
               x      |2020-04-10T03:00:00Z    |52.20     |16.78    |0.1  |0.1   |geocenter\n";
    let sites = latens::io::observations::SiteTable::new();
    let csv = case.file("obs.csv", format!("{HEADER}{}\n", good_rows()).as_bytes());
    let from_csv = latens::io::observations::read_observations(&csv, &sites, 3).unwrap();
    // Lines starting with `#` or `!` before the header are ADES metadata.
    let ades = case.file("obs.psv", psv.as_bytes());
    let from_psv = latens::io::observations::read_observations(&ades, &sites, 3).unwrap();
    assert_eq!(from_csv.len(), from_psv.len());
    for (a, b) in from_csv.iter().zip(&from_psv) {
        assert_eq!(
            (a.epoch, a.ra_rad, a.dec_rad, a.sigma_ra_arcsec),
            (b.epoch, b.ra_rad, b.dec_rad, b.sigma_ra_arcsec)
        );
    }
    // An ADES file with `permID` etc. but no rmsDec is refused by name.
    let bad = case.file("bad.psv", b"permID|obsTime|ra|dec|rmsRA\nx|2020-01-10T03:00:00Z|52.4|16.7|0.1\n");
    let err = latens::io::observations::read_observations(&bad, &sites, 1).unwrap_err().to_string();
    assert!(err.contains("bad.psv:1") && err.contains("rmsDec"), "{err}");
}

#[test]
fn bad_scenarios_and_bad_infer_options_name_what_is_wrong() {
    // A scenario with a misspelt key, and one with an impossible value:
    // exit 2, the file and the key named, nothing written.
    let case = Case::new("scenario");
    let good = std::fs::read_to_string(concat!(env!("CARGO_MANIFEST_DIR"), "/scenarios/demo.toml")).unwrap();
    for (name, text, needle) in [
        ("typo.toml", good.replace("sigma_arcsec", "sigma_arcsecs"), "sigma_arcsecs"),
        ("ecc.toml", good.replacen("e = 0.12", "e = 1.3", 1), "tracked.e"),
    ] {
        let path = case.file(name, text.as_bytes());
        let out = latens().arg("simulate").arg(&path).arg("--out").arg(case.dir.join("out")).output().unwrap();
        let err = String::from_utf8_lossy(&out.stderr);
        assert_eq!(out.status.code(), Some(2), "{name}: {err}");
        assert!(err.contains(name) && err.contains(needle), "{name}: {err}");
        assert!(case.nothing_written(), "{name}: something was written");
    }
    // A prior width of zero is refused before any work.
    let obs = case.file("obs.csv", format!("{HEADER}{}\n", good_rows()).as_bytes());
    let out = latens()
        .args(["infer", "--obs"])
        .arg(&obs)
        .args(["--nongrav-prior", "0", "--out"])
        .arg(case.dir.join("out"))
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&out.stderr).contains("--nongrav-prior"));
    assert!(case.nothing_written());
}

#[test]
fn bad_tracked_body_and_outlier_options_are_refused_before_any_work() {
    let contents = format!("{HEADER}{}\n", good_rows());
    expect_bad("tracked-mass", &contents, &["--tracked-mass", "vulcan"], &["!--tracked-mass", "!vulcan"]);
    expect_bad("kind", &contents, &["--kind", "asteroidish"], &["!--kind", "!asteroidish"]);
    // A tracked planet cannot also pull on itself as a known body.
    expect_bad("self", &contents, &["--tracked-mass", "jupiter", "--known", "jupiter,saturn"], &["!--known"]);
    let case = Case::new("infer-outliers");
    let obs = case.file("obs.csv", contents.as_bytes());
    for (extra, needle) in [
        (["--reject-sigma", "1"], "--reject-sigma"),
        (["--reject-sigma", "lots"], "--reject-sigma"),
        (["--exclude", "99"], "line 99 of"),
        (["--exclude", "3-2"], "--exclude"),
    ] {
        let out = latens()
            .args(["infer", "--obs"])
            .arg(&obs)
            .args(extra)
            .arg("--out")
            .arg(case.dir.join("out"))
            .output()
            .unwrap();
        let err = String::from_utf8_lossy(&out.stderr);
        assert_eq!(out.status.code(), Some(2), "{extra:?}: {err}");
        assert!(err.contains(needle), "{extra:?}: {err}");
        assert!(case.nothing_written(), "{extra:?}: something was written");
    }
}
