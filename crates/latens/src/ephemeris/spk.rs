//! A reader for JPL SPK ephemeris files (NAIF DAF/SPK, segment types 2 and 3).
//!
//! Written here rather than taken from a crate: the Rust ephemeris toolkits
//! that read SPK files are prereleases that pull in a second linear-algebra
//! stack, while DE files use only two simple segment types. The reader is a
//! few hundred lines with its checks and no dependency.
//!
//! Format (NAIF "DAF Required Reading" and "SPK Required Reading"): a file of
//! 1024-byte records. Record 1 holds the identification word `DAF/SPK`, the
//! summary sizes ND = 2 and NI = 6, the first and last summary-record numbers
//! and the byte order (`LTL-IEEE` or `BIG-IEEE`). Summary records hold, for
//! each segment, its start and end (TDB seconds past J2000) and six integers:
//! target, centre, frame, type, first and last word address. A type-2 segment is
//! a run of equal-length records, each `[MID, RADIUS, x coefficients, y
//! coefficients, z coefficients]` of a Chebyshev series in
//! `s = (t - MID) / RADIUS`, in km; type 3 adds coefficients for the velocity
//! (km/s). The segment ends with `[INIT, INTLEN, RSIZE, N]`.
//!
//! The whole file is read into memory (17 MB for DE421, 115 MB for DE440).
//! When several segments cover the same target and time, the one stored last
//! wins, as in the SPICE toolkit.

use std::path::Path;

use super::{Body, Ephemeris, EphemerisError, HeliocentricState};
use crate::units::{AU_KM, DAY_S};
use crate::vec3::Vec3;

const RECORD_BYTES: usize = 1024;
/// NAIF code of the solar-system barycentre.
const SSB: i32 = 0;
/// NAIF frame code of "J2000", which DE files use for the ICRF.
const FRAME_J2000: i32 = 1;

/// One segment's description, for listings.
#[derive(Clone, Debug, PartialEq)]
pub struct SpkSegmentInfo {
    pub target: i32,
    pub center: i32,
    pub frame: i32,
    pub data_type: i32,
    /// Covered span, TDB seconds past J2000.
    pub start_tdb_s: f64,
    pub end_tdb_s: f64,
}

#[derive(Clone, Debug)]
struct Segment {
    info: SpkSegmentInfo,
    init_s: f64,
    interval_s: f64,
    record_len: usize,
    n_records: usize,
    /// Coefficients of each Chebyshev series (components x, y, z; then vx, vy,
    /// vz for type 3).
    coef_per_component: usize,
    records: Vec<f64>,
}

/// A JPL SPK ephemeris file in memory.
#[derive(Clone, Debug)]
pub struct SpkFile {
    label: String,
    segments: Vec<Segment>,
}

impl SpkFile {
    /// Reads an SPK file.
    pub fn open(path: &Path) -> Result<SpkFile, EphemerisError> {
        let label = path.display().to_string();
        let bytes = std::fs::read(path)
            .map_err(|e| EphemerisError::File { path: label.clone(), reason: format!("cannot read: {e}") })?;
        SpkFile::from_bytes(&bytes, &label)
    }

