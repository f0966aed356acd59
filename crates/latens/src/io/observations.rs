//! Reading astrometric observations and observing sites.
//!
//! Two observation formats (see `docs/formats.md`):
//! - Latens CSV: a header naming the columns (any order), `#` comment lines,
//!   columns `epoch_utc`, `ra_deg`, `dec_deg`, `sigma_ra_arcsec` (of
//!   RA*cos(Dec), on the sky), `sigma_dec_arcsec`, and optionally `site` and
//!   `corr` (the RA/Dec error correlation);
//! - IAU ADES pipe-separated values (PSV) for optical astrometry: the fields
//!   `obsTime`, `ra`, `dec`, `rmsRA`, `rmsDec`, `stn`, and optionally `rmsCorr`.
//!
//! Every problem is reported with the file, the line and the field. A
//! byte-order mark and CRLF line ends are accepted. Rows are returned sorted
//! by time.

use std::collections::HashMap;
use std::path::Path;

use hifitime::Epoch;

use crate::time::{parse_utc_iso, tdb_days_from_j2000};
use crate::units::RAD_PER_DEG;

/// The name of the Earth's centre as an observing site.
pub const GEOCENTER: &str = "geocenter";

/// A problem in an input file, located to its line and field.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
#[error("{file}{}: {}{message}", at_line(*.line), field.as_ref().map(|f| format!("field `{f}`: ")).unwrap_or_default())]
pub struct InputError {
    pub file: String,
    /// 1-based line number (0 for the file as a whole).
    pub line: usize,
    pub field: Option<String>,
    pub message: String,
}

/// ":12" for line 12; nothing for the file as a whole (line 0).
fn at_line(line: usize) -> String {
    if line > 0 { format!(":{line}") } else { String::new() }
}

/// Geodetic latitude (deg) and height (m) on the WGS84 ellipsoid of a place
/// given by its geocentric parallax constants rho cos phi' and rho sin phi'
/// (Earth equatorial radii): Bowring's iteration (Bowring 1976, Survey
/// Review 23, 323), to well below a millimetre in three steps.
pub fn geodetic_from_parallax(rho_cos_phi: f64, rho_sin_phi: f64) -> (f64, f64) {
    use crate::units::{EARTH_EQUATORIAL_RADIUS_M as A, EARTH_FLATTENING as F};
    let (p, z) = (rho_cos_phi * A, rho_sin_phi * A);
    let b = A * (1.0 - F);
    let e2 = F * (2.0 - F);
    let ep2 = e2 / (1.0 - e2);
    let mut lat = (z / (p * (1.0 - e2))).atan();
    for _ in 0..5 {
        let beta = ((1.0 - F) * lat.tan()).atan();
        lat = ((z + ep2 * b * beta.sin().powi(3)) / (p - e2 * A * beta.cos().powi(3))).atan();
    }
    let n = A / (1.0 - e2 * lat.sin().powi(2)).sqrt();
    let height = if lat.cos().abs() > 1e-9 { p / lat.cos() - n } else { z.abs() - b };
    (lat.to_degrees(), height)
}

/// An observing site: geodetic longitude (east positive) and latitude on the
/// WGS84 ellipsoid, degrees, and height above it, metres.
#[derive(Clone, Debug, PartialEq)]
pub struct Site {
    pub name: String,
    pub lon_deg: f64,
    pub lat_deg: f64,
    pub height_m: f64,
}

/// Known sites by name. Always contains `geocenter`.
#[derive(Clone, Debug, Default, PartialEq)]
pub struct SiteTable {
    sites: HashMap<String, Site>,
}

impl SiteTable {
    pub fn new() -> Self {
        SiteTable::default()
    }

    /// Looks a site up; `None` for the geocentre (and for unknown names, which
    /// [`SiteTable::contains`] tells apart).
    pub fn get(&self, name: &str) -> Option<&Site> {
        self.sites.get(name)
    }

    pub fn contains(&self, name: &str) -> bool {
        name == GEOCENTER || self.sites.contains_key(name)
    }

