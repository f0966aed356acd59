//! The O-C residual chart: RA*cos(Dec) and Dec residuals against time, with
//! error bars, set-aside observations marked, a running mean, and the fit
//! statistics in the title. Drawn in dark grey and one accent colour so it
//! reads in greyscale too.

use plotters::coord::Shift;
use plotters::prelude::*;
use plotters::style::text_anchor::{HPos, Pos, VPos};

use crate::axes::{TickedAxis, round_label};

/// The pixel size of the side-by-side pair.
const PAIR_SIZE: (u32, u32) = (2000, 1100);

/// What the chart shows.
pub struct ResidualChart<'a> {
    /// Decimal years (TDB) of the observations.
    pub years: &'a [f64],
    pub ra_arcsec: &'a [f64],
    pub dec_arcsec: &'a [f64],
    pub sigma_ra_arcsec: &'a [f64],
    pub sigma_dec_arcsec: &'a [f64],
    pub used: &'a [bool],
    pub title: String,
    pub subtitle: String,
}

const INK: RGBColor = RGBColor(40, 40, 40);
const ACCENT: RGBColor = RGBColor(200, 80, 20);
const SET_ASIDE: RGBColor = RGBColor(150, 150, 150);

impl ResidualChart<'_> {
    /// Draws the chart as a PNG file at `png_path` (1600 x 1000 pixels).
    pub fn draw_png(&self, png_path: &std::path::Path) -> Result<(), String> {
        super::register_fonts();
        let root = BitMapBackend::new(png_path, (1600, 1000)).into_drawing_area();
        self.draw(&root).map_err(|e| e.to_string())?;
        root.present().map_err(|e| e.to_string())
    }

    /// Draws the chart as SVG text.
    pub fn draw_svg(&self) -> Result<String, String> {
        super::register_fonts();
        let mut out = String::new();
        {
            let root = SVGBackend::with_string(&mut out, (1600, 1000)).into_drawing_area();
            self.draw(&root).map_err(|e| e.to_string())?;
            root.present().map_err(|e| e.to_string())?;
        }
        Ok(out)
    }

    /// Two charts side by side (for example the null and the best-fit
    /// models) on one y-scale per row, so the eye compares like with like,
    /// as PNG at `png_path` (2000 x 1100 pixels).
    pub fn draw_pair_png(left: &Self, right: &Self, png_path: &std::path::Path) -> Result<(), String> {
        super::register_fonts();
        let root = BitMapBackend::new(png_path, PAIR_SIZE).into_drawing_area();
        Self::draw_pair(left, right, &root).map_err(|e| e.to_string())?;
        root.present().map_err(|e| e.to_string())
    }

    /// Two charts side by side as SVG text.
    pub fn draw_pair_svg(left: &Self, right: &Self) -> Result<String, String> {
        super::register_fonts();
        let mut out = String::new();
        {
            let root = SVGBackend::with_string(&mut out, PAIR_SIZE).into_drawing_area();
            Self::draw_pair(left, right, &root).map_err(|e| e.to_string())?;
            root.present().map_err(|e| e.to_string())?;
        }
        Ok(out)
    }

    fn draw_pair<DB: DrawingBackend>(
        left: &Self,
        right: &Self,
        root: &DrawingArea<DB, Shift>,
    ) -> Result<(), DrawingAreaErrorKind<DB::ErrorType>> {
        let (l, r) = (left.limits(), right.limits());
        let shared = [l[0].max(r[0]), l[1].max(r[1])];
        let (a, b) = root.split_horizontally(PAIR_SIZE.0 / 2);
        left.draw_with(&a, shared)?;
        right.draw_with(&b, shared)
    }

    /// The y half-range of each row (RA, Dec): every used point with its
    /// error bar, and the set-aside points unless they lie beyond three
    /// times that (those are drawn as arrows at the edge).
    pub fn limits(&self) -> [f64; 2] {
        [
            axis_limit(self.ra_arcsec, self.sigma_ra_arcsec, self.used),
            axis_limit(self.dec_arcsec, self.sigma_dec_arcsec, self.used),
        ]
    }

    fn draw<DB: DrawingBackend>(
        &self,
        root: &DrawingArea<DB, Shift>,
    ) -> Result<(), DrawingAreaErrorKind<DB::ErrorType>> {
        self.draw_with(root, self.limits())
    }

    fn draw_with<DB: DrawingBackend>(
        &self,
        root: &DrawingArea<DB, Shift>,
        limits: [f64; 2],
    ) -> Result<(), DrawingAreaErrorKind<DB::ErrorType>> {
        root.fill(&WHITE)?;
        let (header, body) = root.split_vertically(120);
        header.draw(&Text::new(self.title.clone(), (30, 12), ("sans-serif", 28).into_font().color(&INK)))?;
        header.draw(&Text::new(self.subtitle.clone(), (30, 50), ("sans-serif", 19).into_font().color(&INK)))?;
        let n_aside = self.used.iter().filter(|u| !**u).count();
        let beyond = self.beyond(limits);
        self.draw_legend(&header, n_aside, beyond)?;
        let panels = body.split_evenly((2, 1));
        let (t0, t1) = span(self.years);
        let pad = 0.02 * (t1 - t0).max(0.1);
        for ((panel, (values, sigmas, label)), limit) in panels
            .iter()
            .zip([
                (self.ra_arcsec, self.sigma_ra_arcsec, "RA cos(Dec), O-C (arcsec)"),
                (self.dec_arcsec, self.sigma_dec_arcsec, "Dec, O-C (arcsec)"),
            ])
            .zip(limits)
        {
            let x_axis = TickedAxis::linear((t0 - pad)..(t1 + pad), 10);
            let y_axis = TickedAxis::linear(-limit..limit, 8);
            let mut chart = ChartBuilder::on(panel)
                .margin(15)
                .margin_right(25)
                .x_label_area_size(50)
                .y_label_area_size(90)
                .build_cartesian_2d(x_axis, y_axis)?;
            chart
                .configure_mesh()
                .x_desc("year (TDB)")
                .x_label_formatter(&|x| round_label(*x))
                .y_label_formatter(&|y| round_label(*y))
                .y_desc(label)
                .label_style(("sans-serif", 18).into_font().color(&INK))
                .axis_desc_style(("sans-serif", 19).into_font().color(&INK))
                .light_line_style(RGBColor(240, 240, 240))
                .bold_line_style(RGBColor(215, 215, 215))
                .draw()?;
            chart.draw_series(LineSeries::new([(t0 - pad, 0.0), (t1 + pad, 0.0)], INK.stroke_width(1)))?;
            let clamp = |v: f64| v.clamp(-limit, limit);
            let inside = |v: f64| v.abs() <= limit;
            let rows =
                || self.years.iter().zip(values).zip(sigmas).zip(self.used).map(|(((&t, &v), &s), &u)| (t, v, s, u));
            // Error bars and points of the observations that were used.
            chart.draw_series(rows().filter(|r| r.3 && inside(r.1)).map(|(t, v, s, _)| {
                ErrorBar::new_vertical(t, clamp(v - s), v, clamp(v + s), INK.mix(0.35).filled(), 4)
            }))?;
            chart.draw_series(
                rows().filter(|r| r.3 && inside(r.1)).map(|(t, v, _, _)| Circle::new((t, v), 3, INK.filled())),
            )?;
            // Set-aside observations: crosses.
            chart.draw_series(
                rows()
                    .filter(|r| !r.3 && inside(r.1))
                    .map(|(t, v, _, _)| Cross::new((t, v), 6, SET_ASIDE.stroke_width(2))),
            )?;
            // Beyond the scale: an arrowhead at the edge, pointing out.
            chart.draw_series(rows().filter(|r| !inside(r.1)).map(|(t, v, _, used)| {
                let colour = if used { INK } else { SET_ASIDE };
                let tip = if v > 0.0 { -1 } else { 1 };
                EmptyElement::at((t, clamp(v)))
                    + Polygon::new(vec![(0, 0), (-6, 11 * tip), (6, 11 * tip)], colour.filled())
            }))?;
            let mean = running_mean(self.years, values, sigmas, self.used);
            chart.draw_series(LineSeries::new(mean.into_iter().map(|(t, v)| (t, clamp(v))), ACCENT.stroke_width(3)))?;
        }
        Ok(())
    }

    /// How many points lie beyond the axes at these limits.
    fn beyond(&self, limits: [f64; 2]) -> usize {
        (0..self.years.len())
            .filter(|&k| self.ra_arcsec[k].abs() > limits[0] || self.dec_arcsec[k].abs() > limits[1])
            .count()
    }

    /// The key, in the header (never over the data); an entry only for what
    /// the chart shows.
    fn draw_legend<DB: DrawingBackend>(
        &self,
        header: &DrawingArea<DB, Shift>,
        n_aside: usize,
        beyond: usize,
    ) -> Result<(), DrawingAreaErrorKind<DB::ErrorType>> {
        let font = ("sans-serif", 18).into_font().color(&INK);
        let y = 96;
        let mut x = 40;
        header.draw(&Circle::new((x, y), 4, INK.filled()))?;
        header.draw(&Text::new("used (bar: 1 sigma)", (x + 12, y - 10), font.clone()))?;
        x += 220;
        if n_aside > 0 {
            header.draw(&Cross::new((x, y), 6, SET_ASIDE.stroke_width(2)))?;
            header.draw(&Text::new(format!("set aside ({n_aside})"), (x + 14, y - 10), font.clone()))?;
            x += 190;
        }
        header.draw(&PathElement::new([(x - 12, y), (x + 12, y)], ACCENT.stroke_width(3)))?;
        header.draw(&Text::new("weighted mean in 20 time bins", (x + 20, y - 10), font.clone()))?;
        x += 330;
        if beyond > 0 {
            header.draw(&Polygon::new(vec![(x, y - 6), (x - 6, y + 5), (x + 6, y + 5)], INK.filled()))?;
            header.draw(&Text::new(format!("beyond the axes ({beyond}), at the edge"), (x + 14, y - 10), font))?;
        }
        Ok(())
    }
}