    /// Parses SPK bytes; `label` names the source in error messages.
    pub fn from_bytes(bytes: &[u8], label: &str) -> Result<SpkFile, EphemerisError> {
        let fail = |reason: String| EphemerisError::File { path: label.to_string(), reason };
        if bytes.len() < RECORD_BYTES {
            return Err(fail("too short to be an SPK file (no file record)".into()));
        }
        if &bytes[0..8] != b"DAF/SPK " && &bytes[0..7] != b"NAIF/DA" {
            return Err(fail(format!(
                "not an SPK file: it starts with `{}`, not `DAF/SPK`",
                String::from_utf8_lossy(&bytes[0..8]).trim()
            )));
        }
        let little = match &bytes[88..96] {
            b"LTL-IEEE" => true,
            b"BIG-IEEE" => false,
            // Files older than the format string: guess from ND, which must be 2.
            _ => i32::from_le_bytes([bytes[8], bytes[9], bytes[10], bytes[11]]) == 2,
        };
        let reader = Words { bytes, little };
        let nd = reader.int_at_byte(8);
        let ni = reader.int_at_byte(12);
        if nd != 2 || ni != 6 {
            return Err(fail(format!("summary sizes ND={nd}, NI={ni}; an SPK file has ND=2, NI=6")));
        }
        let summary_doubles = 2 + 3; // ND + (NI + 1) / 2
        let mut record = reader.int_at_byte(76);
        let mut segments = Vec::new();
        let mut visited = 0usize;
        while record > 0 {
            visited += 1;
            if visited > bytes.len() / RECORD_BYTES {
                return Err(fail("the chain of summary records loops".into()));
            }
            let base_word = (record as usize - 1) * (RECORD_BYTES / 8);
            let control = reader
                .doubles(base_word, 3)
                .ok_or_else(|| fail(format!("summary record {record} lies past the end of the file")))?;
            let (next, count) = (control[0], control[2]);
            if !(0.0..=125.0).contains(&count) || count.fract() != 0.0 {
                return Err(fail(format!("summary record {record} claims {count} summaries")));
            }
            for k in 0..count as usize {
                let s = reader
                    .doubles(base_word + 3 + k * summary_doubles, summary_doubles)
                    .ok_or_else(|| fail(format!("summary {k} of record {record} lies past the end of the file")))?;
                let ints = reader.ints_in_doubles(&s[2..5]);
                let info = SpkSegmentInfo {
                    target: ints[0],
                    center: ints[1],
                    frame: ints[2],
                    data_type: ints[3],
                    start_tdb_s: s[0],
                    end_tdb_s: s[1],
                };
                let (first, last) = (ints[4], ints[5]);
                if info.data_type != 2 && info.data_type != 3 {
                    // Other types are legal SPK but not used by planetary DE
                    // files; they are skipped, and asking for such a body
                    // reports it as not provided.
                    continue;
                }
                segments.push(read_segment(&reader, info, first, last).map_err(&fail)?);
            }
            record = next as i32;
        }
        if segments.is_empty() {
            return Err(fail("no segment of type 2 or 3".into()));
        }
        Ok(SpkFile { label: label.to_string(), segments })
    }

    /// Descriptions of the segments Latens can use, in file order.
    pub fn segments(&self) -> Vec<SpkSegmentInfo> {
        self.segments.iter().map(|s| s.info.clone()).collect()
    }

    /// Position (km) and velocity (km/s) of `target` relative to `center` at
    /// `tdb_s` TDB seconds past J2000, chaining segments through the
    /// solar-system barycentre (e.g. Earth = EMB + Earth-from-EMB).
    pub fn state_km(&self, target: i32, center: i32, tdb_s: f64) -> Result<(Vec3, Vec3), EphemerisError> {
        let (pt, vt) = self.barycentric_km(target, tdb_s)?;
        let (pc, vc) = self.barycentric_km(center, tdb_s)?;
        Ok((pt - pc, vt - vc))
    }

    /// State of one NAIF body relative to the solar-system barycentre.
    fn barycentric_km(&self, target: i32, tdb_s: f64) -> Result<(Vec3, Vec3), EphemerisError> {
        let mut pos = Vec3::ZERO;
        let mut vel = Vec3::ZERO;
        let mut body = target;
        for _ in 0..16 {
            if body == SSB {
                return Ok((pos, vel));
            }
            let seg = self.segment_for(body, tdb_s)?;
            if seg.info.frame != FRAME_J2000 {
                return Err(EphemerisError::File {
                    path: self.label.clone(),
                    reason: format!(
                        "segment for body {body} uses frame {}, only J2000/ICRF (1) is supported",
                        seg.info.frame
                    ),
                });
            }
            let (p, v) = seg.state_km(tdb_s);
            pos += p;
            vel += v;
            body = seg.info.center;
        }
        Err(EphemerisError::File {
            path: self.label.clone(),
            reason: format!("segments for body {target} do not lead to the barycentre"),
        })
    }