    pub fn insert(&mut self, site: Site) {
        self.sites.insert(site.name.clone(), site);
    }

    /// Reads a sites file: CSV with the columns `name`, `lon_deg`, `lat_deg`,
    /// `height_m` (any order, `#` comments).
    pub fn read(path: &Path) -> Result<SiteTable, InputError> {
        let file = path.display().to_string();
        let text = read_text(path)?;
        SiteTable::parse(&text, &file)
    }

    /// Parses a sites table from text (as [`SiteTable::read`] reads a
    /// file); `file` names the text in messages.
    pub fn parse(text: &str, file: &str) -> Result<SiteTable, InputError> {
        let table = Table::parse(text, file, ',')?;
        let mut sites = SiteTable::new();
        // Geodetic (lat_deg, height_m) or the trade's geocentric parallax
        // constants (rho cos phi', rho sin phi', in Earth equatorial radii).
        let parallax =
            !table.columns.iter().any(|c| c == "lat_deg") && table.columns.iter().any(|c| c == "rho_cos_phi");
        if parallax {
            table.require(&["name", "lon_deg", "rho_cos_phi", "rho_sin_phi"], &[])?;
        } else {
            table.require(&["name", "lon_deg", "lat_deg", "height_m"], &[])?;
        }
        for row in &table.rows {
            let name = row.text("name")?.to_string();
            if name.is_empty() {
                return Err(row.error("name", "a site needs a name"));
            }
            let lon = row.number("lon_deg")?;
            let (lat, height) = if parallax {
                let (c, s) = (row.number("rho_cos_phi")?, row.number("rho_sin_phi")?);
                if !(0.0..=1.1).contains(&c) || s.abs() > 1.1 || c.hypot(s) < 0.99 {
                    return Err(row.error(
                        "rho_cos_phi",
                        &format!("({c}, {s}) is not a place on the Earth (Earth radii, about 1 from the centre)"),
                    ));
                }
                geodetic_from_parallax(c, s)
            } else {
                (row.number("lat_deg")?, row.number("height_m")?)
            };
            if !(-180.0..=360.0).contains(&lon) {
                return Err(row.error("lon_deg", &format!("{lon} is not a longitude")));
            }
            if !(-90.0..=90.0).contains(&lat) {
                return Err(row.error("lat_deg", &format!("{lat} is not a latitude")));
            }
            if !(-12_000.0..=100_000.0).contains(&height) {
                return Err(row.error("height_m", &format!("{height} m is not a height on the Earth")));
            }
            if sites.sites.contains_key(&name) || name == GEOCENTER {
                return Err(row.error("name", &format!("site `{name}` is defined twice")));
            }
            sites.insert(Site { name, lon_deg: lon, lat_deg: lat, height_m: height });
        }
        Ok(sites)
    }

    /// The sites as CSV text (name, lon_deg, lat_deg, height_m), by name;
    /// the geocentre is implicit and not listed.
    pub fn to_csv(&self) -> String {
        use std::fmt::Write as _;
        let mut names: Vec<&String> = self.sites.keys().collect();
        names.sort();
        let mut csv = String::from("name,lon_deg,lat_deg,height_m\n");
        for n in names {
            let s = &self.sites[n];
            let _ = writeln!(csv, "{},{},{},{}", s.name, s.lon_deg, s.lat_deg, s.height_m);
        }
        csv
    }
}

/// One astrometric observation: an astrometric ICRF position of the tracked
/// body seen from a site at a UTC instant.
#[derive(Clone, Debug, PartialEq)]
pub struct Observation {
    /// The instant of observation (hifitime, on the TAI scale).
    pub epoch: Epoch,
    /// The same instant as TDB days after J2000.0.
    pub t_tdb_days: f64,
    pub ra_rad: f64,
    pub dec_rad: f64,
    /// 1-sigma error of RA*cos(Dec), arcsec.
    pub sigma_ra_arcsec: f64,
    /// 1-sigma error of Dec, arcsec.
    pub sigma_dec_arcsec: f64,
    /// Correlation of the RA and Dec errors, in (-1, 1).
    pub corr: f64,
    pub site: String,
    /// Where the observation came from, for messages: `file:line`.
    pub source: String,
    /// The epoch text as written.
    pub epoch_text: String,
}

