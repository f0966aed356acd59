//! The search chart: where to point. Top: the whole sky in an equal-area
//! Hammer-Aitoff projection, equatorial coordinates centred on RA 12 h with
//! RA increasing to the left (as the sky is seen), the 90% and 50% credible
//! regions, the ecliptic, the galactic plane, the Sun and the zone too close
//! to it to observe. Bottom: one zoomed panel per major mode with the
//! posterior density, its 50% and 90% contours and an RA/Dec grid.
//!
//! Colours: regions in two strengths of one warm hue (light: 90%, dark:
//! 50%), so they stay distinct in greyscale; lines are told apart by dash
//! pattern, not only colour.

use plotters::coord::Shift;
use plotters::prelude::*;
use plotters::style::text_anchor::{HPos, Pos, VPos};

pub use latens::frames::{from_tangent, tangent};

use latens::vec3::Vec3;

const INK: RGBColor = RGBColor(30, 30, 30);
const REGION90: RGBColor = RGBColor(250, 196, 120);
const REGION50: RGBColor = RGBColor(176, 72, 16);
const SUN_ZONE: RGBColor = RGBColor(215, 215, 215);
const ECLIPTIC: RGBColor = RGBColor(30, 90, 170);
const GALACTIC: RGBColor = RGBColor(90, 140, 60);

/// A filled sky polygon (unit vectors around it) and which layer it is.
#[derive(Clone, Debug)]
pub struct SkyCell {
    pub corners: Vec<Vec3>,
    pub centre: Vec3,
    /// 0: 90% region, 1: 50% region, 2: near the Sun.
    pub layer: u8,
}

/// One zoomed panel: a tangent-plane raster of density and the two contour
/// levels.
pub struct ZoomPanel {
    pub title: String,
    pub centre: Vec3,
    /// Half width of the panel, degrees.
    pub half_width_deg: f64,
    /// density(direction) in probability per square degree.
    pub raster: Vec<Vec<f64>>,
    pub level50: f64,
    pub level90: f64,
}

pub struct SearchChart {
    pub title: String,
    pub subtitle: String,
    pub cells: Vec<SkyCell>,
    pub sun: Vec3,
    pub ecliptic: Vec<Vec3>,
    pub galactic_plane: Vec<Vec3>,
    /// Mode centres with their labels.
    pub marks: Vec<(Vec3, String)>,
    pub zooms: Vec<ZoomPanel>,
    /// Shown in a box on the chart when not empty.
    pub warning: String,
    /// Reasons to doubt the region (sampler not converged, another
    /// explanation preferred), each a line of the banner above the Sun's.
    pub cautions: Vec<String>,
    /// A known true place (a simulation's), marked apart from the modes.
    pub truth: Option<(Vec3, String)>,
    /// Places of basins the prior allows that fit about as well as the
    /// best but that the credible regions leave out, with their labels:
    /// where to look next if the region is searched in vain.
    pub left_out: Vec<(Vec3, String)>,
    /// The outline of the 90% confidence region (profile likelihood), as
    /// pixel edges (end points).
    pub confidence90: Vec<(Vec3, Vec3)>,
}

const TRUTH: RGBColor = RGBColor(20, 110, 200);
const LEFT_OUT: RGBColor = RGBColor(150, 30, 150);
const CONFIDENCE: RGBColor = RGBColor(0, 120, 110);

/// Points along an edge between two nearby directions (for a projection
/// that bends it).
fn along(a: Vec3, b: Vec3, n: usize) -> Vec<Vec3> {
    (0..=n).map(|k| (a + (b - a) * (k as f64 / n as f64)).unit()).collect()
}

/// An open square at a pixel position.
fn open_square(x: i32, y: i32, r: i32, style: ShapeStyle) -> Rectangle<(i32, i32)> {
    Rectangle::new([(x - r, y - r), (x + r, y + r)], style)
}

/// A diamond at a pixel position.
fn diamond(x: i32, y: i32, r: i32, style: ShapeStyle) -> Polygon<(i32, i32)> {
    Polygon::new(vec![(x, y - r), (x + r, y), (x, y + r), (x - r, y)], style)
}

/// An RA in hours and minutes ("5h 04m"), whole hours as "5h".
pub fn ra_hm(ra_deg: f64) -> String {
    let minutes = (ra_deg.rem_euclid(360.0) / 15.0 * 60.0).round() as i64 % (24 * 60);
    let (h, m) = (minutes / 60, minutes % 60);
    if m == 0 { format!("{h}h") } else { format!("{h}h {m:02}m") }
}