    fn segment_for(&self, body: i32, tdb_s: f64) -> Result<&Segment, EphemerisError> {
        let mut span: Option<(f64, f64)> = None;
        for seg in self.segments.iter().rev().filter(|s| s.info.target == body) {
            if tdb_s >= seg.info.start_tdb_s && tdb_s <= seg.info.end_tdb_s {
                return Ok(seg);
            }
            let (a, b) = span.unwrap_or((f64::INFINITY, f64::NEG_INFINITY));
            span = Some((a.min(seg.info.start_tdb_s), b.max(seg.info.end_tdb_s)));
        }
        match span {
            None => {
                Err(EphemerisError::NotProvided { ephemeris: self.description(), body: format!("NAIF body {body}") })
            }
            Some((a, b)) => Err(EphemerisError::OutOfRange {
                ephemeris: self.description(),
                body: format!("NAIF body {body}"),
                t_tdb_days: tdb_s / DAY_S,
                covered_tdb_days: (a / DAY_S, b / DAY_S),
            }),
        }
    }

    /// The TDB span (seconds past J2000) over which the chain from `body` to
    /// the barycentre is covered, assuming each body's segments are contiguous.
    fn chain_span_s(&self, body: i32) -> Option<(f64, f64)> {
        let mut span = (f64::NEG_INFINITY, f64::INFINITY);
        let mut b = body;
        for _ in 0..16 {
            if b == SSB {
                return Some(span);
            }
            let segs: Vec<&Segment> = self.segments.iter().filter(|s| s.info.target == b).collect();
            let last = segs.last()?;
            let start = segs.iter().map(|s| s.info.start_tdb_s).fold(f64::INFINITY, f64::min);
            let end = segs.iter().map(|s| s.info.end_tdb_s).fold(f64::NEG_INFINITY, f64::max);
            span = (span.0.max(start), span.1.min(end));
            b = last.info.center;
        }
        None
    }
}

impl Ephemeris for SpkFile {
    fn description(&self) -> String {
        format!("SPK file {}", self.label)
    }

    fn covered_tdb_days(&self, body: Body) -> Option<(f64, f64)> {
        let (a, b) = self.chain_span_s(body.naif_id())?;
        let (c, d) = self.chain_span_s(Body::Sun.naif_id())?;
        let (lo, hi) = (a.max(c), b.min(d));
        (lo <= hi).then_some((lo / DAY_S, hi / DAY_S))
    }

    fn heliocentric_state(&self, body: Body, t_tdb_days: f64) -> Result<HeliocentricState, EphemerisError> {
        if !t_tdb_days.is_finite() {
            return Err(EphemerisError::OutOfRange {
                ephemeris: self.description(),
                body: body.to_string(),
                t_tdb_days,
                covered_tdb_days: self.covered_tdb_days(body).unwrap_or((0.0, 0.0)),
            });
        }
        let tdb_s = t_tdb_days * DAY_S;
        let named = |e: EphemerisError| match e {
            EphemerisError::OutOfRange { ephemeris, t_tdb_days, covered_tdb_days, .. } => EphemerisError::OutOfRange {
                ephemeris,
                body: body.to_string(),
                t_tdb_days,
                covered_tdb_days: self.covered_tdb_days(body).unwrap_or(covered_tdb_days),
            },
            EphemerisError::NotProvided { ephemeris, .. } => {
                EphemerisError::NotProvided { ephemeris, body: body.to_string() }
            }
            other => other,
        };
        let (p, v) = if body == Body::Sun {
            (Vec3::ZERO, Vec3::ZERO)
        } else {
            self.state_km(body.naif_id(), Body::Sun.naif_id(), tdb_s).map_err(named)?
        };
        Ok(HeliocentricState { body, t_tdb_days, position_au: p / AU_KM, velocity_au_per_day: v * (DAY_S / AU_KM) })
    }
}