impl Observation {
    /// The file the observation came from (its source without the line).
    pub fn file(&self) -> &str {
        self.source.rsplit_once(':').map_or(self.source.as_str(), |(f, _)| f)
    }
}

/// Reads observations in Latens CSV or ADES PSV (chosen by content: a header
/// with `|` separators is ADES). Needs at least `min_count` observations.
pub fn read_observations(path: &Path, sites: &SiteTable, min_count: usize) -> Result<Vec<Observation>, InputError> {
    read(path, sites, min_count, true)
}

/// Reads a planned observation schedule: Latens CSV with `epoch_utc`,
/// `sigma_ra_arcsec`, `sigma_dec_arcsec` and optionally `site` and `corr`;
/// `ra_deg`/`dec_deg` may be present and are ignored (the positions are set
/// to zero, for the caller to compute).
pub fn read_schedule(path: &Path, sites: &SiteTable, min_count: usize) -> Result<Vec<Observation>, InputError> {
    read(path, sites, min_count, false)
}

/// The columns that name the body an observation is of: ADES's permanent
/// designation, provisional designation and tracklet name (the first filled
/// one names the body), and Latens CSV's `body`.
const CSV_POSITION_COLUMNS: [&str; 5] = ["epoch_utc", "ra_deg", "dec_deg", "sigma_ra_arcsec", "sigma_dec_arcsec"];
const CSV_SCHEDULE_COLUMNS: [&str; 3] = ["epoch_utc", "sigma_ra_arcsec", "sigma_dec_arcsec"];
const CSV_OPTIONAL_COLUMNS: [&str; 3] = ["site", "corr", CSV_DESIGNATION];

/// What a reader should know about an observation file that is not an
/// error: columns that are read by nobody (kept in the file, not used).
/// ADES files carry many fields by design and are not reported.
pub fn column_notes(path: &Path) -> Vec<String> {
    let Ok(text) = read_text(path) else { return Vec::new() };
    let file = path.display().to_string();
    if text.trim_start().starts_with('<') {
        // ADES XML: observations that are not optical positions.
        let Ok(doc) = roxmltree::Document::parse(&text) else { return Vec::new() };
        let others = doc
            .descendants()
            .filter(|n| n.is_element() && matches!(n.tag_name().name(), "radar" | "offset" | "occultation"))
            .count();
        return if others > 0 {
            vec![format!(
                "{file}: {others} observation(s) that are not optical positions (radar, offset, occultation) are left out"
            )]
        } else {
            Vec::new()
        };
    }
    let Ok(table) = Table::parse(&text, &file, ',') else { return Vec::new() };
    if table.columns.iter().any(|c| c.contains('|')) {
        return Vec::new();
    }
    let known: Vec<&str> = CSV_POSITION_COLUMNS.iter().chain(&CSV_OPTIONAL_COLUMNS).copied().collect();
    let unused: Vec<&str> = table.columns.iter().map(String::as_str).filter(|c| !known.contains(c)).collect();
    if unused.is_empty() {
        return Vec::new();
    }
    vec![format!(
        "{file}:{}: column(s) {} are not used (kept in the file, left out of the fit)",
        table.header_line,
        unused.iter().map(|c| format!("`{c}`")).collect::<Vec<_>>().join(", ")
    )]
}