/// A Dec grid label at the grid's precision: "+40°", or "+42.5°".
fn dec_label(dec: f64, spacing: f64) -> String {
    let dec = if dec.abs() < 1e-9 { 0.0 } else { dec };
    if spacing >= 1.0 { format!("{dec:+.0}°") } else { format!("{dec:+.1}°") }
}

/// Hammer-Aitoff projection of a direction, RA 180 deg in the centre, RA
/// increasing to the left: x in [-2 sqrt 2, 2 sqrt 2], y in [-sqrt 2, sqrt 2].
pub fn hammer(d: Vec3) -> (f64, f64) {
    let (ra, dec) = ra_dec(d);
    hammer_ra_dec(ra, dec)
}

pub(crate) fn hammer_ra_dec(ra: f64, dec: f64) -> (f64, f64) {
    // Longitude measured from the centre, positive to the left.
    let l = -(ra - std::f64::consts::PI);
    let den = (1.0 + dec.cos() * (l / 2.0).cos()).sqrt();
    (2.0 * std::f64::consts::SQRT_2 * dec.cos() * (l / 2.0).sin() / den, std::f64::consts::SQRT_2 * dec.sin() / den)
}

fn ra_dec(d: Vec3) -> (f64, f64) {
    latens::skymap::lon_lat(d)
}

/// A polygon's projected corners, unwrapped in RA around its centre (kept
/// on the centre's side of the chart's edge).
fn project_cell(cell: &SkyCell) -> Vec<(f64, f64)> {
    let (rc, _) = ra_dec(cell.centre);
    let pi = std::f64::consts::PI;
    cell.corners
        .iter()
        .map(|c| {
            let (mut r, d) = ra_dec(*c);
            while r - rc > pi {
                r -= 2.0 * pi;
            }
            while rc - r > pi {
                r += 2.0 * pi;
            }
            // Stay within the chart: RA within 180 deg of the centre RA 180.
            let r = r.clamp(1e-9, 2.0 * pi - 1e-9);
            hammer_ra_dec(r, d)
        })
        .collect()
}

/// A whole-sky chart's graticule and outline: RA every `hour_step` hours
/// (labelled on the equator), Dec every 30 deg (labelled at the right edge
/// when `dec_labels`; without, the RA labels get a white patch, for maps
/// filled with colour), and the projection's edge.
pub(crate) fn draw_graticule<DB: DrawingBackend>(
    chart: &mut ChartContext<
        '_,
        DB,
        Cartesian2d<plotters::coord::types::RangedCoordf64, plotters::coord::types::RangedCoordf64>,
    >,
    hour_step: usize,
    font: u32,
    dec_labels: bool,
) -> Result<(), String> {
    let e = |x: DrawingAreaErrorKind<DB::ErrorType>| x.to_string();
    let (xr, yr) = (2.0 * std::f64::consts::SQRT_2, std::f64::consts::SQRT_2);
    let grid = RGBColor(150, 150, 150);
    for h in (0..24).step_by(hour_step.max(1)) {
        let ra = (h as f64 * 15.0).to_radians().clamp(1e-6, std::f64::consts::TAU - 1e-6);
        let pts: Vec<(f64, f64)> = (-90..=90).map(|d| hammer_ra_dec(ra, (d as f64).to_radians())).collect();
        chart.draw_series(LineSeries::new(pts, grid.stroke_width(1))).map_err(e)?;
        let (x, y) = hammer_ra_dec(ra, 0.0);
        if !dec_labels {
            // On a filled map: a white patch keeps the label legible.
            let (w, h) = (0.03 * f64::from(font) / 3.0, 0.075 * f64::from(font) / 15.0);
            chart.draw_series([Rectangle::new([(x - 0.01, y + 0.01), (x + w, y - h)], WHITE.filled())]).map_err(e)?;
        }
        chart
            .draw_series([Text::new(format!("{h}h"), (x, y), ("sans-serif", font).into_font().color(&INK))])
            .map_err(e)?;
    }
    for d in [-60, -30, 0, 30, 60] {
        let dec = (d as f64).to_radians();
        let pts: Vec<(f64, f64)> = (0..=360)
            .map(|r| hammer_ra_dec((r as f64).to_radians().clamp(1e-6, std::f64::consts::TAU - 1e-6), dec))
            .collect();
        chart.draw_series(LineSeries::new(pts, grid.stroke_width(1))).map_err(e)?;
        if dec_labels {
            let (x, y) = hammer_ra_dec(std::f64::consts::TAU - 1e-6, dec);
            chart
                .draw_series([Text::new(
                    if d == 0 { "0°".to_string() } else { format!("{d:+}°") },
                    (x - 0.2, y + 0.03),
                    ("sans-serif", font).into_font().color(&INK),
                )])
                .map_err(e)?;
        }
    }
    let edge: Vec<(f64, f64)> = (0..=360)
        .map(|k| {
            let t = (k as f64).to_radians();
            (xr * t.cos(), yr * t.sin())
        })
        .collect();
    chart.draw_series(LineSeries::new(edge, INK.stroke_width(2))).map_err(e)?;
    Ok(())
}

