//! Posterior charts: a corner plot (every pair of chosen quantities as a
//! greyscale 2-D histogram, each quantity's histogram on the diagonal) and a
//! trace chart (walkers' paths through the steps, burn-in shaded).

use plotters::coord::Shift;
use plotters::prelude::*;

const INK: RGBColor = RGBColor(40, 40, 40);
const ACCENT: RGBColor = RGBColor(200, 80, 20);

/// One quantity of the corner plot.
pub struct Column {
    pub label: String,
    pub values: Vec<f64>,
    /// Marked with a line (e.g. a reference solution), if given.
    pub marker: Option<f64>,
}

pub struct CornerChart {
    pub title: String,
    pub columns: Vec<Column>,
}

/// Draws `draw` onto a PNG file or into an SVG string of the given size.
pub fn render_png<F>(path: &std::path::Path, size: (u32, u32), draw: F) -> Result<(), String>
where
    F: FnOnce(&DrawingArea<BitMapBackend, Shift>) -> Result<(), String>,
{
    super::register_fonts();
    let root = BitMapBackend::new(path, size).into_drawing_area();
    draw(&root)?;
    root.present().map_err(|e| e.to_string())
}

pub fn render_svg<F>(size: (u32, u32), draw: F) -> Result<String, String>
where
    F: FnOnce(&DrawingArea<SVGBackend, Shift>) -> Result<(), String>,
{
    super::register_fonts();
    let mut out = String::new();
    {
        let root = SVGBackend::with_string(&mut out, size).into_drawing_area();
        draw(&root)?;
        root.present().map_err(|e| e.to_string())?;
    }
    Ok(out)
}

const BINS: usize = 40;

fn range(v: &[f64]) -> (f64, f64) {
    let mut s: Vec<f64> = v.iter().copied().filter(|x| x.is_finite()).collect();
    s.sort_by(f64::total_cmp);
    if s.is_empty() {
        return (0.0, 1.0);
    }
    // The central 99.5%, so a few stragglers do not squash the rest.
    let lo = s[(s.len() as f64 * 0.0025) as usize];
    let hi = s[((s.len() as f64 * 0.9975) as usize).min(s.len() - 1)];
    if hi > lo { (lo - 0.02 * (hi - lo), hi + 0.02 * (hi - lo)) } else { (lo - 0.5, lo + 0.5) }
}

impl CornerChart {
    pub const SIZE: (u32, u32) = (1400, 1400);

    pub fn draw<DB: DrawingBackend>(&self, root: &DrawingArea<DB, Shift>) -> Result<(), String> {
        let e = |x: DrawingAreaErrorKind<DB::ErrorType>| x.to_string();
        root.fill(&WHITE).map_err(e)?;
        let (top, body) = root.split_vertically(60);
        top.titled(&self.title, ("sans-serif", 28).into_font().color(&INK)).map_err(e)?;
        let n = self.columns.len();
        let cells = body.split_evenly((n, n));
        let ranges: Vec<(f64, f64)> = self.columns.iter().map(|c| range(&c.values)).collect();
        for i in 0..n {
            for j in 0..n {
                let area = &cells[i * n + j];
                if j > i {
                    continue;
                }
                let (xr, yr) = (ranges[j], ranges[i]);
                let x_label = if i == n - 1 { self.columns[j].label.as_str() } else { "" };
                if i == j {
                    let counts = histogram(&self.columns[i].values, xr);
                    let peak = counts.iter().copied().max().unwrap_or(1).max(1) as f64;
                    let mut chart = ChartBuilder::on(area)
                        .margin(8)
                        .x_label_area_size(if i == n - 1 { 55 } else { 25 })
                        .y_label_area_size(20)
                        .build_cartesian_2d(xr.0..xr.1, 0.0..1.1)
                        .map_err(e)?;
                    chart
                        .configure_mesh()
                        .disable_mesh()
                        .y_labels(0)
                        .x_labels(4)
                        .x_desc(x_label)
                        .label_style(("sans-serif", 14).into_font().color(&INK))
                        .axis_desc_style(("sans-serif", 17).into_font().color(&INK))
                        .draw()
                        .map_err(e)?;
                    let w = (xr.1 - xr.0) / BINS as f64;
                    chart
                        .draw_series(counts.iter().enumerate().map(|(k, &c)| {
                            let x = xr.0 + k as f64 * w;
                            Rectangle::new([(x, 0.0), (x + w, c as f64 / peak)], RGBColor(90, 90, 90).filled())
                        }))
                        .map_err(e)?;
                    if let Some(m) = self.columns[i].marker {
                        chart.draw_series(LineSeries::new([(m, 0.0), (m, 1.1)], ACCENT.stroke_width(2))).map_err(e)?;
                    }
                } else {
                    let mut chart = ChartBuilder::on(area)
                        .margin(8)
                        .x_label_area_size(if i == n - 1 { 55 } else { 25 })
                        .y_label_area_size(if j == 0 { 75 } else { 20 })
                        .build_cartesian_2d(xr.0..xr.1, yr.0..yr.1)
                        .map_err(e)?;
                    chart
                        .configure_mesh()
                        .disable_mesh()
                        .x_labels(4)
                        .y_labels(if j == 0 { 4 } else { 0 })
                        .x_desc(x_label)
                        .y_desc(if j == 0 { self.columns[i].label.as_str() } else { "" })
                        .label_style(("sans-serif", 14).into_font().color(&INK))
                        .axis_desc_style(("sans-serif", 17).into_font().color(&INK))
                        .draw()
                        .map_err(e)?;
                    let grid = histogram2(&self.columns[j].values, &self.columns[i].values, xr, yr);
                    let peak = grid.iter().copied().max().unwrap_or(1).max(1) as f64;
                    let (wx, wy) = ((xr.1 - xr.0) / BINS as f64, (yr.1 - yr.0) / BINS as f64);
                    chart
                        .draw_series(grid.iter().enumerate().filter(|(_, c)| **c > 0).map(|(k, &c)| {
                            let (a, b) = (k % BINS, k / BINS);
                            let shade = (235.0 * (1.0 - (c as f64 / peak).sqrt())) as u8;
                            let (x, y) = (xr.0 + a as f64 * wx, yr.0 + b as f64 * wy);
                            Rectangle::new([(x, y), (x + wx, y + wy)], RGBColor(shade, shade, shade).filled())
                        }))
                        .map_err(e)?;
                    if let (Some(mx), Some(my)) = (self.columns[j].marker, self.columns[i].marker) {
                        chart.draw_series([Cross::new((mx, my), 8, ACCENT.stroke_width(3))]).map_err(e)?;
                    }
                }
            }
        }
        Ok(())
    }
}