/// Warnings about observations whose dates lie far from the rest of the
/// arc (more than a year, and more than twice the rest's span, beyond it):
/// most often a typing error in the year. Told before the fit; the
/// observations stay in (leave them out with `--exclude LINE`).
pub fn date_outliers(observations: &[Observation]) -> Vec<String> {
    let mut t: Vec<(f64, &Observation)> = observations.iter().map(|o| (o.t_tdb_days, o)).collect();
    t.sort_by(|a, b| a.0.total_cmp(&b.0));
    let (mut lo, mut hi) = (0usize, t.len());
    let mut out = Vec::new();
    let far = |gap: f64, span: f64| gap > 365.25 && gap > 2.0 * span;
    while hi - lo > 3 {
        let span_without_first = t[hi - 1].0 - t[lo + 1].0;
        let span_without_last = t[hi - 2].0 - t[lo].0;
        if far(t[lo + 1].0 - t[lo].0, span_without_first) {
            let o = t[lo].1;
            out.push(format!(
                "{}: the observation of {} lies {:.0} years before the rest of the arc ({} to {}): a typing error in the date? \
                 It is kept; leave it out with --exclude if it is wrong",
                o.source,
                o.epoch_text,
                (t[lo + 1].0 - t[lo].0) / 365.25,
                &t[lo + 1].1.epoch_text[..10.min(t[lo + 1].1.epoch_text.len())],
                &t[hi - 1].1.epoch_text[..10.min(t[hi - 1].1.epoch_text.len())]
            ));
            lo += 1;
        } else if far(t[hi - 1].0 - t[hi - 2].0, span_without_last) {
            let o = t[hi - 1].1;
            out.push(format!(
                "{}: the observation of {} lies {:.0} years after the rest of the arc ({} to {}): a typing error in the date? \
                 It is kept; leave it out with --exclude if it is wrong",
                o.source,
                o.epoch_text,
                (t[hi - 1].0 - t[hi - 2].0) / 365.25,
                &t[lo].1.epoch_text[..10.min(t[lo].1.epoch_text.len())],
                &t[hi - 2].1.epoch_text[..10.min(t[hi - 2].1.epoch_text.len())]
            ));
            hi -= 1;
        } else {
            break;
        }
    }
    out
}

const ADES_DESIGNATIONS: [&str; 3] = ["permID", "provID", "trkSub"];
const CSV_DESIGNATION: &str = "body";

/// One body's observations in a file of several, with its designation.
pub type BodyObservations = (Option<String>, Vec<Observation>);

/// Reads a file that may hold several bodies' observations, told apart by
/// a designation column (ADES `permID`, `provID` or `trkSub`, the first
/// filled; Latens CSV `body`): one list per body, in order of first
/// appearance, each with its designation (None when the file names no
/// body). Every body needs `min_count` observations; a row without a
/// designation in a file where others have one is refused. Errors name the
/// file and the line as in the file.
pub fn read_bodies(path: &Path, sites: &SiteTable, min_count: usize) -> Result<Vec<BodyObservations>, InputError> {
    let file = path.display().to_string();
    let text = read_text(path)?;
    let (table, ades) = table_of(&text, &file)?;
    let designation = |row: &Row| -> Option<String> {
        let names: &[&str] = if ades { &ADES_DESIGNATIONS } else { &[CSV_DESIGNATION] };
        names.iter().filter_map(|n| row.optional_text(n)).find(|t| !t.is_empty()).map(str::to_string)
    };
    let mut order: Vec<String> = Vec::new();
    let mut body_of_row: Vec<Option<usize>> = Vec::with_capacity(table.rows.len());
    let mut unnamed: Option<usize> = None;
    for row in &table.rows {
        match designation(row) {
            Some(d) => {
                let k = order.iter().position(|o| *o == d).unwrap_or_else(|| {
                    order.push(d.clone());
                    order.len() - 1
                });
                body_of_row.push(Some(k));
            }
            None => {
                unnamed = unnamed.or(Some(row.line));
                body_of_row.push(None);
            }
        }
    }
    if order.is_empty() {
        return Ok(vec![(None, observations_from_table(&table, ades, sites, min_count, true)?)]);
    }
    if let Some(line) = unnamed {
        let field = if ades { ADES_DESIGNATIONS.join("/") } else { CSV_DESIGNATION.to_string() };
        return Err(InputError {
            file,
            line,
            field: Some(field),
            message: "this row names no body while other rows do: every row of a file with several bodies needs its designation".into(),
        });
    }
    // Each body read from its own rows, with the file's line numbers.
    order
        .iter()
        .enumerate()
        .map(|(k, name)| {
            let own = Table {
                rows: table
                    .rows
                    .iter()
                    .zip(&body_of_row)
                    .filter(|(_, b)| **b == Some(k))
                    .map(|(r, _)| r.clone())
                    .collect(),
                ..table.clone()
            };
            let list = observations_from_table(&own, ades, sites, min_count, true).map_err(|mut e| {
                if e.line == 0 {
                    e.message = format!("body `{name}`: {}", e.message);
                }
                e
            })?;
            Ok((Some(name.clone()), list))
        })
        .collect()
}