/// Splits a projected curve where it jumps across the chart's edge.
pub(crate) fn split_curve(points: &[Vec3]) -> Vec<Vec<(f64, f64)>> {
    let mut out: Vec<Vec<(f64, f64)>> = vec![Vec::new()];
    let mut last: Option<(f64, f64)> = None;
    for p in points {
        let q = hammer(*p);
        if let Some(l) = last
            && (q.0 - l.0).abs() > 1.0
        {
            out.push(Vec::new());
        }
        if let Some(cur) = out.last_mut() {
            cur.push(q);
        }
        last = Some(q);
    }
    out
}

impl SearchChart {
    pub const SIZE: (u32, u32) = (1600, 1500);

    pub fn draw<DB: DrawingBackend>(&self, root: &DrawingArea<DB, Shift>) -> Result<(), String> {
        let e = |x: DrawingAreaErrorKind<DB::ErrorType>| x.to_string();
        root.fill(&WHITE).map_err(e)?;
        let (top, rest) = root.split_vertically(90);
        top.draw(&Text::new(self.title.clone(), (30, 14), ("sans-serif", 30).into_font().color(&INK))).map_err(e)?;
        top.draw(&Text::new(self.subtitle.clone(), (30, 54), ("sans-serif", 19).into_font().color(&INK))).map_err(e)?;
        let (sky, bottom) = rest.split_vertically(720);
        self.draw_sky(&sky)?;
        // The banner: every caution, then the Sun's warning (two lines each
        // at most), in red on the chart itself, not only in the text.
        let mut lines: Vec<String> = Vec::new();
        for text in self.cautions.iter().chain(std::iter::once(&self.warning)).filter(|t| !t.is_empty()) {
            let mut l = wrap(text, 150);
            l.truncate(2);
            lines.extend(l);
        }
        let banner_height = (24 * lines.len() as i32 + 28).max(76);
        let (banner, bottom) = bottom.split_vertically(banner_height);
        if !lines.is_empty() {
            let (w, _) = banner.dim_in_pixel();
            let bottom_edge = banner_height - 8;
            banner
                .draw(&Rectangle::new([(20, 6), (w as i32 - 20, bottom_edge)], RGBColor(255, 235, 235).filled()))
                .map_err(|x| x.to_string())?;
            banner
                .draw(&Rectangle::new([(20, 6), (w as i32 - 20, bottom_edge)], RGBColor(180, 0, 0).stroke_width(3)))
                .map_err(|x| x.to_string())?;
            for (k, line) in lines.iter().enumerate() {
                banner
                    .draw(&Text::new(
                        line.clone(),
                        (32, 14 + 24 * k as i32),
                        ("sans-serif", 18).into_font().color(&RGBColor(150, 0, 0)),
                    ))
                    .map_err(|x| x.to_string())?;
            }
        }
        if !self.zooms.is_empty() {
            let panels = bottom.split_evenly((1, self.zooms.len()));
            for (z, area) in self.zooms.iter().zip(&panels) {
                draw_zoom(z, area, self.truth.as_ref(), &self.confidence90, self.zooms.len())?;
            }
        }
        Ok(())
    }