impl Segment {
    /// Position (km) and velocity (km/s) from this segment at `tdb_s`.
    fn state_km(&self, tdb_s: f64) -> (Vec3, Vec3) {
        let raw = ((tdb_s - self.init_s) / self.interval_s).floor();
        let index = if raw < 0.0 { 0 } else { (raw as usize).min(self.n_records - 1) };
        let rec = &self.records[index * self.record_len..(index + 1) * self.record_len];
        let (mid, radius) = (rec[0], rec[1]);
        let s = (tdb_s - mid) / radius;
        let n = self.coef_per_component;
        let series = |c: usize| &rec[2 + c * n..2 + (c + 1) * n];
        let mut pos = [0.0; 3];
        let mut vel = [0.0; 3];
        for c in 0..3 {
            let (value, derivative) = chebyshev_with_derivative(series(c), s);
            pos[c] = value;
            vel[c] = if self.info.data_type == 3 {
                chebyshev_with_derivative(series(3 + c), s).0
            } else {
                derivative / radius
            };
        }
        (Vec3::from_array(pos), Vec3::from_array(vel))
    }
}

/// The value and the derivative (with respect to `s`) of a Chebyshev series
/// `sum c_k T_k(s)`, by the three-term recurrences of T_k and T'_k.
fn chebyshev_with_derivative(c: &[f64], s: f64) -> (f64, f64) {
    let (mut t_prev, mut t) = (1.0, s);
    let (mut d_prev, mut d) = (0.0, 1.0);
    let mut value = c[0];
    let mut deriv = 0.0;
    if c.len() > 1 {
        value += c[1] * s;
        deriv += c[1];
    }
    for &ck in c.iter().skip(2) {
        let t_next = 2.0 * s * t - t_prev;
        let d_next = 2.0 * t + 2.0 * s * d - d_prev;
        value += ck * t_next;
        deriv += ck * d_next;
        (t_prev, t) = (t, t_next);
        (d_prev, d) = (d, d_next);
    }
    (value, deriv)
}

fn read_segment(reader: &Words, info: SpkSegmentInfo, first: i32, last: i32) -> Result<Segment, String> {
    let what = format!("segment {} -> {} (type {})", info.center, info.target, info.data_type);
    if first < 1 || last < first + 3 {
        return Err(format!("{what}: word addresses {first}..{last} are not a valid range"));
    }
    let (first, last) = (first as usize, last as usize);
    let tail = reader.doubles(last - 4, 4).ok_or_else(|| format!("{what}: its data lie past the end of the file"))?;
    let (init_s, interval_s, record_len, n_records) = (tail[0], tail[1], tail[2], tail[3]);
    let components = if info.data_type == 3 { 6.0 } else { 3.0 };
    let bad = interval_s.is_nan()
        || interval_s <= 0.0
        || !init_s.is_finite()
        || record_len.fract() != 0.0
        || n_records.fract() != 0.0
        || n_records < 1.0
        || record_len < 2.0 + components
        || ((record_len - 2.0) % components) != 0.0;
    if bad {
        return Err(format!(
            "{what}: directory [INIT={init_s}, INTLEN={interval_s}, RSIZE={record_len}, N={n_records}] is not valid"
        ));
    }
    let (record_len, n_records) = (record_len as usize, n_records as usize);
    let total = record_len.checked_mul(n_records).ok_or_else(|| format!("{what}: size overflows"))?;
    if first - 1 + total + 4 > last {
        return Err(format!("{what}: {n_records} records of {record_len} words do not fit in words {first}..{last}"));
    }
    let records =
        reader.doubles(first - 1, total).ok_or_else(|| format!("{what}: its records lie past the end of the file"))?;
    // Each record covers its own interval: midpoint INIT + (k + 1/2) INTLEN
    // and radius INTLEN / 2 (the SPK Required Reading, types 2 and 3); its
    // coefficients are finite and of a size a solar-system body can have
    // (below 1e13 km, about 67 000 au). A record that breaks this is
    // corrupt, and named.
    for (k, r) in records.chunks(record_len).enumerate() {
        let mid = init_s + (k as f64 + 0.5) * interval_s;
        let tolerance = 1e-6 * interval_s;
        if !r.iter().all(|x| x.is_finite()) {
            return Err(format!("{what}: record {} of {n_records} holds a non-finite coefficient", k + 1));
        }
        if (r[0] - mid).abs() > tolerance || (r[1] - 0.5 * interval_s).abs() > tolerance {
            return Err(format!(
                "{what}: record {} of {n_records} gives midpoint {:e} s and radius {:e} s where the directory implies {mid:e} s and {:e} s",
                k + 1,
                r[0],
                r[1],
                0.5 * interval_s
            ));
        }
        if let Some(c) = r[2..].iter().find(|c| c.abs() > 1e13) {
            return Err(format!("{what}: record {} of {n_records} holds an absurd coefficient ({c:e})", k + 1));
        }
    }
    Ok(Segment {
        coef_per_component: (record_len - 2) / components as usize,
        info,
        init_s,
        interval_s,
        record_len,
        n_records,
        records,
    })
}

