//! The `latens` binary end to end: exit codes, files written, messages.

use std::path::PathBuf;
use std::process::Command;

fn latens() -> Command {
    Command::new(env!("CARGO_BIN_EXE_latens"))
}

fn temp_dir(name: &str) -> PathBuf {
    let d = std::env::temp_dir().join(format!("latens-cli-{name}-{}", std::process::id()));
    let _ = std::fs::remove_dir_all(&d);
    d
}

#[test]
fn version_and_help_exit_zero() {
    let out = latens().arg("--version").output().unwrap();
    assert!(out.status.success());
    assert!(String::from_utf8_lossy(&out.stdout).starts_with("latens "));
    let out = latens().arg("--help").output().unwrap();
    assert!(out.status.success());
    assert!(String::from_utf8_lossy(&out.stdout).contains("demo"));
}

#[test]
fn bad_arguments_exit_two() {
    let out = latens().arg("no-such-command").output().unwrap();
    assert_eq!(out.status.code(), Some(2));
    let out = latens().output().unwrap();
    assert_eq!(out.status.code(), Some(2));
    // Options are checked before any work: a --resume directory without a
    // checkpoint is refused before the observations are even read.
    let missing = std::env::temp_dir().join(format!("latens-no-checkpoint-{}", std::process::id()));
    let out = latens().args(["infer", "--obs", "no-such-file.csv", "--resume"]).arg(&missing).output().unwrap();
    assert_eq!(out.status.code(), Some(2));
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert!(stderr.contains("--resume") && stderr.contains("no checkpoint.json"), "{stderr}");
    let out = latens().args(["infer", "--obs", "no-such-file.csv", "--truth", "Cargo.toml"]).output().unwrap();
    assert_eq!(out.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&out.stderr).contains("--truth"), "{}", String::from_utf8_lossy(&out.stderr));
    for (option, value) in [
        ("--exclude-dates", "2015-01-01"),
        ("--exclude-dates", "2016-01-01..2015-01-01"),
        ("--near-ecliptic", "0"),
        ("--near-ecliptic", "95"),
    ] {
        let out = latens().args(["infer", "--obs", "no-such-file.csv", option, value]).output().unwrap();
        assert_eq!(out.status.code(), Some(2));
        assert!(String::from_utf8_lossy(&out.stderr).contains(option), "{}", String::from_utf8_lossy(&out.stderr));
    }
    let out =
        latens().args(["residuals", "--obs", "no-such-file.csv", "--start-orbit", "Cargo.toml"]).output().unwrap();
    assert_eq!(out.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&out.stderr).contains("Cargo.toml"), "{}", String::from_utf8_lossy(&out.stderr));
    let out = latens().args(["residuals", "--threads", "0", "--obs", "no-such-file.csv"]).output().unwrap();
    assert_eq!(out.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&out.stderr).contains("--threads must be at least 1"));
}