    fn draw_sky<DB: DrawingBackend>(&self, area: &DrawingArea<DB, Shift>) -> Result<(), String> {
        let e = |x: DrawingAreaErrorKind<DB::ErrorType>| x.to_string();
        let xr = 2.0 * std::f64::consts::SQRT_2;
        let yr = std::f64::consts::SQRT_2;
        let mut chart = ChartBuilder::on(area)
            .margin(20)
            .margin_right(260)
            .build_cartesian_2d(-xr * 1.09..xr * 1.02, -yr * 1.04..yr * 1.04)
            .map_err(e)?;
        // Layers: near-Sun zone, 90%, 50%.
        for layer in [2u8, 0, 1] {
            let colour = match layer {
                0 => REGION90,
                1 => REGION50,
                _ => SUN_ZONE,
            };
            chart
                .draw_series(
                    self.cells
                        .iter()
                        .filter(|c| c.layer == layer)
                        .map(|c| Polygon::new(project_cell(c), colour.filled())),
                )
                .map_err(e)?;
        }
        draw_graticule(&mut chart, 2, 16, true)?;
        for part in split_curve(&self.ecliptic) {
            chart.draw_series(DashedLineSeries::new(part, 12, 6, ECLIPTIC.stroke_width(3))).map_err(e)?;
        }
        for part in split_curve(&self.galactic_plane) {
            chart.draw_series(DashedLineSeries::new(part, 3, 5, GALACTIC.stroke_width(3))).map_err(e)?;
        }
        for (a, b) in &self.confidence90 {
            for part in split_curve(&along(*a, *b, 4)) {
                chart.draw_series(LineSeries::new(part, CONFIDENCE.stroke_width(2))).map_err(e)?;
            }
        }
        let sun = hammer(self.sun);
        chart
            .draw_series([
                Circle::new(sun, 11, RGBColor(255, 215, 0).filled()),
                Circle::new(sun, 11, INK.stroke_width(2)),
                Circle::new(sun, 2, INK.filled()),
            ])
            .map_err(e)?;
        chart
            .draw_series([Text::new("Sun", (sun.0 + 0.06, sun.1 + 0.1), ("sans-serif", 18).into_font().color(&INK))])
            .map_err(e)?;
        for (d, label) in &self.marks {
            let p = hammer(*d);
            chart.draw_series([Cross::new(p, 9, INK.stroke_width(2))]).map_err(e)?;
            chart
                .draw_series([Text::new(
                    label.clone(),
                    (p.0 + 0.05, p.1 - 0.05),
                    ("sans-serif", 18).into_font().color(&INK),
                )])
                .map_err(e)?;
        }
        for (d, label) in &self.left_out {
            let p = hammer(*d);
            chart.draw_series([EmptyElement::at(p) + open_square(0, 0, 9, LEFT_OUT.stroke_width(3))]).map_err(e)?;
            chart
                .draw_series([Text::new(
                    label.clone(),
                    (p.0 + 0.05, p.1 + 0.12),
                    ("sans-serif", 18).into_font().color(&LEFT_OUT),
                )])
                .map_err(e)?;
        }
        if let Some((d, label)) = &self.truth {
            let p = hammer(*d);
            chart.draw_series([EmptyElement::at(p) + diamond(0, 0, 9, TRUTH.filled())]).map_err(e)?;
            // Beside the diamond, or above it where a mode's label (drawn
            // to the lower right of its cross) would run into it.
            let crowded = self.marks.iter().any(|(m, _)| {
                let q = hammer(*m);
                (q.0 - p.0).abs() < 0.6 && (q.1 - p.1).abs() < 0.2
            });
            let text_at = if crowded { (p.0 + 0.02, p.1 + 0.2) } else { (p.0 + 0.05, p.1 - 0.1) };
            // Near the map's right edge (x up to 2 sqrt 2) the label goes to
            // the left of the diamond (about 0.04 map units a character at
            // this size), so it never runs into the legend.
            let width = 0.04 * label.chars().count() as f64;
            let text_at = if text_at.0 + width > 2.7 { (p.0 - 0.05 - width, text_at.1) } else { text_at };
            chart
                .draw_series([Text::new(label.clone(), text_at, ("sans-serif", 18).into_font().color(&TRUTH))])
                .map_err(e)?;
        }
        // Legend, drawn by hand to the right of the map.
        let (w, _) = area.dim_in_pixel();
        let x0 = w as i32 - 250;
        let font = ("sans-serif", 17).into_font().color(&INK);
        let rows: [(&str, ShapeStyle, bool); 6] = [
            ("90% credible region", REGION90.filled(), true),
            ("50% credible region", REGION50.filled(), true),
            ("within 45° of the Sun", SUN_ZONE.filled(), true),
            ("ecliptic (long dashes)", ECLIPTIC.stroke_width(3), false),
            ("galactic plane (dots)", GALACTIC.stroke_width(3), false),
            ("Sun (yellow disc)", RGBColor(255, 215, 0).filled(), true),
        ];
        for (k, (label, style, filled)) in rows.iter().enumerate() {
            let y = 60 + 34 * k as i32;
            if *filled {
                area.draw(&Rectangle::new([(x0, y - 9), (x0 + 30, y + 9)], *style)).map_err(e)?;
                area.draw(&Rectangle::new([(x0, y - 9), (x0 + 30, y + 9)], INK.stroke_width(1))).map_err(e)?;
            } else {
                area.draw(&PathElement::new(vec![(x0, y), (x0 + 30, y)], *style)).map_err(e)?;
            }
            area.draw(&Text::new(label.to_string(), (x0 + 40, y - 9), font.clone())).map_err(e)?;
        }
        area.draw(&Text::new("×  mode centre", (x0 + 4, 60 + 34 * 6 - 9), font.clone())).map_err(e)?;
        let mut row = 7;
        if !self.confidence90.is_empty() {
            let y = 60 + 34 * row;
            area.draw(&PathElement::new(vec![(x0, y), (x0 + 30, y)], CONFIDENCE.stroke_width(3))).map_err(e)?;
            area.draw(&Text::new("90% confidence region", (x0 + 40, y - 9), font.clone())).map_err(e)?;
            area.draw(&Text::new("(profile likelihood)", (x0 + 40, y + 25 - 9), font.clone())).map_err(e)?;
            row += 2;
        }
        if self.truth.is_some() {
            let y = 60 + 34 * row;
            area.draw(&diamond(x0 + 9, y, 8, TRUTH.filled())).map_err(e)?;
            area.draw(&Text::new("true place (known)", (x0 + 26, y - 9), font.clone())).map_err(e)?;
            row += 1;
        }
        if !self.left_out.is_empty() {
            let y = 60 + 34 * row;
            area.draw(&open_square(x0 + 9, y, 8, LEFT_OUT.stroke_width(3))).map_err(e)?;
            area.draw(&Text::new("as good a fit, outside", (x0 + 26, y - 9), font.clone())).map_err(e)?;
            area.draw(&Text::new("the region (warnings)", (x0 + 26, y + 25 - 9), font.clone())).map_err(e)?;
            row += 2;
        }
        area.draw(&Text::new("RA grows to the left", (x0, 60 + 34 * row - 9), font.clone())).map_err(e)?;
        area.draw(&Text::new("equal-area (Hammer-Aitoff)", (x0, 60 + 34 * (row + 1) - 9), font)).map_err(e)?;
        Ok(())
    }
}