/// Several bodies' O-C on one page (a joint study's overview): a row per
/// body, RA cos(Dec) left and Dec right, one time axis for all, each row on
/// its own y-scale (shared by its two panels) with the body named and its
/// reduced chi-square and RMS beside it.
pub struct ResidualOverview<'a> {
    pub title: String,
    pub subtitle: String,
    /// Per body: its label ("Name: chi2/dof 1.02, RMS 0.10\" / 0.11\"")
    /// and its residuals.
    pub rows: Vec<(String, ResidualChart<'a>)>,
}

impl ResidualOverview<'_> {
    const WIDTH: u32 = 1800;
    const HEADER: u32 = 140;
    const ROW: u32 = 190;

    fn size(&self) -> (u32, u32) {
        (Self::WIDTH, Self::HEADER + Self::ROW * self.rows.len().max(1) as u32)
    }

    /// Draws the overview as a PNG file at `png_path` (1800 pixels wide,
    /// 190 per body).
    pub fn draw_png(&self, png_path: &std::path::Path) -> Result<(), String> {
        super::register_fonts();
        let root = BitMapBackend::new(png_path, self.size()).into_drawing_area();
        self.draw(&root).map_err(|e| e.to_string())?;
        root.present().map_err(|e| e.to_string())
    }

    /// Draws the overview as SVG text.
    pub fn draw_svg(&self) -> Result<String, String> {
        super::register_fonts();
        let mut out = String::new();
        {
            let root = SVGBackend::with_string(&mut out, self.size()).into_drawing_area();
            self.draw(&root).map_err(|e| e.to_string())?;
            root.present().map_err(|e| e.to_string())?;
        }
        Ok(out)
    }

    fn draw<DB: DrawingBackend>(
        &self,
        root: &DrawingArea<DB, Shift>,
    ) -> Result<(), DrawingAreaErrorKind<DB::ErrorType>> {
        root.fill(&WHITE)?;
        let (header, body) = root.split_vertically(Self::HEADER);
        header.draw(&Text::new(self.title.clone(), (30, 12), ("sans-serif", 28).into_font().color(&INK)))?;
        header.draw(&Text::new(self.subtitle.clone(), (30, 50), ("sans-serif", 19).into_font().color(&INK)))?;
        // The key (in the header, never over the data).
        let font = ("sans-serif", 17).into_font().color(&INK);
        let y = 88;
        header.draw(&Circle::new((40, y), 3, INK.filled()))?;
        header.draw(&Text::new("used", (50, y - 9), font.clone()))?;
        header.draw(&Cross::new((120, y), 5, SET_ASIDE.stroke_width(2)))?;
        header.draw(&Text::new("set aside", (132, y - 9), font.clone()))?;
        header.draw(&PathElement::new([(240, y), (264, y)], ACCENT.stroke_width(3)))?;
        header.draw(&Text::new("weighted mean in 20 time bins", (272, y - 9), font.clone()))?;
        header.draw(&Polygon::new(vec![(590, y - 6), (584, y + 5), (596, y + 5)], INK.filled()))?;
        header.draw(&Text::new("beyond the axes, at the edge", (604, y - 9), font))?;
        // Column headings, centred over the plotting areas.
        let heading = ("sans-serif", 19).into_font().color(&INK).pos(Pos::new(HPos::Center, VPos::Top));
        let half = Self::WIDTH as i32 / 2;
        for (k, text) in ["RA cos(Dec), O-C (arcsec)", "Dec, O-C (arcsec)"].into_iter().enumerate() {
            header.draw(&Text::new(text, (k as i32 * half + 86 + (half - 86 - 31) / 2, 112), heading.clone()))?;
        }
        let years: Vec<f64> = self.rows.iter().flat_map(|(_, c)| c.years.iter().copied()).collect();
        let (t0, t1) = span(&years);
        let pad = 0.02 * (t1 - t0).max(0.1);
        let rows = body.split_evenly((self.rows.len().max(1), 1));
        for (k, ((label, chart), row)) in self.rows.iter().zip(&rows).enumerate() {
            let (name_strip, panels) = row.split_vertically(28);
            name_strip.draw(&Text::new(label.clone(), (30, 6), ("sans-serif", 19).into_font().color(&INK)))?;
            let limits = chart.limits();
            let limit = limits[0].max(limits[1]);
            let last = k + 1 == self.rows.len();
            let halves = panels.split_evenly((1, 2));
            for (half, (values, sigmas)) in halves
                .iter()
                .zip([(chart.ra_arcsec, chart.sigma_ra_arcsec), (chart.dec_arcsec, chart.sigma_dec_arcsec)])
            {
                let mut c = ChartBuilder::on(half)
                    .margin(6)
                    .margin_right(25)
                    .x_label_area_size(if last { 40 } else { 22 })
                    .y_label_area_size(80)
                    .build_cartesian_2d(
                        TickedAxis::linear((t0 - pad)..(t1 + pad), 10),
                        TickedAxis::linear(-limit..limit, 4),
                    )?;
                c.configure_mesh()
                    .x_label_formatter(&|x| round_label(*x))
                    .y_label_formatter(&|y| round_label(*y))
                    .x_desc(if last { "year (TDB)" } else { "" })
                    .label_style(("sans-serif", 15).into_font().color(&INK))
                    .axis_desc_style(("sans-serif", 17).into_font().color(&INK))
                    .light_line_style(RGBColor(245, 245, 245))
                    .bold_line_style(RGBColor(220, 220, 220))
                    .draw()?;
                c.draw_series(LineSeries::new([(t0 - pad, 0.0), (t1 + pad, 0.0)], INK.stroke_width(1)))?;
                let clamp = |v: f64| v.clamp(-limit, limit);
                let inside = |v: f64| v.abs() <= limit;
                let pts = || chart.years.iter().zip(values.iter()).zip(chart.used).map(|((&t, &v), &u)| (t, v, u));
                c.draw_series(
                    pts().filter(|p| p.2 && inside(p.1)).map(|(t, v, _)| Circle::new((t, v), 2, INK.filled())),
                )?;
                c.draw_series(
                    pts()
                        .filter(|p| !p.2 && inside(p.1))
                        .map(|(t, v, _)| Cross::new((t, v), 4, SET_ASIDE.stroke_width(2))),
                )?;
                c.draw_series(pts().filter(|p| !inside(p.1)).map(|(t, v, used)| {
                    let colour = if used { INK } else { SET_ASIDE };
                    let tip = if v > 0.0 { -1 } else { 1 };
                    EmptyElement::at((t, clamp(v)))
                        + Polygon::new(vec![(0, 0), (-5, 9 * tip), (5, 9 * tip)], colour.filled())
                }))?;
                let mean = running_mean(chart.years, values, sigmas, chart.used);
                c.draw_series(LineSeries::new(mean.into_iter().map(|(t, v)| (t, clamp(v))), ACCENT.stroke_width(3)))?;
            }
        }
        Ok(())
    }
}