#[test]
fn demo_writes_its_track_and_says_what_it_did() {
    let (dir, stdout) = shared_demo();
    assert!(stdout.contains("Files written") && stdout.contains("In short:"), "{stdout}");
    // The demo's hidden planet lies in the search region it reports.
    assert!(stdout.contains("inside the 50% region") || stdout.contains("inside the 90% region"), "{stdout}");
    let truth: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(dir.join("truth.json")).unwrap()).unwrap();
    assert_eq!(truth["perturber"]["name"], "Orla");
    assert!(stdout.contains("NOT consistent with noise") && stdout.contains("Verdict: detected"), "{stdout}");
    let track = std::fs::read_to_string(dir.join("track.csv")).unwrap();
    let lines: Vec<&str> = track.lines().collect();
    assert_eq!(
        lines[0],
        "epoch_utc,t_tdb_days,ra_deg,dec_deg,heliocentric_distance_au,geocentric_distance_au,solar_elongation_deg,planetary_shift_arcsec"
    );
    assert_eq!(lines.len(), 1 + 241);
    // Every row is complete and every number finite; RA and Dec in range.
    for line in &lines[1..] {
        let f: Vec<&str> = line.split(',').collect();
        assert_eq!(f.len(), 8);
        let nums: Vec<f64> = f[1..].iter().map(|x| x.parse().unwrap()).collect();
        assert!(nums.iter().all(|x| x.is_finite()));
        assert!((0.0..360.0).contains(&nums[1]) && (-90.0..=90.0).contains(&nums[2]));
        // The invented body stays near its perihelion-aphelion range (the
        // planets perturb the osculating orbit by well under 1%).
        assert!(nums[3] > 44.0 * 0.87 && nums[3] < 44.0 * 1.13);
        // The giant planets' shift over a decade either side is arcseconds,
        // not degrees, and zero only at the reference epoch.
        assert!((0.0..600.0).contains(&nums[6]));
    }
    // Every product is there and no temporary file is left behind.
    let mut names: Vec<String> =
        std::fs::read_dir(dir).unwrap().map(|e| e.unwrap().file_name().to_string_lossy().into_owned()).collect();
    names.sort();
    assert_eq!(
        names,
        [
            "observations.csv",
            "outputs.json",
            "population",
            "residuals",
            "search",
            "sensitivity",
            "sites.csv",
            "track.csv",
            "truth.json"
        ]
    );
    // outputs.json lists every file the demo wrote (it wrote into a fresh
    // directory), each once, with what it is and its format.
    let index: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(dir.join("outputs.json")).unwrap()).unwrap();
    assert_eq!(index["schema_version"], 1);
    let runs = index["runs"].as_array().unwrap();
    assert_eq!(runs.len(), 1);
    assert_eq!(runs[0]["command"], "demo");
    let mut listed: Vec<String> =
        runs[0]["files"].as_array().unwrap().iter().map(|f| f["file"].as_str().unwrap().to_string()).collect();
    for f in runs[0]["files"].as_array().unwrap() {
        assert!(!f["what"].as_str().unwrap().is_empty() && !f["format"].as_str().unwrap().is_empty(), "{f}");
    }
    listed.sort();
    let mut on_disk = Vec::new();
    let mut stack = vec![dir.to_path_buf()];
    while let Some(d) = stack.pop() {
        for e in std::fs::read_dir(&d).unwrap() {
            let p = e.unwrap().path();
            if p.is_dir() {
                stack.push(p);
            } else {
                on_disk.push(p.strip_prefix(dir).unwrap().to_string_lossy().replace('\\', "/"));
            }
        }
    }
    on_disk.retain(|f| f != "outputs.json");
    on_disk.sort();
    assert_eq!(listed, on_disk, "outputs.json must list exactly the files written");
    // The joint section: twelve bodies' files and a joint study of them.
    assert_eq!(std::fs::read_dir(dir.join("population/bodies")).unwrap().count(), 12);
    let joint: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(dir.join("population/search/summary.json")).unwrap()).unwrap();
    assert_eq!(joint["study"], "joint");
    assert_eq!(joint["bodies"].as_array().unwrap().len(), 12);
    assert!(stdout.contains("Twelve bodies together: detected jointly"), "{stdout}");
    assert!(dir.join("sensitivity/sensitivity.png").exists());
    let search: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(dir.join("search/summary.json")).unwrap()).unwrap();
    assert_eq!(search["detection"]["detected"], serde_json::Value::Bool(true));
    let mut products: Vec<String> = std::fs::read_dir(dir.join("residuals"))
        .unwrap()
        .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
        .collect();
    products.sort();
    assert_eq!(products, ["fit.json", "residuals.csv", "residuals.png", "residuals.svg"]);
    // The survey carries the pull of the invented hidden planet, which the
    // reference orbit cannot absorb: chi2/dof well above 1 (1.36 measured).
    let fit: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(dir.join("residuals/fit.json")).unwrap()).unwrap();
    let per_dof = fit["chi2_per_dof"].as_f64().unwrap();
    assert!(per_dof > 1.2, "chi2/dof {per_dof}");
    assert!(fit["orbit"]["frame"].as_str().unwrap().contains("ecliptic J2000"));
}