fn wrap(text: &str, width: usize) -> Vec<String> {
    let mut lines = vec![String::new()];
    for word in text.split_whitespace() {
        let cur = lines.last_mut().expect("one line");
        if !cur.is_empty() && cur.len() + word.len() + 1 > width {
            lines.push(word.to_string());
        } else {
            if !cur.is_empty() {
                cur.push(' ');
            }
            cur.push_str(word);
        }
    }
    lines
}

fn draw_zoom<DB: DrawingBackend>(
    z: &ZoomPanel,
    area: &DrawingArea<DB, Shift>,
    truth: Option<&(Vec3, String)>,
    confidence90: &[(Vec3, Vec3)],
    n_panels: usize,
) -> Result<(), String> {
    let e = |x: DrawingAreaErrorKind<DB::ErrorType>| x.to_string();
    let h = z.half_width_deg;
    let (w, _) = area.dim_in_pixel();
    // The density's colour bar on the right of each panel.
    let (area, bar) = area.split_horizontally(w.saturating_sub(96));
    let title_size = (f64::from(w) / 30.0).clamp(13.0, 19.0);
    let mut chart = ChartBuilder::on(&area)
        .caption(z.title.clone(), ("sans-serif", title_size).into_font().color(&INK))
        .margin(14)
        .x_label_area_size(45)
        .y_label_area_size(60)
        // East (increasing RA) to the left.
        .build_cartesian_2d(h..-h, -h..h)
        .map_err(e)?;
    chart
        .configure_mesh()
        .disable_mesh()
        .x_desc("offset east (deg), RA grows to the left")
        .y_desc("offset north (deg)")
        .x_label_formatter(&|x| crate::axes::round_label(*x))
        .y_label_formatter(&|y| crate::axes::round_label(*y))
        .label_style(("sans-serif", 14).into_font().color(&INK))
        .axis_desc_style(("sans-serif", 15).into_font().color(&INK))
        .draw()
        .map_err(e)?;
    let n = z.raster.len();
    let step = 2.0 * h / n as f64;
    let peak = z.raster.iter().flatten().copied().fold(0.0, f64::max).max(1e-300);
    let shade = |v: f64| (245.0 * (1.0 - (v / peak).clamp(0.0, 1.0).sqrt())) as u8;
    chart
        .draw_series((0..n).flat_map(|i| (0..n).map(move |j| (i, j))).filter_map(|(i, j)| {
            let v = z.raster[j][i];
            if v <= 0.0 {
                return None;
            }
            let g = shade(v);
            let x = -h + i as f64 * step;
            let y = -h + j as f64 * step;
            Some(Rectangle::new([(x, y), (x + step, y + step)], RGBColor(g, g, g).filled()))
        }))
        .map_err(e)?;
    // RA/Dec grid about the centre, labelled a little inside the frame so
    // that no label is cut at the edge.
    let (rc, dc) = ra_dec(z.centre);
    let (rc, dc) = (rc.to_degrees(), dc.to_degrees());
    let spacing = nice_step(2.0 * h / 4.0);
    let grid = RGBColor(120, 140, 200);
    let grid_font = ("sans-serif", 14).into_font().color(&grid).pos(Pos::new(HPos::Center, VPos::Center));
    let inward = |p: (f64, f64)| (p.0 * 0.9, p.1 * 0.93);
    // RA lines at round steps in time (minutes or hours).
    let ra_spacing = ra_step_deg(spacing / dc.to_radians().cos().max(0.05));
    let reach = 3.0 * h / dc.to_radians().cos().max(0.05);
    let mut ra = ((rc - reach) / ra_spacing).floor() * ra_spacing;
    // Near a pole the RA lines meet: a label only where no other is close.
    let mut placed: Vec<(f64, f64)> = Vec::new();
    while ra <= rc + reach {
        let pts: Vec<(f64, f64)> = (0..=60)
            .filter_map(|k| {
                let dec = dc - 2.0 * h + 4.0 * h * k as f64 / 60.0;
                let d = latens::frames::vector_from_radec_deg(ra, dec.clamp(-89.999, 89.999));
                tangent(z.centre, d)
            })
            .filter(|p| p.0.abs() <= h && p.1.abs() <= h)
            .collect();
        if pts.len() > 1 {
            // At the end away from the nearer pole, where the lines spread.
            let end = if dc >= 0.0 { pts[0] } else { pts[pts.len() - 1] };
            let label_at = inward(end);
            chart.draw_series(LineSeries::new(pts, grid.stroke_width(1))).map_err(e)?;
            if placed.iter().all(|p| (p.0 - label_at.0).hypot(p.1 - label_at.1) > 0.12 * h) {
                placed.push(label_at);
                chart.draw_series([Text::new(ra_hm(ra), label_at, grid_font.clone())]).map_err(e)?;
            }
        }
        ra += ra_spacing;
    }
    let mut dec = ((dc - 2.0 * h) / spacing).floor() * spacing;
    while dec <= dc + 2.0 * h {
        if dec.abs() < 90.0 {
            let pts: Vec<(f64, f64)> = (0..=60)
                .filter_map(|k| {
                    tangent(
                        z.centre,
                        latens::frames::vector_from_radec_deg(rc - reach + 2.0 * reach * k as f64 / 60.0, dec),
                    )
                })
                .filter(|p| p.0.abs() <= h && p.1.abs() <= h)
                .collect();
            if pts.len() > 1 {
                let label_at = inward(*pts.last().unwrap_or(&(0.0, 0.0)));
                chart.draw_series(LineSeries::new(pts, grid.stroke_width(1))).map_err(e)?;
                chart.draw_series([Text::new(dec_label(dec, spacing), label_at, grid_font.clone())]).map_err(e)?;
            }
        }
        dec += spacing;
    }
    for (level, style) in [(z.level90, REGION90.stroke_width(3)), (z.level50, REGION50.stroke_width(3))] {
        let segments = marching_squares(&z.raster, level);
        chart
            .draw_series(segments.iter().map(|s| {
                PathElement::new(
                    vec![(-h + s.0.0 * step, -h + s.0.1 * step), (-h + s.1.0 * step, -h + s.1.1 * step)],
                    style,
                )
            }))
            .map_err(e)?;
    }
    // The confidence region's outline where it crosses the panel.
    for (a, b) in confidence90 {
        let pts: Vec<(f64, f64)> = along(*a, *b, 4).into_iter().filter_map(|p| tangent(z.centre, p)).collect();
        if pts.len() == 5 && pts.iter().all(|p| p.0.abs() <= h && p.1.abs() <= h) {
            chart.draw_series(LineSeries::new(pts, CONFIDENCE.stroke_width(2))).map_err(e)?;
        }
    }
    if let Some((d, label)) = truth
        && let Some(p) = tangent(z.centre, *d)
        && p.0.abs() <= h
        && p.1.abs() <= h
    {
        chart.draw_series([EmptyElement::at(p) + diamond(0, 0, 8, TRUTH.filled())]).map_err(e)?;
        let text_at = (p.0 - 0.03 * h, p.1 + 0.03 * h);
        // A pale patch behind the label keeps it legible on the density's
        // dark core (about 7 px a character and 18 px high at this size;
        // x runs from +h on the left to -h on the right).
        let (plot_w, plot_h) = chart.plotting_area().dim_in_pixel();
        let (ux, uy) = (2.0 * h / f64::from(plot_w.max(1)), 2.0 * h / f64::from(plot_h.max(1)));
        let chars = label.chars().count() as f64;
        chart
            .draw_series([Rectangle::new(
                [
                    (text_at.0 + 2.0 * ux, text_at.1 + 2.0 * uy),
                    (text_at.0 - (7.0 * chars + 4.0) * ux, text_at.1 - 18.0 * uy),
                ],
                WHITE.mix(0.8).filled(),
            )])
            .map_err(e)?;
        chart
            .draw_series([Text::new(label.clone(), text_at, ("sans-serif", 15).into_font().color(&TRUTH))])
            .map_err(e)?;
    }
    let note = match (n_panels >= 3, confidence90.is_empty()) {
        (true, true) => "grey: density; lines: 90%, 50%",
        (true, false) => "grey: density; lines: 90%, 50%; teal: confidence",
        (false, true) => "grey: posterior density; light line: 90%, dark line: 50% contour",
        (false, false) => "grey: posterior density; light: 90%, dark: 50% contour; teal: 90% confidence region",
    };
    area.draw(&Text::new(note, (70, area.dim_in_pixel().1 as i32 - 18), ("sans-serif", 13).into_font().color(&INK)))
        .map_err(e)?;
    draw_density_bar(&bar, peak).map_err(e)
}