/// Reads 8-byte words of a DAF file in its byte order. Word addresses are
/// zero-based here.
struct Words<'a> {
    bytes: &'a [u8],
    little: bool,
}

impl Words<'_> {
    fn int_at_byte(&self, at: usize) -> i32 {
        let b = [self.bytes[at], self.bytes[at + 1], self.bytes[at + 2], self.bytes[at + 3]];
        if self.little { i32::from_le_bytes(b) } else { i32::from_be_bytes(b) }
    }

    fn doubles(&self, first_word: usize, count: usize) -> Option<Vec<f64>> {
        let start = first_word.checked_mul(8)?;
        let end = start.checked_add(count.checked_mul(8)?)?;
        let bytes = self.bytes.get(start..end)?;
        Some(
            bytes
                .chunks_exact(8)
                .map(|c| {
                    let a: [u8; 8] = c.try_into().unwrap_or([0; 8]);
                    if self.little { f64::from_le_bytes(a) } else { f64::from_be_bytes(a) }
                })
                .collect(),
        )
    }

    /// The integers packed two to a double in a summary.
    fn ints_in_doubles(&self, d: &[f64]) -> Vec<i32> {
        let mut out = Vec::with_capacity(2 * d.len());
        for x in d {
            let b = if self.little { x.to_le_bytes() } else { x.to_be_bytes() };
            for half in [&b[0..4], &b[4..8]] {
                let a: [u8; 4] = half.try_into().unwrap_or([0; 4]);
                out.push(if self.little { i32::from_le_bytes(a) } else { i32::from_be_bytes(a) });
            }
        }
        out
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn chebyshev_matches_explicit_polynomials() {
        // T0 = 1, T1 = s, T2 = 2s^2 - 1, T3 = 4s^3 - 3s
        let c = [0.5, -1.0, 2.0, 0.25];
        let s: f64 = 0.3;
        let want = 0.5 - s + 2.0 * (2.0 * s * s - 1.0) + 0.25 * (4.0 * s.powi(3) - 3.0 * s);
        let want_d = -1.0 + 2.0 * 4.0 * s + 0.25 * (12.0 * s * s - 3.0);
        let (v, d) = chebyshev_with_derivative(&c, s);
        assert!((v - want).abs() < 1e-15 && (d - want_d).abs() < 1e-15);
    }

    #[test]
    fn garbage_is_refused_without_panicking() {
        assert!(SpkFile::from_bytes(b"short", "x").is_err());
        let mut junk = vec![0u8; 4096];
        assert!(SpkFile::from_bytes(&junk, "x").is_err());
        junk[0..8].copy_from_slice(b"DAF/SPK ");
        junk[88..96].copy_from_slice(b"LTL-IEEE");
        junk[8..12].copy_from_slice(&2i32.to_le_bytes());
        junk[12..16].copy_from_slice(&6i32.to_le_bytes());
        junk[76..80].copy_from_slice(&9999i32.to_le_bytes());
        let e = SpkFile::from_bytes(&junk, "x").unwrap_err().to_string();
        assert!(e.contains("past the end"), "{e}");
    }
}