#[test]
fn unwritable_output_is_an_error_naming_the_path() {
    // A regular file where the output directory should be.
    let dir = temp_dir("blocked");
    std::fs::create_dir_all(&dir).unwrap();
    let blocker = dir.join("file");
    std::fs::write(&blocker, b"x").unwrap();
    let out = latens().args(["demo", "--out"]).arg(blocker.join("sub")).output().unwrap();
    assert_eq!(out.status.code(), Some(1));
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert!(stderr.contains("latens: error") && stderr.contains("sub"), "{stderr}");
    std::fs::remove_dir_all(&dir).unwrap();
}

/// The demo, run once for every test of this file that needs its files:
/// its output directory and what it printed.
fn shared_demo() -> &'static (PathBuf, String) {
    static DEMO: std::sync::OnceLock<(PathBuf, String)> = std::sync::OnceLock::new();
    DEMO.get_or_init(|| {
        let dir = temp_dir("shared-demo");
        let out = latens().args(["demo", "--out"]).arg(&dir).output().unwrap();
        assert!(out.status.success(), "{}", String::from_utf8_lossy(&out.stderr));
        (dir, String::from_utf8_lossy(&out.stdout).into_owned())
    })
}

/// A summary without its wall-clock figures, which differ between runs.
fn without_timings(mut v: serde_json::Value) -> serde_json::Value {
    if let Some(d) = v.get_mut("diagnostics").and_then(|d| d.as_object_mut()) {
        d.remove("sampling_seconds");
        d.remove("effective_samples_per_second");
    }
    v
}