pub fn observations_csv(observations: &[Observation]) -> String {
    use std::fmt::Write as _;
    let mut csv = String::from("epoch_utc,ra_deg,dec_deg,sigma_ra_arcsec,sigma_dec_arcsec,site\n");
    for o in observations {
        let _ = writeln!(
            csv,
            "{},{:.9},{:.9},{},{},{}",
            o.epoch_text,
            o.ra_rad / RAD_PER_DEG,
            o.dec_rad / RAD_PER_DEG,
            o.sigma_ra_arcsec,
            o.sigma_dec_arcsec,
            o.site
        );
    }
    csv
}

/// Parses observations from text in Latens CSV or ADES PSV, as
/// [`read_observations`] reads a file; `file` names the text in messages
/// (a binding passes, say, `<DataFrame>`).
pub fn parse_observations(
    text: &str,
    file: &str,
    sites: &SiteTable,
    min_count: usize,
) -> Result<Vec<Observation>, InputError> {
    read_table_text(text.strip_prefix('\u{feff}').unwrap_or(text), file, sites, min_count, true)
}

fn read(path: &Path, sites: &SiteTable, min_count: usize, positions: bool) -> Result<Vec<Observation>, InputError> {
    let file = path.display().to_string();
    let text = read_text(path)?;
    read_table_text(&text, &file, sites, min_count, positions)
}

fn read_table_text(
    text: &str,
    file: &str,
    sites: &SiteTable,
    min_count: usize,
    positions: bool,
) -> Result<Vec<Observation>, InputError> {
    let (table, ades) = table_of(text, file)?;
    observations_from_table(&table, ades, sites, min_count, positions)
}

/// The table an observation file holds, and whether it is ADES (PSV or
/// XML): ADES XML when the text starts with `<`, ADES PSV when the header
/// has `|` separators, Latens CSV otherwise.
fn table_of(text: &str, file: &str) -> Result<(Table, bool), InputError> {
    if text.trim_start().starts_with('<') {
        return Ok((Table::from_ades_xml(text, file)?, true));
    }
    let header = text.lines().map(str::trim).find(|l| !l.is_empty() && !l.starts_with('#') && !l.starts_with('!'));
    let Some(header) = header else {
        return Err(InputError {
            file: file.into(),
            line: 0,
            field: None,
            message: "the file has no header and no observations".into(),
        });
    };
    let ades = header.contains('|');
    Ok((Table::parse(text, file, if ades { '|' } else { ',' })?, ades))
}