/// The zoom's grey scale: probability per square degree, from zero (white)
/// to the panel's peak (black), on the square-root scale the shading uses.
fn draw_density_bar<DB: DrawingBackend>(
    bar: &DrawingArea<DB, Shift>,
    peak: f64,
) -> Result<(), DrawingAreaErrorKind<DB::ErrorType>> {
    let (_, ht) = bar.dim_in_pixel();
    let (top, bottom) = (70, ht as i32 - 80);
    let (x0, x1) = (8, 28);
    let span = (bottom - top).max(1);
    for k in 0..span {
        // k = 0 at the bottom: zero density.
        let f = f64::from(k) / f64::from(span);
        let g = (245.0 * (1.0 - f)) as u8;
        bar.draw(&Rectangle::new([(x0, bottom - k - 1), (x1, bottom - k)], RGBColor(g, g, g).filled()))?;
    }
    bar.draw(&Rectangle::new([(x0, top), (x1, bottom)], INK.stroke_width(1)))?;
    let font = ("sans-serif", 13).into_font().color(&INK);
    for frac in [0.0, 0.1, 0.25, 0.5, 1.0] {
        let y = bottom - (frac_sqrt(frac) * f64::from(span)) as i32;
        bar.draw(&PathElement::new(vec![(x1, y), (x1 + 5, y)], INK.stroke_width(1)))?;
        bar.draw(&Text::new(density_label(frac * peak), (x1 + 8, y - 7), font.clone()))?;
    }
    bar.draw(&Text::new("per sq deg", (0, top - 36), font.clone()))?;
    bar.draw(&Text::new("probability", (0, top - 54), font))?;
    Ok(())
}