#[test]
fn infer_on_the_demo_survey_detects_the_hidden_planet_and_repeats_with_the_same_seed() {
    // The demo's invented survey carries a hidden planet: even a coarse search
    // must find it, and two runs with one seed must write identical summaries.
    let dir = temp_dir("infer");
    let demo = &shared_demo().0;
    let mut summaries = Vec::new();
    for run in 0..2 {
        let out_dir = dir.join(format!("infer{run}"));
        let out = latens()
            .args(["infer", "--obs"])
            .arg(demo.join("observations.csv"))
            .arg("--sites")
            .arg(demo.join("sites.csv"))
            .args(["--directions", "96", "--distances", "8", "--nulls", "400", "--seed", "7"])
            .args(["--posterior-steps", "600", "--temperatures", "8", "--walkers", "16", "--out"])
            .arg(&out_dir)
            .output()
            .unwrap();
        assert!(out.status.success(), "{}", String::from_utf8_lossy(&out.stderr));
        let text = std::fs::read_to_string(out_dir.join("summary.json")).unwrap();
        let v: serde_json::Value = serde_json::from_str(&text).unwrap();
        assert_eq!(v["detection"]["detected"], serde_json::Value::Bool(true), "{text}");
        assert!(
            v["detection"]["delta_chi2"].as_f64().unwrap()
                > v["detection"]["largest_null_delta_chi2"].as_f64().unwrap()
        );
        assert_eq!(v["seed"], 7);
        assert!(out_dir.join("residuals_null_vs_best.png").exists());
        // The posterior, the evidence and the alternatives are all there.
        assert!(v["posterior"]["mass_earth"]["median"].as_f64().unwrap() > 0.0, "{text}");
        assert!(v["evidence"]["log10_bayes_factor"].as_f64().unwrap().is_finite());
        assert_eq!(v["impostors"].as_array().unwrap().len(), 3);
        assert!(v["explanation"]["text"].as_str().unwrap().starts_with("best supported"));
        assert!(v["diagnostics"]["split_r_hat"].as_array().unwrap().len() == 7);
        let csv = std::fs::read_to_string(out_dir.join("posterior.csv")).unwrap();
        assert!(csv.starts_with(
            "mass_earth,a_au,e,inc_deg,node_deg,peri_deg,mean_anomaly_deg,ra_deg,dec_deg,distance_au,log_likelihood\n"
        ));
        assert!(csv.lines().count() > 100);
        assert!(out_dir.join("posterior_corner.png").exists() && out_dir.join("posterior_trace.svg").exists());
        assert!(!out_dir.join("checkpoint.json").exists(), "a finished run leaves no checkpoint");
        // The search products.
        for f in ["skymap.fits", "region50.fits", "region50.json", "region90.fits", "region90.json", "search_chart.png"]
        {
            assert!(out_dir.join(f).exists(), "{f} missing");
        }
        let sky = &v["sky"];
        assert!(sky["area50_deg2"].as_f64().unwrap() < sky["area90_deg2"].as_f64().unwrap(), "{sky}");
        let modes = std::fs::read_to_string(out_dir.join("modes.csv")).unwrap();
        assert!(modes.starts_with("mode,probability,ra_deg,dec_deg,area50_deg2,area90_deg2,"));
        let p: f64 = sky["modes"].as_array().unwrap().iter().map(|m| m["probability"].as_f64().unwrap()).sum();
        assert!((p - 0.9).abs() < 0.02, "modes hold {p}");
        if run == 0 {
            // Predictions from the same directory: the first date is the
            // search epoch, where each listed mode's centre is where infer
            // put it (predict follows at most 400 samples per mode, so
            // within a few degrees).
            let o = latens().args(["predict", "--from"]).arg(&out_dir).args(["--step-days", "60"]).output().unwrap();
            assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
            let rows = std::fs::read_to_string(out_dir.join("predict.csv")).unwrap();
            let mut lines = rows.lines();
            assert_eq!(
                lines.next().unwrap(),
                "mode,epoch_utc,ra_deg,dec_deg,ellipse_major_deg,ellipse_minor_deg,ellipse_pa_deg,v_mag_bright,v_mag_faint,motion_arcsec_per_hour,motion_pa_deg,solar_elongation_deg,near_sun"
            );
            let first: Vec<&str> = lines.next().unwrap().split(',').collect();
            let m0 = &sky["modes"][0];
            let sep = latens::frames::angular_separation(
                unit(first[2].parse().unwrap(), first[3].parse().unwrap()),
                unit(m0["ra_deg"].as_f64().unwrap(), m0["dec_deg"].as_f64().unwrap()),
            )
            .to_degrees();
            assert_eq!(first[0], "1");
            assert!(sep < 5.0, "predicted centre {sep} deg from the mode's");
            assert_eq!(rows.lines().filter(|l| l.starts_with("1,")).count(), 7, "{rows}");
            let bad = latens().args(["predict", "--from"]).arg(dir.join("nowhere")).output().unwrap();
            assert_eq!(bad.status.code(), Some(2));
            assert!(String::from_utf8_lossy(&bad.stderr).contains("summary.json"));
        }
        summaries.push((without_timings(v), csv));
    }
    assert!(summaries[0] == summaries[1], "the same seed gave different results");

    // A one-year systematic (1.5" in Dec) in the astrometry of the null
    // scenario (no planet) is called suspicious, not a planet (at 0.4" the
    // orbit fit absorbs most of it and the search reports nothing).
    let null = dir.join("null");
    let o = latens()
        .arg("simulate")
        .arg(concat!(env!("CARGO_MANIFEST_DIR"), "/scenarios/null.toml"))
        .arg("--out")
        .arg(&null)
        .output()
        .unwrap();
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let text = std::fs::read_to_string(null.join("observations.csv")).unwrap();
    let mut out = String::new();
    for line in text.lines() {
        if line.starts_with('#') || line.starts_with("epoch") {
            out.push_str(line);
            out.push('\n');
            continue;
        }
        let mut f: Vec<String> = line.split(',').map(String::from).collect();
        let t = latens::time::tdb_days_from_j2000(latens::time::parse_utc_iso(&f[0]).unwrap());
        let w = std::f64::consts::TAU * t / 365.25 + 1.0;
        let dec: f64 = f[2].parse::<f64>().unwrap() + 1.5 * w.sin() / 3600.0;
        f[2] = format!("{dec:.9}");
        out.push_str(&f.join(","));
        out.push('\n');
    }
    std::fs::write(dir.join("annual.csv"), out).unwrap();
    let o = latens()
        .args(["infer", "--obs"])
        .arg(dir.join("annual.csv"))
        .arg("--sites")
        .arg(demo.join("sites.csv"))
        .args(["--directions", "96", "--distances", "8", "--nulls", "400", "--no-posterior", "--out"])
        .arg(dir.join("annual"))
        .output()
        .unwrap();
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let v: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(dir.join("annual/summary.json")).unwrap()).unwrap();
    assert!(v["detection"]["verdict"].as_str().unwrap().starts_with("suspicious"), "{}", v["detection"]["verdict"]);
    let bad = latens()
        .args(["infer", "--obs"])
        .arg(demo.join("observations.csv"))
        .arg("--sites")
        .arg(demo.join("sites.csv"))
        .args(["--mass-earth", "5:1"])
        .output()
        .unwrap();
    assert_eq!(bad.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&bad.stderr).contains("--mass-earth"));
    std::fs::remove_dir_all(&dir).unwrap();
}