fn span(v: &[f64]) -> (f64, f64) {
    let lo = v.iter().copied().fold(f64::INFINITY, f64::min);
    let hi = v.iter().copied().fold(f64::NEG_INFINITY, f64::max);
    if lo.is_finite() && hi > lo { (lo, hi) } else { (lo - 0.5, lo + 0.5) }
}

/// A symmetric axis limit: every used point with its error bar, and every
/// set-aside point within three times that (so that one wild point does not
/// flatten the rest), with a margin for the markers.
fn axis_limit(values: &[f64], sigmas: &[f64], used: &[bool]) -> f64 {
    let finite = |x: &f64| x.is_finite();
    let core = values
        .iter()
        .zip(sigmas)
        .zip(used)
        .filter(|(_, u)| **u)
        .map(|((v, s), _)| v.abs() + s)
        .filter(finite)
        .fold(0.0, f64::max);
    let core = if core > 0.0 { core } else { 1.0 };
    let aside = values
        .iter()
        .zip(used)
        .filter(|(v, u)| !**u && v.abs() <= 3.0 * core)
        .map(|(v, _)| v.abs())
        .fold(0.0, f64::max);
    (1.06 * core.max(aside)).max(1e-3)
}

/// Weighted mean of the used residuals in 20 equal time bins (bins with
/// fewer than 3 points are skipped).
fn running_mean(t: &[f64], v: &[f64], s: &[f64], used: &[bool]) -> Vec<(f64, f64)> {
    let (t0, t1) = span(t);
    let bins = 20;
    let width = (t1 - t0) / bins as f64;
    let mut out = Vec::new();
    for b in 0..bins {
        let (lo, hi) = (t0 + b as f64 * width, t0 + (b + 1) as f64 * width);
        let (mut sw, mut swv, mut n, mut st) = (0.0, 0.0, 0, 0.0);
        for k in 0..t.len() {
            if used[k] && t[k] >= lo && (t[k] < hi || b == bins - 1) {
                let w = 1.0 / (s[k] * s[k]);
                sw += w;
                swv += w * v[k];
                st += t[k];
                n += 1;
            }
        }
        if n >= 3 {
            out.push((st / n as f64, swv / sw));
        }
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The overview draws a row per body, each named.
    #[test]
    fn the_overview_names_every_body_on_one_time_axis() {
        let years: Vec<Vec<f64>> =
            (0..3).map(|b| (0..80).map(|k| 2010.0 + b as f64 + 0.15 * k as f64).collect()).collect();
        let v: Vec<f64> = (0..80).map(|k| 0.1 * ((k as f64) * 0.35).sin()).collect();
        let s = vec![0.1; 80];
        let mut used = vec![true; 80];
        used[5] = false;
        let rows = ["Arvel", "Lumen", "Tamsin"]
            .iter()
            .zip(&years)
            .map(|(name, y)| {
                (
                    format!("{name}: chi2/dof 1.00"),
                    ResidualChart {
                        years: y,
                        ra_arcsec: &v,
                        dec_arcsec: &v,
                        sigma_ra_arcsec: &s,
                        sigma_dec_arcsec: &s,
                        used: &used,
                        title: String::new(),
                        subtitle: String::new(),
                    },
                )
            })
            .collect();
        let overview = ResidualOverview { title: "three bodies".into(), subtitle: String::new(), rows };
        let svg = overview.draw_svg().unwrap();
        for name in ["Arvel", "Lumen", "Tamsin"] {
            assert!(svg.contains(name), "{name}");
        }
        assert_eq!(overview.size(), (1800, 140 + 3 * 190));
        if let Some(dir) = std::env::var_os("LATENS_CHART_DIR") {
            overview.draw_png(&std::path::Path::new(&dir).join("overview_test.png")).unwrap();
        }
    }

    #[test]
    fn every_used_point_and_its_bar_lies_inside_the_axes() {
        let v = [0.1, -0.4, 0.25, 3.0, 0.9, -50.0];
        let s = [0.05, 0.1, 0.05, 0.1, 0.1, 0.1];
        let used = [true, true, true, false, false, false];
        let limit = axis_limit(&v, &s, &used);
        for k in 0..3 {
            assert!(v[k].abs() + s[k] <= limit, "used point {k} outside {limit}");
        }
        // A set-aside point within three times the used range is shown;
        // a wild one (-50) does not flatten the rest.
        assert!((0.9..2.0).contains(&limit), "{limit}");
        let chart = ResidualChart {
            years: &[2020.0, 2021.0, 2022.0, 2023.0, 2024.0, 2025.0],
            ra_arcsec: &v,
            dec_arcsec: &[0.0; 6],
            sigma_ra_arcsec: &s,
            sigma_dec_arcsec: &s,
            used: &used,
            title: String::new(),
            subtitle: String::new(),
        };
        // 3.0 and -50 are drawn as arrowheads at the edge, and counted.
        assert_eq!(chart.beyond(chart.limits()), 2);
    }
}