fn frac_sqrt(f: f64) -> f64 {
    f.max(0.0).sqrt()
}

/// A density for the colour bar with two significant digits.
fn density_label(v: f64) -> String {
    if v == 0.0 {
        "0".into()
    } else {
        // Two significant digits, in plain decimals down to 1e-6.
        let digits = (1 - v.log10().floor() as i32).clamp(0, 7) as usize;
        format!("{v:.digits$}")
    }
}

/// A round RA grid step in degrees: whole minutes of time (1, 2, 5, 10,
/// 20, 30) or whole hours (1, 2, 3, 6).
fn ra_step_deg(raw_deg: f64) -> f64 {
    const MINUTES: [f64; 10] = [1.0, 2.0, 5.0, 10.0, 20.0, 30.0, 60.0, 120.0, 180.0, 360.0];
    let raw_min = raw_deg * 4.0;
    let pick = MINUTES.iter().copied().find(|m| *m >= raw_min * 0.7).unwrap_or(360.0);
    pick / 4.0
}

fn nice_step(x: f64) -> f64 {
    let p = 10f64.powf(x.log10().floor());
    let m = x / p;
    p * if m < 1.5 {
        1.0
    } else if m < 3.5 {
        2.0
    } else if m < 7.5 {
        5.0
    } else {
        10.0
    }
}