#[test]
fn an_interrupted_posterior_resumes_to_the_same_result() {
    // Ctrl-C (SIGINT) during the sampling saves a checkpoint and exits with
    // 1; --resume DIR finishes the run, and its posterior is the one an
    // uninterrupted run with the same seed gives.
    let dir = temp_dir("resume");
    let demo = &shared_demo().0;
    let infer = |out: &std::path::Path| {
        let mut c = latens();
        c.args(["infer", "--obs"])
            .arg(demo.join("observations.csv"))
            .arg("--sites")
            .arg(demo.join("sites.csv"))
            .args(["--directions", "96", "--distances", "8", "--nulls", "400", "--seed", "3"])
            .args(["--posterior-steps", "3000", "--temperatures", "8", "--walkers", "16", "--out"])
            .arg(out);
        c
    };
    let whole = dir.join("whole");
    let o = infer(&whole).output().unwrap();
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));

    let cut = dir.join("cut");
    let child = infer(&cut).stdout(std::process::Stdio::null()).stderr(std::process::Stdio::piped()).spawn().unwrap();
    let checkpoint = cut.join("checkpoint.json");
    let started = std::time::Instant::now();
    while !checkpoint.exists() && started.elapsed().as_secs() < 300 {
        std::thread::sleep(std::time::Duration::from_millis(5));
    }
    assert!(checkpoint.exists(), "no checkpoint appeared");
    let status = Command::new("kill").args(["-INT", &child.id().to_string()]).status().unwrap();
    assert!(status.success());
    let out = child.wait_with_output().unwrap();
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(1), "{stderr}");
    assert!(stderr.contains("--resume"), "{stderr}");
    assert!(!cut.join("posterior.csv").exists(), "an interrupted run wrote results");

    let mut resumed = infer(&dir.join("ignored"));
    resumed.arg("--resume").arg(&cut);
    let o = resumed.output().unwrap();
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    assert!(String::from_utf8_lossy(&o.stderr).contains("Resuming the posterior"));
    let a = std::fs::read_to_string(whole.join("posterior.csv")).unwrap();
    let b = std::fs::read_to_string(cut.join("posterior.csv")).unwrap();
    assert!(a == b, "the resumed posterior differs from the uninterrupted one");
    std::fs::remove_dir_all(&dir).unwrap();
}

/// The unit vector of an RA/Dec in degrees.
fn unit(ra: f64, dec: f64) -> latens::vec3::Vec3 {
    let (a, d) = (ra.to_radians(), dec.to_radians());
    latens::vec3::Vec3::new(d.cos() * a.cos(), d.cos() * a.sin(), d.sin())
}

/// The simulated planet's place at the search epoch (`sim`'s truth.json)
/// lies in the 90% region `infer` wrote into `found`.
fn assert_truth_in_region90(sim: &std::path::Path, found: &std::path::Path) {
    assert_truth_in(sim, found, "region90.json");
}

/// The simulation's true place at the search epoch lies inside the MOC
/// `file` (JSON) that `infer` wrote into `found`.
fn assert_truth_in(sim: &std::path::Path, found: &std::path::Path, file: &str) {
    let truth: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(sim.join("truth.json")).unwrap()).unwrap();
    let p = &truth["perturber"]["at_search_epoch"];
    let d = unit(p["ra_deg"].as_f64().unwrap(), p["dec_deg"].as_f64().unwrap());
    let moc = std::fs::read_to_string(found.join(file)).unwrap();
    assert!(latens::skymap::moc_json_contains(&moc, d).unwrap(), "the truth is outside {file}: {p}");
}