fn histogram(v: &[f64], r: (f64, f64)) -> Vec<usize> {
    let mut c = vec![0; BINS];
    for &x in v {
        let k = ((x - r.0) / (r.1 - r.0) * BINS as f64).floor();
        if k >= 0.0 && (k as usize) < BINS {
            c[k as usize] += 1;
        }
    }
    c
}

fn histogram2(x: &[f64], y: &[f64], rx: (f64, f64), ry: (f64, f64)) -> Vec<usize> {
    let mut c = vec![0; BINS * BINS];
    for (&a, &b) in x.iter().zip(y) {
        let i = ((a - rx.0) / (rx.1 - rx.0) * BINS as f64).floor();
        let j = ((b - ry.0) / (ry.1 - ry.0) * BINS as f64).floor();
        if i >= 0.0 && j >= 0.0 && (i as usize) < BINS && (j as usize) < BINS {
            c[j as usize * BINS + i as usize] += 1;
        }
    }
    c
}

/// Per walker, its (step, value) points.
pub type WalkerPaths = Vec<Vec<(f64, f64)>>;

/// Paths of a few walkers per quantity, against the step.
pub struct TraceChart {
    pub title: String,
    pub burn_in: usize,
    /// Per quantity: its label and, per walker, (step, value) points.
    pub panels: Vec<(String, WalkerPaths)>,
}

impl TraceChart {
    pub const SIZE: (u32, u32) = (1400, 900);

    pub fn draw<DB: DrawingBackend>(&self, root: &DrawingArea<DB, Shift>) -> Result<(), String> {
        let e = |x: DrawingAreaErrorKind<DB::ErrorType>| x.to_string();
        root.fill(&WHITE).map_err(e)?;
        let (top, body) = root.split_vertically(60);
        top.titled(&self.title, ("sans-serif", 26).into_font().color(&INK)).map_err(e)?;
        let areas = body.split_evenly((self.panels.len().max(1), 1));
        for ((label, walkers), area) in self.panels.iter().zip(&areas) {
            let pts: Vec<f64> = walkers.iter().flatten().map(|p| p.1).collect();
            let yr = range(&pts);
            let xmax = walkers.iter().flatten().map(|p| p.0).fold(1.0, f64::max);
            let mut chart = ChartBuilder::on(area)
                .margin(12)
                .x_label_area_size(45)
                .y_label_area_size(90)
                .build_cartesian_2d(0.0..xmax, yr.0..yr.1)
                .map_err(e)?;
            chart
                .configure_mesh()
                .disable_mesh()
                .x_desc("step")
                .y_desc(label.as_str())
                .label_style(("sans-serif", 15).into_font().color(&INK))
                .axis_desc_style(("sans-serif", 17).into_font().color(&INK))
                .draw()
                .map_err(e)?;
            chart
                .draw_series([Rectangle::new(
                    [(0.0, yr.0), (self.burn_in as f64, yr.1)],
                    RGBColor(230, 230, 230).filled(),
                )])
                .map_err(e)?
                .label("burn-in (discarded)")
                .legend(|(x, y)| Rectangle::new([(x - 10, y - 6), (x + 10, y + 6)], RGBColor(230, 230, 230).filled()));
            for (k, w) in walkers.iter().enumerate() {
                let shade = 40 + (k * 150 / walkers.len().max(1)) as u8;
                chart
                    .draw_series(LineSeries::new(
                        w.iter().map(|p| (p.0, p.1.clamp(yr.0, yr.1))),
                        RGBColor(shade, shade, shade).stroke_width(1),
                    ))
                    .map_err(e)?;
            }
            chart
                .configure_series_labels()
                .position(SeriesLabelPosition::UpperRight)
                .label_font(("sans-serif", 15).into_font().color(&INK))
                .background_style(WHITE.mix(0.9))
                .border_style(INK)
                .draw()
                .map_err(e)?;
        }
        Ok(())
    }
}