fn observations_from_table(
    table: &Table,
    ades: bool,
    sites: &SiteTable,
    min_count: usize,
    positions: bool,
) -> Result<Vec<Observation>, InputError> {
    let names = if ades {
        // ADES defines many more fields (permID, mode, mag, ...): they are
        // allowed and ignored.
        table.require(&["obsTime", "ra", "dec", "rmsRA", "rmsDec"], &["stn", "rmsCorr"])?;
        ColumnNames {
            epoch: "obsTime",
            ra: "ra",
            dec: "dec",
            sra: "rmsRA",
            sdec: "rmsDec",
            site: "stn",
            corr: "rmsCorr",
        }
    } else if positions {
        table.require(&CSV_POSITION_COLUMNS, &CSV_OPTIONAL_COLUMNS)?;
        csv_names()
    } else {
        table.require(&CSV_SCHEDULE_COLUMNS, &["site", "corr", "ra_deg", "dec_deg"])?;
        csv_names()
    };
    let mut out = Vec::with_capacity(table.rows.len());
    let mut seen: HashMap<(i128, String), usize> = HashMap::new();
    if ades && !positions {
        return Err(InputError {
            file: table.file.clone(),
            line: 0,
            field: None,
            message: "a schedule must be in Latens CSV (epoch_utc, sigma_ra_arcsec, sigma_dec_arcsec)".into(),
        });
    }
    for row in &table.rows {
        let epoch_text = row.text(names.epoch)?.to_string();
        let epoch = parse_utc_iso(&epoch_text).map_err(|e| row.error(names.epoch, &e.to_string()))?;
        let (ra, dec) = if positions {
            let ra = row.number(names.ra)?;
            if !(0.0..360.0).contains(&ra) {
                return Err(row.error(names.ra, &format!("{ra} is outside [0, 360) degrees")));
            }
            let dec = row.number(names.dec)?;
            if !(-90.0..=90.0).contains(&dec) {
                return Err(row.error(names.dec, &format!("{dec} is outside [-90, 90] degrees")));
            }
            (ra, dec)
        } else {
            (0.0, 0.0)
        };
        let sra = row.number(names.sra)?;
        let sdec = row.number(names.sdec)?;
        for (f, v) in [(names.sra, sra), (names.sdec, sdec)] {
            if v <= 0.0 {
                return Err(row.error(f, &format!("an uncertainty must be positive, got {v}")));
            }
        }
        let corr = match row.optional_text(names.corr) {
            Some(t) if !t.is_empty() => {
                let c = row.number(names.corr)?;
                if !(c > -1.0 && c < 1.0) {
                    return Err(
                        row.error(names.corr, &format!("a correlation must lie strictly between -1 and 1, got {c}"))
                    );
                }
                let _ = t;
                c
            }
            _ => 0.0,
        };
        let site = match row.optional_text(names.site) {
            Some(s) if !s.is_empty() => s.to_string(),
            _ => GEOCENTER.to_string(),
        };
        if !sites.contains(&site) {
            return Err(row.error(names.site, &format!("unknown site `{site}`: define it in a sites file (--sites)")));
        }
        let key =
            (epoch.to_time_scale(hifitime::TimeScale::TAI).to_duration_since_j1900().total_nanoseconds(), site.clone());
        if let Some(first) = seen.insert(key, row.line) {
            return Err(
                row.error(names.epoch, &format!("duplicates the observation on line {first} (same time and site)"))
            );
        }
        out.push(Observation {
            t_tdb_days: tdb_days_from_j2000(epoch),
            epoch,
            ra_rad: ra * RAD_PER_DEG,
            dec_rad: dec * RAD_PER_DEG,
            sigma_ra_arcsec: sra,
            sigma_dec_arcsec: sdec,
            corr,
            site,
            source: format!("{}:{}", table.file, row.line),
            epoch_text,
        });
    }
    if out.len() < min_count {
        return Err(InputError {
            file: table.file.clone(),
            line: 0,
            field: None,
            message: format!("{} observations; at least {min_count} are needed", out.len()),
        });
    }
    out.sort_by(|a, b| a.t_tdb_days.total_cmp(&b.t_tdb_days));
    Ok(out)
}

fn csv_names() -> ColumnNames {
    ColumnNames {
        epoch: "epoch_utc",
        ra: "ra_deg",
        dec: "dec_deg",
        sra: "sigma_ra_arcsec",
        sdec: "sigma_dec_arcsec",
        site: "site",
        corr: "corr",
    }
}

struct ColumnNames {
    epoch: &'static str,
    ra: &'static str,
    dec: &'static str,
    sra: &'static str,
    sdec: &'static str,
    site: &'static str,
    corr: &'static str,
}