/// summary.json's judgement of each basin against the posterior agrees with
/// the files written: its place with the basin's, "in the 90% region" with
/// region90.json read back as a MOC, "in the 95% mass interval" with the
/// posterior's interval; and a basin in the prior, as good as the best and
/// left out is named in a warning.
fn assert_basin_standing_matches_files(found: &std::path::Path) {
    let v: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(found.join("summary.json")).unwrap()).unwrap();
    let moc = std::fs::read_to_string(found.join("region90.json")).unwrap();
    let (basins, standing) = (v["basins"].as_array().unwrap(), v["sky"]["basins"].as_array().unwrap());
    assert_eq!(basins.len(), standing.len());
    let mass = &v["posterior"]["mass_earth"];
    let (lo, hi) = (mass["lo95"].as_f64().unwrap(), mass["hi95"].as_f64().unwrap());
    let warnings = v["warnings"].as_array().unwrap();
    for (b, s) in basins.iter().zip(standing) {
        let f = |x: &serde_json::Value, k: &str| x[k].as_f64().unwrap();
        assert!((f(b, "ra_deg") - f(s, "ra_deg")).abs() < 1e-6 && (f(b, "dec_deg") - f(s, "dec_deg")).abs() < 1e-6);
        let inside = latens::skymap::moc_json_contains(&moc, unit(f(s, "ra_deg"), f(s, "dec_deg"))).unwrap();
        assert_eq!(s["in_region90"].as_bool(), Some(inside), "{s}");
        assert_eq!(s["in_mass_interval95"].as_bool(), Some((lo..=hi).contains(&f(s, "mass_earth"))), "{s}");
        let left_out = s["in_prior"].as_bool().unwrap()
            && s["as_good_as_best"].as_bool().unwrap()
            && !(s["in_region90"].as_bool().unwrap() && s["in_mass_interval95"].as_bool().unwrap());
        let named = format!("basin {} (", s["basin"]);
        let warned = warnings.iter().any(|w| w.as_str().unwrap().starts_with(&named));
        assert_eq!(warned, left_out, "{s}\n{warnings:#?}");
    }
}

#[test]
fn reduced_demo_end_to_end_finds_the_planet_and_its_place() {
    // The demo scenario cut to ten years with a visit every 10 days, a small
    // grid and a short posterior: `simulate`, then `infer`; the verdict must
    // be a detection and the truth must lie in the 90% region. The null
    // scenario, searched the same way, must not give a detection.
    let dir = temp_dir("e2e");
    std::fs::create_dir_all(&dir).unwrap();
    let base = std::fs::read_to_string(concat!(env!("CARGO_MANIFEST_DIR"), "/scenarios/demo.toml")).unwrap();
    let cut = |text: &str| {
        text.replace("start = \"2014-03-01T06:00:00Z\"", "start = \"2024-03-01T06:00:00Z\"")
            .replace("visit_every_days = 6.0", "visit_every_days = 10.0")
    };
    std::fs::write(dir.join("quick.toml"), cut(&base)).unwrap();
    let null = std::fs::read_to_string(concat!(env!("CARGO_MANIFEST_DIR"), "/scenarios/null.toml")).unwrap();
    std::fs::write(dir.join("null.toml"), cut(&null)).unwrap();
    for (name, planet) in [("quick", true), ("null", false)] {
        let sim = dir.join(format!("{name}-sim"));
        let o = latens().arg("simulate").arg(dir.join(format!("{name}.toml"))).arg("--out").arg(&sim).output().unwrap();
        assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
        let found = dir.join(format!("{name}-infer"));
        let o = latens()
            .args(["infer", "--obs"])
            .arg(sim.join("observations.csv"))
            .arg("--sites")
            .arg(sim.join("sites.csv"))
            .args(["--directions", "192", "--distances", "10", "--nulls", "371", "--seed", "2"])
            .args(["--posterior-steps", "700", "--temperatures", "10", "--walkers", "24", "--out"])
            .arg(&found)
            .output()
            .unwrap();
        assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
        let v: serde_json::Value =
            serde_json::from_str(&std::fs::read_to_string(found.join("summary.json")).unwrap()).unwrap();
        assert_eq!(v["detection"]["detected"].as_bool(), Some(planet), "{}", v["detection"]);
        if planet {
            assert_truth_in_region90(&sim, &found);
            assert_basin_standing_matches_files(&found);
            // The profile likelihood's region holds it too; its summary
            // agrees with the MOC written.
            assert_truth_in(&sim, &found, "confidence90.json");
            let c = &v["sky"]["confidence"];
            // The MOC's area, cell by cell over its orders (4 pi sr = 41 252.96 sq deg).
            let moc: serde_json::Value =
                serde_json::from_str(&std::fs::read_to_string(found.join("confidence90.json")).unwrap()).unwrap();
            let area: f64 = moc
                .as_object()
                .unwrap()
                .iter()
                .map(|(order, cells)| {
                    let n = cells.as_array().map_or(0, |a| a.len()) as f64;
                    n * 41_252.961_249 / (12.0 * 4f64.powi(order.parse::<i32>().unwrap()))
                })
                .sum();
            assert!((c["area90_deg2"].as_f64().unwrap() - area).abs() < 1e-6 * area, "{c} against {area}");
            assert!((c["threshold90"].as_f64().unwrap() - 4.605).abs() < 1e-3, "{c}");
            assert_eq!(v["explanation"]["best"], "an unseen perturber", "{}", v["explanation"]);
        }
    }
    std::fs::remove_dir_all(&dir).unwrap();
}

