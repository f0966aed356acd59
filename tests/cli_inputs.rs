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
        let (code, _, err) = self.run_with_output(obs, extra);
        (code, err)
    }

    /// `latens residuals`: exit code, standard output, standard error.
    fn run_with_output(&self, obs: &Path, extra: &[&str]) -> (Option<i32>, String, String) {
        let out = latens()
            .arg("residuals")
            .arg("--obs")
            .arg(obs)
            .arg("--out")
            .arg(self.dir.join("out"))
            .args(extra)
            .output()
            .unwrap();
        (
            out.status.code(),
            String::from_utf8_lossy(&out.stdout).into_owned(),
            String::from_utf8_lossy(&out.stderr).into_owned(),
        )
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
fn unknown_columns_are_kept_aside_with_a_note() {
    let text = format!(
        "epoch_utc,ra_deg,dec_deg,sigma_ra_arcsec,sigma_dec_arcsec,magnitude\n{}\n",
        good_rows().replace('\n', ",19.5\n") + ",19.5"
    );
    let case = Case::new("unknown-column");
    let obs = case.file("obs.csv", text.as_bytes());
    let (code, err) = case.run(&obs, &["--known", "none"]);
    assert_ne!(code, Some(2), "refused: {err}");
    assert!(err.contains("note: ") && err.contains("obs.csv:1") && err.contains("`magnitude`"), "{err}");
    // The same observations as without the column.
    let sites = latens::io::observations::SiteTable::new();
    let plain = case.file("plain.csv", format!("{HEADER}{}\n", good_rows()).as_bytes());
    let read = |p: &Path| latens::io::observations::read_observations(p, &sites, 3).unwrap();
    let strip = |v: Vec<latens::io::observations::Observation>| {
        v.into_iter().map(|o| (o.t_tdb_days, o.ra_rad, o.dec_rad, o.sigma_ra_arcsec)).collect::<Vec<_>>()
    };
    assert_eq!(strip(read(&obs)), strip(read(&plain)));
}

#[test]
fn quoted_fields_are_unquoted() {
    // RFC 4180 quoting, as spreadsheets write it.
    let case = Case::new("quoted");
    let quote = |l: &str| l.split(',').map(|f| format!("\"{f}\"")).collect::<Vec<_>>().join(",");
    let text: Vec<String> = format!("{HEADER}{}", good_rows()).lines().map(quote).collect();
    let quoted = case.file("quoted.csv", (text.join("\n") + "\n").as_bytes());
    let plain = case.file("plain.csv", format!("{HEADER}{}\n", good_rows()).as_bytes());
    let sites = latens::io::observations::SiteTable::new();
    let a = latens::io::observations::read_observations(&quoted, &sites, 3).unwrap();
    let b = latens::io::observations::read_observations(&plain, &sites, 3).unwrap();
    assert_eq!(a.len(), 4);
    for (x, y) in a.iter().zip(&b) {
        assert_eq!((x.t_tdb_days, x.ra_rad, x.dec_rad, &x.site), (y.t_tdb_days, y.ra_rad, y.dec_rad, &y.site));
        assert_eq!(x.source.rsplit(':').next(), y.source.rsplit(':').next(), "line numbers differ");
    }
}

#[test]
fn another_format_is_named_as_such() {
    let tabs = format!("{HEADER}{}\n", good_rows()).replace(',', "\t");
    expect_bad("tabs", &tabs, &[], &["obs.csv:1", "format not recognised (expected", "tab-separated"]);
    let other = "date,alpha,delta\n2020-01-10,52.4,16.7\n";
    expect_bad("other", other, &[], &["obs.csv:1", "format not recognised (expected", "ADES"]);
}

#[test]
fn a_date_far_from_the_arc_is_warned_about_before_the_fit() {
    // A typo in a year (1650 for 2020) on line 4: a warning naming the
    // line before the fit starts; the run is not refused for it.
    let case = Case::new("far-date");
    let text = format!("{HEADER}{}\n", good_rows()).replace("2020-02-10", "1650-02-10");
    let obs = case.file("obs.csv", text.as_bytes());
    // Read stderr until the warning (it comes before the fit), then stop
    // the run: the fit of such an arc is long and beside the point here.
    let mut child = latens()
        .args(["residuals", "--known", "none", "--obs"])
        .arg(&obs)
        .arg("--out")
        .arg(case.dir.join("out"))
        .stderr(std::process::Stdio::piped())
        .stdout(std::process::Stdio::null())
        .spawn()
        .unwrap();
    let mut err = String::new();
    {
        use std::io::BufRead as _;
        let reader = std::io::BufReader::new(child.stderr.take().unwrap());
        for line in reader.lines().map_while(Result::ok) {
            err.push_str(&line);
            err.push('\n');
            if line.starts_with("warning: ") {
                break;
            }
        }
    }
    let _ = child.kill();
    let _ = child.wait();
    assert!(err.contains("warning: ") && err.contains("obs.csv:3") && err.contains("1650-02-10"), "{err}");
    assert!(err.contains("typing error"), "{err}");
    // A regular arc, or two seasons years apart, gives no warning.
    let sites = latens::io::observations::SiteTable::new();
    let good = case.file("good.csv", format!("{HEADER}{}\n", good_rows()).as_bytes());
    let obs = latens::io::observations::read_observations(&good, &sites, 3).unwrap();
    assert!(latens::io::observations::date_outliers(&obs).is_empty());
    let two =
        format!("{HEADER}{}\n", good_rows()) + &good_rows().replace("2020-", "2031-").replace(",52.", ",58.") + "\n";
    let two = case.file("two.csv", two.as_bytes());
    let obs = latens::io::observations::read_observations(&two, &sites, 3).unwrap();
    assert!(latens::io::observations::date_outliers(&obs).is_empty());
}

#[test]
fn sites_as_parallax_constants_match_astropy() {
    // tests/data/sites/parallax.csv: geodetic latitude and height of places
    // given by rho cos phi', rho sin phi' (WGS84 equatorial radii), from
    // astropy's EarthLocation (tests/data/sites/parallax_astropy.py).
    let text = std::fs::read_to_string(concat!(env!("CARGO_MANIFEST_DIR"), "/tests/data/sites/parallax.csv")).unwrap();
    let mut table = String::from("name,lon_deg,rho_cos_phi,rho_sin_phi\n");
    let mut expected = Vec::new();
    for (k, line) in text.lines().skip(1).enumerate() {
        let f: Vec<f64> = line.split(',').map(|x| x.parse().unwrap()).collect();
        table.push_str(&format!("s{k},10.0,{},{}\n", f[0], f[1]));
        expected.push((format!("s{k}"), f[2], f[3]));
    }
    let sites = latens::io::observations::SiteTable::parse(&table, "sites.csv").unwrap();
    for (name, lat, height) in expected {
        let s = sites.get(&name).unwrap();
        assert!((s.lat_deg - lat).abs() < 1e-9, "{name}: {} vs {lat}", s.lat_deg);
        assert!((s.height_m - height).abs() < 1e-3, "{name}: {} vs {height}", s.height_m);
    }
    // Not a place on the Earth: named by file, line and field.
    let bad =
        latens::io::observations::SiteTable::parse("name,lon_deg,rho_cos_phi,rho_sin_phi\nx,10,0.5,0.1\n", "sites.csv")
            .unwrap_err();
    assert_eq!((bad.line, bad.field.as_deref()), (2, Some("rho_cos_phi")));
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
    // A message about the whole file names no line ("line 0").
    let case = Case::new("empty-line");
    let obs = case.file("obs.csv", b"");
    let (_, err) = case.run(&obs, &[]);
    assert!(!err.contains(":0"), "{err}");
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
fn ades_xml_is_read_like_the_csv() {
    // tests/data/ades/optical.xml: the same four observations in the ADES
    // XML form (written to the published ADES description), with a radar
    // observation that is not a position.
    let case = Case::new("ades-xml");
    let xml_path = PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("tests/data/ades/optical.xml");
    let sites = latens::io::observations::SiteTable::new();
    let csv = case.file("obs.csv", format!("{HEADER}{}\n", good_rows()).as_bytes());
    let from_csv = latens::io::observations::read_observations(&csv, &sites, 3).unwrap();
    let from_xml = latens::io::observations::read_observations(&xml_path, &sites, 3).unwrap();
    assert_eq!(from_xml.len(), 4);
    for (a, b) in from_xml.iter().zip(&from_csv) {
        assert_eq!(
            (a.epoch, a.ra_rad, a.dec_rad, a.sigma_ra_arcsec, a.sigma_dec_arcsec, &a.site),
            (b.epoch, b.ra_rad, b.dec_rad, b.sigma_ra_arcsec, b.sigma_dec_arcsec, &b.site)
        );
    }
    // Each observation is located at its <optical> element's line.
    assert!(from_xml[0].source.ends_with("optical.xml:24"), "{}", from_xml[0].source);
    // The tracklet names the body; the radar observation gets a note.
    let bodies = latens::io::observations::read_bodies(&xml_path, &sites, 3).unwrap();
    assert_eq!(bodies.len(), 1);
    assert_eq!(bodies[0].0.as_deref(), Some("T0001"));
    let notes = latens::io::observations::column_notes(&xml_path);
    assert!(notes.len() == 1 && notes[0].contains("1 observation(s)") && notes[0].contains("radar"), "{notes:?}");
    // A bad value, a missing element, another root and broken XML: named
    // with the file and line.
    let good = std::fs::read_to_string(&xml_path).unwrap();
    for (name, text, needles) in [
        (
            "ra.xml",
            good.replacen("<ra>52.30</ra>", "<ra>52.3x</ra>", 1),
            vec!["ra.xml:37", "field `ra`", "not a number"],
        ),
        ("gone.xml", good.replacen("<rmsDec>0.1</rmsDec>", "", 1), vec!["gone.xml:24", "rmsDec", "missing"]),
        ("root.xml", good.replace("ades", "records"), vec!["root.xml", "format not recognised", "<ades>"]),
        ("broken.xml", good.replacen("</optical>", "</opticl>", 1), vec!["broken.xml:36", "not well-formed XML"]),
    ] {
        let path = case.file(name, text.as_bytes());
        let err = latens::io::observations::read_observations(&path, &sites, 3).unwrap_err().to_string();
        for n in needles {
            assert!(err.contains(n), "{name}: `{n}` not in: {err}");
        }
    }
    // Through the command: the same fit as from the CSV.
    let (code, err) = case.run(&xml_path, &["--known", "none"]);
    assert_ne!(code, Some(2), "refused: {err}");
    assert!(err.contains("radar"), "{err}");
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
        (["--fap-level", "0.2"], "--fap-level"),
        (["--fap-level", "0.0001"], "at least 10000"),
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

/// A corrupted ephemeris file is named as such, with the segment and the
/// record, exit status 2, before any fit: mutated copies of the DE421 test
/// excerpt (a non-finite and an absurd coefficient, a scrambled block, a
/// record's midpoint moved, a truncated file, the Sun's segment in another
/// frame).
#[test]
fn a_corrupted_ephemeris_is_named_with_exit_two() {
    let original = std::fs::read(concat!(env!("CARGO_MANIFEST_DIR"), "/tests/data/de421/excerpt.bsp")).unwrap();
    let n = original.len();
    let at = |f: f64| ((n as f64 * f) as usize) / 8 * 8;
    let put = |bytes: &mut Vec<u8>, pos: usize, v: f64| bytes[pos..pos + 8].copy_from_slice(&v.to_le_bytes());
    let int = |b: &[u8], pos: usize| i32::from_le_bytes(b[pos..pos + 4].try_into().unwrap());
    // DAF layout (NAIF DAF Required Reading): FWARD at byte 76 of the file
    // record; a summary record holds 3 control doubles, then summaries of
    // ND=2 doubles and NI=6 ints (target, centre, frame, type, ...), 40 bytes each.
    let summaries = (int(&original, 76) as usize - 1) * 1024;
    let count = f64::from_le_bytes(original[summaries + 16..summaries + 24].try_into().unwrap()) as usize;
    let sun = (0..count).map(|k| summaries + 24 + 40 * k + 16).find(|&p| int(&original, p) == 10).unwrap();
    let mut cases: Vec<(&str, Vec<u8>)> = Vec::new();
    let mut b = original.clone();
    put(&mut b, at(0.5), f64::NAN);
    cases.push(("nan", b));
    let mut b = original.clone();
    put(&mut b, at(0.33), 3.0e200);
    cases.push(("absurd", b));
    let mut b = original.clone();
    b[at(0.41)..at(0.41) + 64].fill(0x5a);
    cases.push(("scrambled", b));
    cases.push(("truncated", original[..at(0.66)].to_vec()));
    let mut b = original.clone();
    b[sun + 8..sun + 12].copy_from_slice(&17i32.to_le_bytes());
    cases.push(("frame", b));
    let case = Case::new("corrupt-spk");
    let obs = case.file("obs.csv", format!("{HEADER}{}\n", good_rows()).as_bytes());
    for (name, bytes) in cases {
        let spk = case.file(&format!("{name}.bsp"), &bytes);
        let (code, err) = case.run(&obs, &["--ephemeris", spk.to_str().unwrap()]);
        assert_eq!(code, Some(2), "{name}: exit {code:?}: {err}");
        assert!(err.contains(&format!("{name}.bsp")) && !err.contains("preliminary orbit"), "{name}: {err}");
        assert!(case.nothing_written(), "{name}: something was written");
    }
}

#[test]
fn a_demo_scenario_that_cannot_be_read_is_refused_before_any_work() {
    let case = Case::new("demo-scenario");
    let typo = std::fs::read_to_string(concat!(env!("CARGO_MANIFEST_DIR"), "/scenarios/demo.toml"))
        .unwrap()
        .replace("sigma_arcsec", "sigma_arcsecs");
    let typo = case.file("typo.toml", typo.as_bytes());
    for (scenario, needle) in [(typo, "sigma_arcsecs"), (case.dir.join("missing.toml"), "missing.toml")] {
        let out = latens()
            .args(["demo", "--seed", "7", "--scenario"])
            .arg(&scenario)
            .arg("--out")
            .arg(case.dir.join("out"))
            .output()
            .unwrap();
        let err = String::from_utf8_lossy(&out.stderr);
        assert_eq!(out.status.code(), Some(2), "{err}");
        assert!(err.contains(needle), "{err}");
        assert!(case.nothing_written(), "something was written");
    }
}

#[test]
fn charts_are_written_in_the_formats_asked_for() {
    for (formats, expected) in [("svg", vec!["residuals.svg"]), ("none", vec![]), ("png", vec!["residuals.png"])] {
        let case = Case::new(&format!("charts-{formats}"));
        let obs = case.file("obs.csv", format!("{HEADER}{}\n", good_rows()).as_bytes());
        let (code, listed, err) = case.run_with_output(&obs, &["--known", "none", "--charts", formats]);
        assert_eq!(code, Some(0), "{formats}: {err}");
        let mut charts: Vec<String> = std::fs::read_dir(case.dir.join("out"))
            .unwrap()
            .filter_map(|e| e.ok().map(|e| e.file_name().to_string_lossy().into_owned()))
            .filter(|n| n.ends_with(".png") || n.ends_with(".svg"))
            .collect();
        charts.sort();
        assert_eq!(charts, expected, "{formats}");
        // The list of files written names exactly the charts written.
        let named: Vec<&str> =
            listed.split_whitespace().filter(|w| w.ends_with(".png") || w.ends_with(".svg")).collect();
        assert_eq!(named, expected, "{formats}: {listed}");
    }
    let case = Case::new("charts-bad");
    let obs = case.file("obs.csv", format!("{HEADER}{}\n", good_rows()).as_bytes());
    let (code, err) = case.run(&obs, &["--charts", "gif"]);
    assert_eq!(code, Some(2), "{err}");
    assert!(err.contains("gif"), "{err}");
}

/// `--quiet`: the files are the result; standard output stays empty and
/// notes (an unused column) are not printed, but a warning still reaches
/// standard error.
#[test]
fn quiet_runs_print_nothing_but_warnings() {
    let case = Case::new("quiet");
    let text =
        HEADER.replace('\n', ",seeing\n") + &good_rows().lines().map(|l| format!("{l},1.2\n")).collect::<String>();
    let obs = case.file("obs.csv", text.as_bytes());
    let (code, out, err) = case.run_with_output(&obs, &["--known", "none", "--quiet"]);
    assert_eq!(code, Some(0), "{err}");
    assert!(out.is_empty(), "{out}");
    // (This tiny arc draws a warning from the fit; warnings stay.)
    assert!(err.lines().all(|l| l.starts_with("warning: ")), "{err}");
    assert!(case.dir.join("out").join("fit.json").is_file());
    // The same file without --quiet: the report, and the note on the column.
    let (code, out, err) = case.run_with_output(&obs, &["--known", "none"]);
    assert_eq!(code, Some(0), "{err}");
    assert!(out.contains("Files written") && err.contains("note: ") && err.contains("seeing"), "{out} {err}");
    // A date far from the arc is warned about under --quiet too.
    let far = case.file("far.csv", format!("{HEADER}{}\n", good_rows()).replace("2020-02-10", "1650-02-10").as_bytes());
    let mut child = latens()
        .args(["residuals", "--quiet", "--known", "none", "--obs"])
        .arg(&far)
        .arg("--out")
        .arg(case.dir.join("far"))
        .stderr(std::process::Stdio::piped())
        .stdout(std::process::Stdio::null())
        .spawn()
        .unwrap();
    let mut first = String::new();
    {
        use std::io::BufRead as _;
        let mut reader = std::io::BufReader::new(child.stderr.take().unwrap());
        let _ = reader.read_line(&mut first);
    }
    let _ = child.kill();
    let _ = child.wait();
    assert!(first.starts_with("warning: ") && first.contains("1650-02-10"), "{first}");
}

/// `--json`: standard output is one JSON document (pandas/`json.loads`
/// ready) naming the command, the files it wrote as outputs.json lists
/// them, and its main result, equal to the fit.json on disk.
#[test]
fn json_runs_print_one_document_with_the_result() {
    let case = Case::new("json");
    let obs = case.file("obs.csv", format!("{HEADER}{}", good_rows()).as_bytes());
    let (code, out, err) = case.run_with_output(&obs, &["--known", "none", "--json"]);
    assert_eq!(code, Some(0), "{err}");
    assert!(err.lines().all(|l| l.starts_with("warning: ")), "{err}");
    let doc: serde_json::Value = serde_json::from_str(&out).unwrap_or_else(|e| panic!("{e}: {out}"));
    assert_eq!(doc["command"], "residuals");
    let dir = case.dir.join("out");
    let fit: serde_json::Value = serde_json::from_str(&std::fs::read_to_string(dir.join("fit.json")).unwrap()).unwrap();
    assert_eq!(doc["result"], fit);
    let mut listed: Vec<&str> = doc["files"].as_array().unwrap().iter().map(|f| f["file"].as_str().unwrap()).collect();
    listed.sort();
    assert_eq!(listed, ["fit.json", "residuals.csv", "residuals.png", "residuals.svg"]);
    assert!(std::path::Path::new(doc["out"].as_str().unwrap()).join("fit.json").is_file());
}