fn read_text(path: &Path) -> Result<String, InputError> {
    let file = path.display().to_string();
    let bytes = std::fs::read(path).map_err(|e| InputError {
        file: file.clone(),
        line: 0,
        field: None,
        message: format!("cannot read: {e}"),
    })?;
    let text = String::from_utf8(bytes).map_err(|e| InputError {
        file: file.clone(),
        line: 0,
        field: None,
        message: format!("not UTF-8 text ({e})"),
    })?;
    Ok(text.strip_prefix('\u{feff}').map(str::to_string).unwrap_or(text))
}

/// A delimited text table with a header; comment and blank lines skipped.
#[derive(Clone)]
struct Table {
    file: String,
    columns: Vec<String>,
    header_line: usize,
    rows: Vec<Row>,
}

#[derive(Clone)]
struct Row {
    file: String,
    line: usize,
    values: HashMap<String, String>,
}

impl Table {
    /// Reads the optical observations of an IAU ADES XML file (root
    /// `<ades>`, `<obsBlock>`s holding `<obsData>` with `<optical>`
    /// elements whose child elements are the fields, named as in PSV):
    /// one row per `<optical>`, located at its line. Other observation
    /// kinds (`<radar>`, `<offset>`, `<occultation>`) are not positions and
    /// are left out ([`column_notes`] counts them). The XML is parsed by
    /// roxmltree.
    fn from_ades_xml(text: &str, file: &str) -> Result<Table, InputError> {
        let doc = roxmltree::Document::parse(text).map_err(|e| InputError {
            file: file.into(),
            line: e.pos().row as usize,
            field: None,
            message: format!("not well-formed XML: {e}"),
        })?;
        let root = doc.root_element();
        if root.tag_name().name() != "ades" {
            return Err(InputError {
                file: file.into(),
                line: doc.text_pos_at(root.range().start).row as usize,
                field: None,
                message: format!(
                    "format not recognised (expected ADES XML with an <ades> root element, found <{}>)",
                    root.tag_name().name()
                ),
            });
        }
        let mut columns: Vec<String> = Vec::new();
        let mut rows = Vec::new();
        for optical in root.descendants().filter(|n| n.is_element() && n.tag_name().name() == "optical") {
            let line = doc.text_pos_at(optical.range().start).row as usize;
            let mut values = HashMap::new();
            for field in optical.children().filter(|n| n.is_element()) {
                let name = field.tag_name().name().to_string();
                let value = field.text().unwrap_or("").trim().to_string();
                if values.insert(name.clone(), value).is_some() {
                    return Err(InputError {
                        file: file.into(),
                        line: doc.text_pos_at(field.range().start).row as usize,
                        field: Some(name),
                        message: "element given twice in one <optical>".into(),
                    });
                }
                if !columns.contains(&name) {
                    columns.push(name);
                }
            }
            rows.push(Row { file: file.into(), line, values });
        }
        let header_line = rows.first().map_or(1, |r| r.line);
        // Every row has every column the format requires; a missing element
        // is named at its own <optical>.
        for required in ["obsTime", "ra", "dec", "rmsRA", "rmsDec"] {
            if let Some(r) = rows.iter().find(|r| !r.values.contains_key(required))
                && columns.iter().any(|c| c == required)
            {
                return Err(r.error(required, "element missing from this <optical>"));
            }
        }
        Ok(Table { file: file.into(), columns, header_line, rows })
    }