/// Contour segments of a raster (raster[row][col], cell centres at
/// (col + 0.5, row + 0.5)) at `level`, in cell units.
#[allow(clippy::type_complexity)]
pub fn marching_squares(raster: &[Vec<f64>], level: f64) -> Vec<((f64, f64), (f64, f64))> {
    let n = raster.len();
    let mut out = Vec::new();
    if n < 2 {
        return out;
    }
    let m = raster[0].len();
    let at = |i: usize, j: usize| raster[j][i];
    for j in 0..n - 1 {
        for i in 0..m - 1 {
            let v = [at(i, j), at(i + 1, j), at(i + 1, j + 1), at(i, j + 1)];
            let corners = [
                (i as f64 + 0.5, j as f64 + 0.5),
                (i as f64 + 1.5, j as f64 + 0.5),
                (i as f64 + 1.5, j as f64 + 1.5),
                (i as f64 + 0.5, j as f64 + 1.5),
            ];
            // Crossing points on the four edges.
            let mut pts = Vec::new();
            for k in 0..4 {
                let (a, b) = (v[k], v[(k + 1) % 4]);
                if (a >= level) != (b >= level) {
                    let t = (level - a) / (b - a);
                    let (p, q) = (corners[k], corners[(k + 1) % 4]);
                    pts.push((p.0 + t * (q.0 - p.0), p.1 + t * (q.1 - p.1)));
                }
            }
            if pts.len() == 2 {
                out.push((pts[0], pts[1]));
            } else if pts.len() == 4 {
                out.push((pts[0], pts[1]));
                out.push((pts[2], pts[3]));
            }
        }
    }
    out
}

#[cfg(test)]
mod label_tests {
    use super::*;

    /// Basins as good as the best that the region leaves out are marked
    /// on the map with their numbers, and the key says what the mark is;
    /// without any, the key has no such row.
    #[test]
    fn basins_left_out_are_marked_and_explained() {
        let chart = |left_out: Vec<(Vec3, String)>| SearchChart {
            title: "t".into(),
            subtitle: String::new(),
            cells: Vec::new(),
            sun: Vec3::new(1.0, 0.0, 0.0),
            ecliptic: Vec::new(),
            galactic_plane: Vec::new(),
            marks: Vec::new(),
            zooms: Vec::new(),
            warning: String::new(),
            cautions: Vec::new(),
            truth: None,
            left_out,
            confidence90: Vec::new(),
        };
        crate::register_fonts();
        let svg = |c: &SearchChart| {
            let mut out = String::new();
            {
                let root = SVGBackend::with_string(&mut out, SearchChart::SIZE).into_drawing_area();
                c.draw(&root).unwrap();
                root.present().unwrap();
            }
            out
        };
        let with = svg(&chart(vec![(Vec3::new(0.0, 1.0, 0.0), "basin 3".into())]));
        assert!(with.contains("basin 3") && with.contains("as good a fit, outside"));
        let without = svg(&chart(Vec::new()));
        assert!(!without.contains("as good a fit"));
    }

    #[test]
    fn ra_labels_read_in_hours_and_minutes() {
        assert_eq!(ra_hm(76.52), "5h 06m");
        assert_eq!(ra_hm(90.0), "6h");
        assert_eq!(ra_hm(359.999), "0h");
        assert_eq!(ra_hm(-15.0), "23h");
    }

    #[test]
    fn ra_steps_are_whole_minutes_or_hours() {
        for raw in [0.1, 0.9, 2.4, 7.0, 13.0, 29.0, 44.0, 80.0] {
            let minutes = ra_step_deg(raw) * 4.0;
            assert!((minutes - minutes.round()).abs() < 1e-9 && minutes >= 1.0, "{raw}: {minutes}");
            assert!(minutes >= 0.7 * raw * 4.0);
        }
    }

    #[test]
    fn density_labels_have_two_significant_digits() {
        assert_eq!(density_label(0.0057123), "0.0057");
        assert_eq!(density_label(0.0113), "0.011");
        assert_eq!(density_label(0.25), "0.25");
        assert_eq!(density_label(0.0), "0");
    }

    #[test]
    fn dec_labels_are_round() {
        assert_eq!(dec_label(40.0, 10.0), "+40°");
        assert_eq!(dec_label(-0.0, 10.0), "+0°");
        assert_eq!(dec_label(42.5, 0.5), "+42.5°");
    }
}
