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
#[error("{file}:{line}: {}{message}", field.as_ref().map(|f| format!("field `{f}`: ")).unwrap_or_default())]
pub struct InputError {
    pub file: String,
    /// 1-based line number (0 for the file as a whole).
    pub line: usize,
    pub field: Option<String>,
    pub message: String,
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
        table.require(&["name", "lon_deg", "lat_deg", "height_m"], &[], false)?;
        for row in &table.rows {
            let name = row.text("name")?.to_string();
            if name.is_empty() {
                return Err(row.error("name", "a site needs a name"));
            }
            let lon = row.number("lon_deg")?;
            let lat = row.number("lat_deg")?;
            let height = row.number("height_m")?;
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
    let ades = text
        .lines()
        .map(str::trim)
        .find(|l| !l.is_empty() && !l.starts_with('#') && !l.starts_with('!'))
        .is_some_and(|h| h.contains('|'));
    let table = Table::parse(&text, &file, if ades { '|' } else { ',' })?;
    let designation = |row: &Row| -> Option<String> {
        let names: &[&str] = if ades { &ADES_DESIGNATIONS } else { &[CSV_DESIGNATION] };
        names.iter().filter_map(|n| row.optional_text(n)).find(|t| !t.is_empty()).map(str::to_string)
    };
    let mut order: Vec<String> = Vec::new();
    let mut line_body: HashMap<usize, usize> = HashMap::new();
    let mut unnamed: Option<usize> = None;
    for row in &table.rows {
        match designation(row) {
            Some(d) => {
                let k = order.iter().position(|o| *o == d).unwrap_or_else(|| {
                    order.push(d.clone());
                    order.len() - 1
                });
                line_body.insert(row.line, k);
            }
            None => unnamed = unnamed.or(Some(row.line)),
        }
    }
    if order.is_empty() {
        return Ok(vec![(None, read_table_text(&text, &file, sites, min_count, true)?)]);
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
    // Each body read from the file with the other bodies' rows blanked, so
    // that every message keeps the file's own line numbers.
    let lines: Vec<&str> = text.split('\n').collect();
    order
        .iter()
        .enumerate()
        .map(|(k, name)| {
            let own: String = lines
                .iter()
                .enumerate()
                .map(|(i, l)| match line_body.get(&(i + 1)) {
                    Some(&b) if b != k => "",
                    _ => l,
                })
                .collect::<Vec<&str>>()
                .join("\n");
            let list = read_table_text(&own, &file, sites, min_count, true).map_err(|mut e| {
                if e.line == 0 {
                    e.message = format!("body `{name}`: {}", e.message);
                }
                e
            })?;
            Ok((Some(name.clone()), list))
        })
        .collect()
}

/// Observations as Latens CSV text (what `simulate` writes): epochs as
/// given, RA and Dec to 1e-9 degree (4 microarcsec), sigmas and sites.
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
    let file = file.to_string();
    let header = text.lines().map(str::trim).find(|l| !l.is_empty() && !l.starts_with('#') && !l.starts_with('!'));
    let Some(header) = header else {
        return Err(InputError {
            file,
            line: 0,
            field: None,
            message: "the file has no header and no observations".into(),
        });
    };
    let ades = header.contains('|');
    let table = Table::parse(text, &file, if ades { '|' } else { ',' })?;
    let names = if ades {
        // ADES defines many more fields (permID, mode, mag, ...): they are
        // allowed and ignored.
        table.require(&["obsTime", "ra", "dec", "rmsRA", "rmsDec"], &["stn", "rmsCorr"], true)?;
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
        table.require(
            &["epoch_utc", "ra_deg", "dec_deg", "sigma_ra_arcsec", "sigma_dec_arcsec"],
            &["site", "corr", CSV_DESIGNATION],
            false,
        )?;
        csv_names()
    } else {
        table.require(
            &["epoch_utc", "sigma_ra_arcsec", "sigma_dec_arcsec"],
            &["site", "corr", "ra_deg", "dec_deg"],
            false,
        )?;
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
struct Table {
    file: String,
    columns: Vec<String>,
    header_line: usize,
    rows: Vec<Row>,
}

struct Row {
    file: String,
    line: usize,
    values: HashMap<String, String>,
}

impl Table {
    fn parse(text: &str, file: &str, separator: char) -> Result<Table, InputError> {
        let mut columns: Option<(Vec<String>, usize)> = None;
        let mut rows = Vec::new();
        for (i, raw) in text.split('\n').enumerate() {
            let line_no = i + 1;
            let line = raw.strip_suffix('\r').unwrap_or(raw).trim();
            // `#` starts a comment; in ADES PSV, `!` starts a header keyword line.
            if line.is_empty() || line.starts_with('#') || (separator == '|' && line.starts_with('!')) {
                continue;
            }
            let fields: Vec<String> = line.split(separator).map(|f| f.trim().to_string()).collect();
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

    /// Checks that every `required` column is present and, unless
    /// `allow_other`, that no column is unknown.
    fn require(&self, required: &[&str], optional: &[&str], allow_other: bool) -> Result<(), InputError> {
        for r in required {
            if !self.columns.iter().any(|c| c == r) {
                return Err(InputError {
                    file: self.file.clone(),
                    line: self.header_line,
                    field: Some(r.to_string()),
                    message: "required column missing from the header".into(),
                });
            }
        }
        for c in &self.columns {
            if !allow_other && !required.contains(&c.as_str()) && !optional.contains(&c.as_str()) {
                return Err(InputError {
                    file: self.file.clone(),
                    line: self.header_line,
                    field: Some(c.clone()),
                    message: format!(
                        "unknown column (known: {})",
                        required.iter().chain(optional).copied().collect::<Vec<_>>().join(", ")
                    ),
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
