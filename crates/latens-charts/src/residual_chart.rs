//! The O-C residual chart: RA*cos(Dec) and Dec residuals against time, with
//! error bars, set-aside observations marked, a running mean, and the fit
//! statistics in the title. Drawn in dark grey and one accent colour so it
//! reads in greyscale too.

use plotters::coord::Shift;
use plotters::prelude::*;

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
    /// models), as PNG at `png_path` (3200 x 1000 pixels).
    pub fn draw_pair_png(left: &Self, right: &Self, png_path: &std::path::Path) -> Result<(), String> {
        super::register_fonts();
        let root = BitMapBackend::new(png_path, (3200, 1000)).into_drawing_area();
        let (a, b) = root.split_horizontally(1600);
        left.draw(&a).map_err(|e| e.to_string())?;
        right.draw(&b).map_err(|e| e.to_string())?;
        root.present().map_err(|e| e.to_string())
    }

    /// Two charts side by side as SVG text.
    pub fn draw_pair_svg(left: &Self, right: &Self) -> Result<String, String> {
        super::register_fonts();
        let mut out = String::new();
        {
            let root = SVGBackend::with_string(&mut out, (3200, 1000)).into_drawing_area();
            let (a, b) = root.split_horizontally(1600);
            left.draw(&a).map_err(|e| e.to_string())?;
            right.draw(&b).map_err(|e| e.to_string())?;
            root.present().map_err(|e| e.to_string())?;
        }
        Ok(out)
    }

    fn draw<DB: DrawingBackend>(
        &self,
        root: &DrawingArea<DB, Shift>,
    ) -> Result<(), DrawingAreaErrorKind<DB::ErrorType>> {
        root.fill(&WHITE)?;
        let (header, body) = root.split_vertically(90);
        header.draw(&Text::new(self.title.clone(), (30, 15), ("sans-serif", 30).into_font().color(&INK)))?;
        header.draw(&Text::new(self.subtitle.clone(), (30, 55), ("sans-serif", 20).into_font().color(&INK)))?;
        let panels = body.split_evenly((2, 1));
        let (t0, t1) = span(self.years);
        let pad = 0.02 * (t1 - t0).max(0.1);
        for (panel, (values, sigmas, label)) in panels.iter().zip([
            (self.ra_arcsec, self.sigma_ra_arcsec, "RA cos(Dec), O-C (arcsec)"),
            (self.dec_arcsec, self.sigma_dec_arcsec, "Dec, O-C (arcsec)"),
        ]) {
            let limit = robust_limit(values, sigmas, self.used);
            let mut chart = ChartBuilder::on(panel)
                .margin(20)
                .x_label_area_size(50)
                .y_label_area_size(90)
                .build_cartesian_2d((t0 - pad)..(t1 + pad), -limit..limit)?;
            chart
                .configure_mesh()
                .x_desc("year (TDB)")
                .x_label_formatter(&|x| format!("{x:.0}"))
                .y_desc(label)
                .label_style(("sans-serif", 18).into_font().color(&INK))
                .axis_desc_style(("sans-serif", 20).into_font().color(&INK))
                .light_line_style(RGBColor(235, 235, 235))
                .bold_line_style(RGBColor(205, 205, 205))
                .draw()?;
            chart.draw_series(LineSeries::new([(t0 - pad, 0.0), (t1 + pad, 0.0)], INK.stroke_width(1)))?;
            let clamp = |v: f64| v.clamp(-limit, limit);
            // Error bars and points of the observations that were used.
            chart.draw_series(self.years.iter().zip(values).zip(sigmas).zip(self.used).filter(|(_, u)| **u).map(
                |(((&t, &v), &s), _)| {
                    ErrorBar::new_vertical(t, clamp(v - s), clamp(v), clamp(v + s), INK.mix(0.35).filled(), 4)
                },
            ))?;
            chart
                .draw_series(
                    self.years
                        .iter()
                        .zip(values)
                        .zip(self.used)
                        .filter(|(_, u)| **u)
                        .map(|((&t, &v), _)| Circle::new((t, clamp(v)), 3, INK.filled())),
                )?
                .label("used")
                .legend(|(x, y)| Circle::new((x, y), 4, INK.filled()));
            // Set-aside observations: open crosses (clamped to the frame).
            chart
                .draw_series(
                    self.years
                        .iter()
                        .zip(values)
                        .zip(self.used)
                        .filter(|(_, u)| !**u)
                        .map(|((&t, &v), _)| Cross::new((t, clamp(v)), 6, SET_ASIDE.stroke_width(2))),
                )?
                .label("set aside")
                .legend(|(x, y)| Cross::new((x, y), 6, SET_ASIDE.stroke_width(2)));
            let mean = running_mean(self.years, values, sigmas, self.used);
            chart
                .draw_series(LineSeries::new(mean.into_iter().map(|(t, v)| (t, clamp(v))), ACCENT.stroke_width(3)))?
                .label("running weighted mean")
                .legend(|(x, y)| PathElement::new([(x - 12, y), (x + 12, y)], ACCENT.stroke_width(3)));
            chart
                .configure_series_labels()
                .position(SeriesLabelPosition::UpperRight)
                .label_font(("sans-serif", 18).into_font().color(&INK))
                .background_style(WHITE.mix(0.85))
                .border_style(INK)
                .draw()?;
        }
        Ok(())
    }
}

fn span(v: &[f64]) -> (f64, f64) {
    let lo = v.iter().copied().fold(f64::INFINITY, f64::min);
    let hi = v.iter().copied().fold(f64::NEG_INFINITY, f64::max);
    if lo.is_finite() && hi > lo { (lo, hi) } else { (lo - 0.5, lo + 0.5) }
}

/// A symmetric axis limit that shows the used points and their error bars
/// (the 99th percentile of |value| + sigma, times 1.2), so that one wild
/// set-aside point does not flatten the rest.
fn robust_limit(values: &[f64], sigmas: &[f64], used: &[bool]) -> f64 {
    let mut ext: Vec<f64> =
        values.iter().zip(sigmas).zip(used).filter(|(_, u)| **u).map(|((v, s), _)| v.abs() + s).collect();
    if ext.is_empty() {
        return 1.0;
    }
    ext.sort_by(f64::total_cmp);
    let p99 = ext[((ext.len() as f64 * 0.99) as usize).min(ext.len() - 1)];
    (1.2 * p99).max(1e-3)
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