/// `infer --near-ecliptic 30` on the demo survey (its hidden planet's orbit
/// is inclined 28 deg, inside the band): the search and the posterior keep
/// to orbits within 30 deg of the ecliptic (prograde or retrograde), the
/// setting is recorded and reported, the planet is still detected and its
/// place at the search epoch lies in the 90% region.
#[test]
fn a_band_about_the_ecliptic_keeps_search_and_posterior_in_it() {
    let (demo, _) = shared_demo();
    let out_dir = temp_dir("band");
    let out = latens()
        .args(["infer", "--obs"])
        .arg(demo.join("observations.csv"))
        .arg("--sites")
        .arg(demo.join("sites.csv"))
        .args(["--near-ecliptic", "30", "--directions", "96", "--distances", "8", "--nulls", "400", "--seed", "7"])
        .arg("--no-confidence-region")
        .args(["--posterior-steps", "600", "--temperatures", "8", "--walkers", "16", "--out"])
        .arg(&out_dir)
        .output()
        .unwrap();
    assert!(out.status.success(), "{}", String::from_utf8_lossy(&out.stderr));
    let stdout = String::from_utf8_lossy(&out.stdout);
    assert!(stdout.contains("within 30 deg of the ecliptic"), "{stdout}");
    let v: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(out_dir.join("summary.json")).unwrap()).unwrap();
    assert_eq!(v["settings"]["near_ecliptic_deg"].as_f64(), Some(30.0));
    assert_eq!(v["detection"]["detected"].as_bool(), Some(true), "{}", v["detection"]);
    let in_band = |inc: f64| inc <= 30.0 + 1e-6 || inc >= 150.0 - 1e-6;
    for b in v["basins"].as_array().unwrap() {
        assert!(in_band(b["inc_deg"].as_f64().unwrap()), "a basin outside the band: {b}");
    }
    let mut r = csv::Reader::from_path(out_dir.join("posterior.csv")).unwrap();
    let col = r.headers().unwrap().iter().position(|h| h == "inc_deg").unwrap();
    let incs: Vec<f64> = r.records().map(|rec| rec.unwrap()[col].parse().unwrap()).collect();
    assert!(incs.len() > 100);
    let outside: Vec<&f64> = incs.iter().filter(|&&i| !in_band(i)).collect();
    assert!(outside.is_empty(), "{} posterior samples outside the band, e.g. {:?}", outside.len(), &outside[..1]);
    assert_truth_in_region90(demo, &out_dir);
    assert_basin_standing_matches_files(&out_dir);
    // Skipped on request: no confidence files, none in the summary.
    assert!(v["sky"]["confidence"].is_null() && !out_dir.join("confidence90.fits").exists());
    std::fs::remove_dir_all(&out_dir).unwrap();
}