    /// Reads the table with the csv crate (quoted fields unquoted, `#`
    /// comment lines and blank lines skipped, every field trimmed); in ADES
    /// PSV, `!` lines (header keywords) are skipped too. Line numbers are
    /// the file's own.
    fn parse(text: &str, file: &str, separator: char) -> Result<Table, InputError> {
        // `!` keyword lines of PSV become comments (same line count).
        let owned;
        let text = if separator == '|' {
            owned = text
                .split('\n')
                .map(|l| if l.trim_start().starts_with('!') { "#" } else { l })
                .collect::<Vec<_>>()
                .join("\n");
            owned.as_str()
        } else {
            text
        };
        let mut reader = csv::ReaderBuilder::new()
            .delimiter(separator as u8)
            .has_headers(false)
            .comment(Some(b'#'))
            .flexible(true)
            .trim(csv::Trim::All)
            .from_reader(text.as_bytes());
        let mut columns: Option<(Vec<String>, usize)> = None;
        let mut rows = Vec::new();
        for record in reader.records() {
            let record = record.map_err(|e| InputError {
                file: file.into(),
                line: e.position().map_or(0, |p| p.line() as usize),
                field: None,
                message: format!("not readable as delimited text: {e}"),
            })?;
            let line_no = record.position().map_or(0, |p| p.line() as usize);
            if record.iter().all(str::is_empty) {
                continue;
            }
            let fields: Vec<String> = record.iter().map(str::to_string).collect();
            match &columns {
                None => {
                    let mut seen = std::collections::HashSet::new();
                    for f in &fields {
                        if f.is_empty() {
                            return Err(InputError {
                                file: file.into(),
                                line: line_no,
                                field: None,
                                message: "the header has an empty column name".into(),
                            });
                        }
                        if !seen.insert(f.clone()) {
                            return Err(InputError {
                                file: file.into(),
                                line: line_no,
                                field: Some(f.clone()),
                                message: "column named twice in the header".into(),
                            });
                        }
                    }
                    columns = Some((fields, line_no));
                }
                Some((names, _)) => {
                    if fields.len() != names.len() {
                        return Err(InputError {
                            file: file.into(),
                            line: line_no,
                            field: None,
                            message: format!("{} fields where the header has {}", fields.len(), names.len()),
                        });
                    }
                    rows.push(Row {
                        file: file.into(),
                        line: line_no,
                        values: names.iter().cloned().zip(fields).collect(),
                    });
                }
            }
        }
        let Some((columns, header_line)) = columns else {
            return Err(InputError { file: file.into(), line: 0, field: None, message: "the file is empty".into() });
        };
        Ok(Table { file: file.into(), columns, header_line, rows })
    }

    /// Checks that every `required` column is present. When none of them
    /// is, the file is in another format and says so. Other columns are
    /// allowed ([`column_notes`] names them).
    fn require(&self, required: &[&str], optional: &[&str]) -> Result<(), InputError> {
        let has = |r: &&str| self.columns.iter().any(|c| c == r);
        if !required.iter().any(has) {
            let tabs = if self.columns.iter().any(|c| c.contains('\t')) {
                "; this file is tab-separated: use commas"
            } else {
                ""
            };
            return Err(InputError {
                file: self.file.clone(),
                line: self.header_line,
                field: None,
                message: format!(
                    "format not recognised (expected Latens CSV with the header {}{}, or ADES PSV with \
                     obsTime|ra|dec|rmsRA|rmsDec){tabs}",
                    required.join(","),
                    optional.iter().map(|o| format!("[,{o}]")).collect::<String>(),
                ),
            });
        }
        for r in required {
            if !has(r) {
                return Err(InputError {
                    file: self.file.clone(),
                    line: self.header_line,
                    field: Some(r.to_string()),
                    message: "required column missing from the header".into(),
                });
            }
        }
        Ok(())
    }
}

impl Row {
    fn error(&self, field: &str, message: &str) -> InputError {
        InputError {
            file: self.file.clone(),
            line: self.line,
            field: Some(field.to_string()),
            message: message.to_string(),
        }
    }

    fn text(&self, field: &str) -> Result<&str, InputError> {
        self.values.get(field).map(String::as_str).ok_or_else(|| self.error(field, "missing"))
    }

    fn optional_text(&self, field: &str) -> Option<&str> {
        self.values.get(field).map(String::as_str)
    }

    fn number(&self, field: &str) -> Result<f64, InputError> {
        let t = self.text(field)?;
        let v: f64 = t.parse().map_err(|_| self.error(field, &format!("`{t}` is not a number")))?;
        if !v.is_finite() {
            return Err(self.error(field, &format!("`{t}` is not a finite number")));
        }
        Ok(v)
    }
}