/// `residuals --start-orbit`: started from the demo's own fit, the fit lands
/// on the same orbit and chi-square as Gauss's method gave; `infer
/// --exclude-site` with a site that made no observation is refused, naming it.
#[test]
fn a_starting_orbit_and_exclusions_by_site() {
    let (dir, _) = shared_demo();
    let out_dir = std::env::temp_dir().join(format!("latens-start-orbit-{}", std::process::id()));
    let obs = dir.join("observations.csv");
    let sites = dir.join("sites.csv");
    let out = latens()
        .args(["residuals", "--obs"])
        .arg(&obs)
        .arg("--sites")
        .arg(&sites)
        .arg("--start-orbit")
        .arg(dir.join("residuals").join("fit.json"))
        .arg("--out")
        .arg(&out_dir)
        .output()
        .unwrap();
    assert!(out.status.success(), "{}", String::from_utf8_lossy(&out.stderr));
    let read = |p: std::path::PathBuf| -> serde_json::Value {
        serde_json::from_str(&std::fs::read_to_string(p).unwrap()).unwrap()
    };
    let (a, b) = (read(dir.join("residuals").join("fit.json")), read(out_dir.join("fit.json")));
    let (ca, cb) = (a["chi2"].as_f64().unwrap(), b["chi2"].as_f64().unwrap());
    assert!((ca - cb).abs() < 1e-6 * ca, "{ca} vs {cb}");
    assert_eq!(a["orbit"]["epoch_tdb_jd"], b["orbit"]["epoch_tdb_jd"]);
    let out = latens()
        .args(["infer", "--obs"])
        .arg(&obs)
        .arg("--sites")
        .arg(&sites)
        .args(["--exclude-site", "Z99", "--no-posterior", "--out"])
        .arg(out_dir.join("infer"))
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(2));
    assert!(
        String::from_utf8_lossy(&out.stderr).contains("--exclude-site Z99"),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    // A date range left out, and another false-alarm level: both recorded.
    let out = latens()
        .args(["infer", "--obs"])
        .arg(&obs)
        .arg("--sites")
        .arg(&sites)
        .args(["--exclude-dates", "2016-01-01..2016-12-31", "--fap-level", "0.002", "--nulls", "500"])
        .args(["--directions", "12", "--distances", "2", "--no-posterior", "--out"])
        .arg(out_dir.join("dates"))
        .output()
        .unwrap();
    assert!(out.status.success(), "{}", String::from_utf8_lossy(&out.stderr));
    let v = read(out_dir.join("dates").join("summary.json"));
    assert_eq!(v["settings"]["fap_level"].as_f64(), Some(0.002));
    let left: Vec<&str> =
        v["outliers"]["excluded_by_hand"].as_array().unwrap().iter().map(|x| x.as_str().unwrap()).collect();
    let text = std::fs::read_to_string(&obs).unwrap();
    let in_2016: Vec<String> = text
        .lines()
        .enumerate()
        .filter(|(_, l)| l.starts_with("2016-"))
        .map(|(i, _)| format!("{}:{}", obs.display(), i + 1))
        .collect();
    assert!(!in_2016.is_empty());
    assert_eq!(left, in_2016.iter().map(String::as_str).collect::<Vec<_>>());
    // infer --start-orbit: the same search as from Gauss's method.
    let null_chi2 = |start: bool, name: &str| {
        let mut c = latens();
        c.args(["infer", "--obs"]).arg(&obs).arg("--sites").arg(&sites);
        if start {
            c.arg("--start-orbit").arg(dir.join("residuals").join("fit.json"));
        }
        let out = c
            .args(["--nulls", "400", "--directions", "12", "--distances", "2", "--no-posterior", "--out"])
            .arg(out_dir.join(name))
            .output()
            .unwrap();
        assert!(out.status.success(), "{}", String::from_utf8_lossy(&out.stderr));
        let v = read(out_dir.join(name).join("summary.json"));
        (v["null_model"]["chi2"].as_f64().unwrap(), v["detection"]["delta_chi2"].as_f64().unwrap())
    };
    let (a, b) = (null_chi2(false, "gauss"), null_chi2(true, "start"));
    assert!((a.0 - b.0).abs() < 1e-6 * a.0 && (a.1 - b.1).abs() < 1e-4 * a.1, "{a:?} vs {b:?}");
    let _ = std::fs::remove_dir_all(&out_dir);
}
