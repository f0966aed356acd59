//! Posterior charts: a corner plot (every pair of chosen quantities as a
//! greyscale 2-D histogram, each quantity's histogram on the diagonal) and a
//! trace chart (walkers' paths through the steps, burn-in shaded).

use plotters::coord::Shift;
use plotters::prelude::*;
use plotters::style::text_anchor::{HPos, Pos, VPos};

use crate::axes::{TickedAxis, round_label};

const INK: RGBColor = RGBColor(40, 40, 40);
const ACCENT: RGBColor = RGBColor(200, 80, 20);

/// One quantity of the corner plot.
pub struct Column {
    pub label: String,
    /// The samples' values; log10 of the quantity when `log10` is set.
    pub values: Vec<f64>,
    /// Marked with a line (e.g. the true value of a simulation), if given;
    /// in the same units as `values`.
    pub marker: Option<f64>,
    /// The values are log10 of the quantity: the axis is logarithmic and
    /// its ticks are labelled with the quantity (1, 10, 100), not its log.
    pub log10: bool,
}

impl Column {
    /// The axis of this quantity over `r`.
    fn axis(&self, r: (f64, f64)) -> TickedAxis {
        if self.log10 { TickedAxis::log(r.0..r.1) } else { TickedAxis::linear(r.0..r.1, 4) }
    }

    /// A tick label: the quantity, not its log.
    fn label_of(&self, v: f64) -> String {
        round_label(if self.log10 { 10f64.powf(v) } else { v })
    }
}

/// The quantiles drawn on the diagonal: the median and the central 68%.
const QUANTILES: [f64; 3] = [0.16, 0.5, 0.84];
/// The credible levels outlined on the pair panels.
const LEVELS: [f64; 2] = [0.68, 0.95];

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

/// Walkers' colours in the trace chart (the ten of the Tableau palette).
const WALKER_COLOURS: [RGBColor; 10] = [
    RGBColor(31, 119, 180),
    RGBColor(255, 127, 14),
    RGBColor(44, 160, 44),
    RGBColor(214, 39, 40),
    RGBColor(148, 103, 189),
    RGBColor(140, 86, 75),
    RGBColor(227, 119, 194),
    RGBColor(127, 127, 127),
    RGBColor(188, 189, 34),
    RGBColor(23, 190, 207),
];

/// The whole extent of `v` with a 3% margin.
fn full_range(v: &[f64]) -> (f64, f64) {
    let lo = v.iter().copied().fold(f64::INFINITY, f64::min);
    let hi = v.iter().copied().fold(f64::NEG_INFINITY, f64::max);
    if !(lo.is_finite() && hi.is_finite()) {
        return (0.0, 1.0);
    }
    if hi > lo { (lo - 0.03 * (hi - lo), hi + 0.03 * (hi - lo)) } else { (lo - 0.5, lo + 0.5) }
}

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
        // The title's first line large, any further line (the key) smaller.
        let (top, body) = root.split_vertically(90);
        for (k, line) in self.title.lines().enumerate() {
            let (y, size) = if k == 0 { (12, 28) } else { (20 + 30 * k as i32, 20) };
            top.draw(&Text::new(line.to_string(), (25, y), ("sans-serif", size).into_font().color(&INK))).map_err(e)?;
        }
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
                let (cx, cy) = (&self.columns[j], &self.columns[i]);
                if i == j {
                    let counts = histogram(&cx.values, xr);
                    let peak = counts.iter().copied().max().unwrap_or(1).max(1) as f64;
                    let mut chart = ChartBuilder::on(area)
                        .margin(8)
                        .x_label_area_size(if i == n - 1 { 55 } else { 25 })
                        .y_label_area_size(20)
                        .build_cartesian_2d(cx.axis(xr), 0.0..1.1)
                        .map_err(e)?;
                    chart
                        .configure_mesh()
                        .disable_mesh()
                        .y_labels(0)
                        .x_label_formatter(&|v| cx.label_of(*v))
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
                    // The median (solid) and the central 68% (dashed).
                    for (q, v) in QUANTILES.iter().zip(quantiles(&cx.values, &QUANTILES)) {
                        let style = QUANTILE_INK.stroke_width(2);
                        if (*q - 0.5).abs() < 1e-9 {
                            chart.draw_series(LineSeries::new([(v, 0.0), (v, 1.1)], style)).map_err(e)?;
                        } else {
                            chart.draw_series(DashedLineSeries::new([(v, 0.0), (v, 1.1)], 6, 4, style)).map_err(e)?;
                        }
                    }
                    if let Some(m) = cx.marker {
                        chart.draw_series(LineSeries::new([(m, 0.0), (m, 1.1)], ACCENT.stroke_width(3))).map_err(e)?;
                    }
                } else {
                    let mut chart = ChartBuilder::on(area)
                        .margin(8)
                        .x_label_area_size(if i == n - 1 { 55 } else { 25 })
                        .y_label_area_size(if j == 0 { 75 } else { 20 })
                        .build_cartesian_2d(cx.axis(xr), cy.axis(yr))
                        .map_err(e)?;
                    let (fx, fy) = (|v: &f64| cx.label_of(*v), |v: &f64| cy.label_of(*v));
                    let mut mesh = chart.configure_mesh();
                    mesh.disable_mesh()
                        .x_label_formatter(&fx)
                        .y_label_formatter(&fy)
                        .x_desc(x_label)
                        .y_desc(if j == 0 { cy.label.as_str() } else { "" })
                        .label_style(("sans-serif", 14).into_font().color(&INK))
                        .axis_desc_style(("sans-serif", 17).into_font().color(&INK));
                    if j != 0 {
                        mesh.y_labels(0);
                    }
                    mesh.draw().map_err(e)?;
                    let grid = histogram2(&cx.values, &cy.values, xr, yr);
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
                    // The 68% and 95% credible regions of the pair, outlined
                    // along the histogram's cells (the counts smoothed over
                    // neighbouring cells first, so that single stray cells do
                    // not get outlines of their own).
                    let smooth = smoothed(&grid);
                    for (level, width) in LEVELS.iter().zip([2, 1]) {
                        let inside = highest_density(&smooth, *level);
                        let edges = outline(&inside).into_iter().map(|((a0, b0), (a1, b1))| {
                            let at = |a: usize, b: usize| (xr.0 + a as f64 * wx, yr.0 + b as f64 * wy);
                            PathElement::new([at(a0, b0), at(a1, b1)], QUANTILE_INK.stroke_width(width))
                        });
                        chart.draw_series(edges).map_err(e)?;
                    }
                    if let (Some(mx), Some(my)) = (cx.marker, cy.marker) {
                        chart.draw_series([Cross::new((mx, my), 9, ACCENT.stroke_width(3))]).map_err(e)?;
                    }
                }
            }
        }
        Ok(())
    }
}

/// The colour of quantile lines and credible outlines.
const QUANTILE_INK: RGBColor = RGBColor(20, 90, 200);

/// The values at the given quantiles of `v` (finite values only).
fn quantiles(v: &[f64], qs: &[f64]) -> Vec<f64> {
    let mut s: Vec<f64> = v.iter().copied().filter(|x| x.is_finite()).collect();
    s.sort_by(f64::total_cmp);
    if s.is_empty() {
        return vec![f64::NAN; qs.len()];
    }
    qs.iter().map(|q| s[((q * (s.len() - 1) as f64).round() as usize).min(s.len() - 1)]).collect()
}

/// A 2-D histogram smoothed with the 1-2-1 kernel in each direction.
fn smoothed(grid: &[usize]) -> Vec<f64> {
    let w = [1.0, 2.0, 1.0];
    let mut out = vec![0.0; grid.len()];
    for b in 0..BINS {
        for a in 0..BINS {
            let mut sum = 0.0;
            for (db, wb) in w.iter().enumerate() {
                for (da, wa) in w.iter().enumerate() {
                    let (x, y) = (a as isize + da as isize - 1, b as isize + db as isize - 1);
                    if x >= 0 && y >= 0 && (x as usize) < BINS && (y as usize) < BINS {
                        sum += wa * wb * grid[y as usize * BINS + x as usize] as f64;
                    }
                }
            }
            out[b * BINS + a] = sum / 16.0;
        }
    }
    out
}

/// The smallest set of densest cells holding `level` of the total (the
/// highest-density credible region of a 2-D histogram).
fn highest_density(grid: &[f64], level: f64) -> Vec<bool> {
    let total: f64 = grid.iter().sum();
    let mut order: Vec<usize> = (0..grid.len()).collect();
    order.sort_by(|a, b| grid[*b].total_cmp(&grid[*a]));
    let mut inside = vec![false; grid.len()];
    let mut held = 0.0;
    for k in order {
        if held >= level * total || grid[k] <= 0.0 {
            break;
        }
        inside[k] = true;
        held += grid[k];
    }
    inside
}

/// The edges between cells inside and outside (or the grid's border), as
/// pairs of grid corners (column, row).
fn outline(inside: &[bool]) -> Vec<((usize, usize), (usize, usize))> {
    let at = |a: isize, b: isize| {
        a >= 0 && b >= 0 && (a as usize) < BINS && (b as usize) < BINS && inside[b as usize * BINS + a as usize]
    };
    let mut out = Vec::new();
    for b in 0..BINS {
        for a in 0..BINS {
            if !inside[b * BINS + a] {
                continue;
            }
            let (ai, bi) = (a as isize, b as isize);
            if !at(ai - 1, bi) {
                out.push(((a, b), (a, b + 1)));
            }
            if !at(ai + 1, bi) {
                out.push(((a + 1, b), (a + 1, b + 1)));
            }
            if !at(ai, bi - 1) {
                out.push(((a, b), (a + 1, b)));
            }
            if !at(ai, bi + 1) {
                out.push(((a, b + 1), (a + 1, b + 1)));
            }
        }
    }
    out
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
        // The key sits under the title, above the panels: nothing is drawn
        // over the walkers' paths.
        let (top, body) = root.split_vertically(84);
        let (title, key) = top.split_vertically(50);
        let title_font = ("sans-serif", 26).into_font().color(&INK).pos(Pos::new(HPos::Center, VPos::Top));
        title.draw(&Text::new(self.title.as_str(), (title.dim_in_pixel().0 as i32 / 2, 14), title_font)).map_err(e)?;
        let (kw, kh) = key.dim_in_pixel();
        let key_text = "shaded: burn-in (discarded; its first quarter may leave the axes)";
        let key_font = ("sans-serif", 16).into_font().color(&INK);
        let text_w = key.estimate_text_size(key_text, &key_font).map(|s| s.0 as i32).unwrap_or(480);
        let x0 = (kw as i32 - text_w - 32) / 2;
        let y0 = kh as i32 / 2;
        key.draw(&Rectangle::new([(x0, y0 - 8), (x0 + 22, y0 + 8)], RGBColor(230, 230, 230).filled())).map_err(e)?;
        key.draw(&Rectangle::new([(x0, y0 - 8), (x0 + 22, y0 + 8)], INK.stroke_width(1))).map_err(e)?;
        key.draw(&Text::new(key_text, (x0 + 32, y0), key_font.pos(Pos::new(HPos::Left, VPos::Center)))).map_err(e)?;
        let areas = body.split_evenly((self.panels.len().max(1), 1));
        for ((label, walkers), area) in self.panels.iter().zip(&areas) {
            // Every point after the start-up inside the axes: a walker
            // wandering off late in the run must show where it went, not sit
            // pinned at the edge. Only the first quarter of the burn-in (the
            // walkers leaving their starting points) may be cut at the edge.
            let settle = self.burn_in as f64 / 4.0;
            let pts: Vec<f64> =
                walkers.iter().flatten().filter(|p| p.0 >= settle).map(|p| p.1).filter(|v| v.is_finite()).collect();
            let yr = full_range(&pts);
            let xmax = walkers.iter().flatten().map(|p| p.0).fold(1.0, f64::max);
            let mut chart = ChartBuilder::on(area)
                .margin(12)
                .x_label_area_size(45)
                .y_label_area_size(90)
                .build_cartesian_2d(TickedAxis::linear(0.0..xmax, 8), TickedAxis::linear(yr.0..yr.1, 5))
                .map_err(e)?;
            chart
                .configure_mesh()
                .disable_mesh()
                .x_label_formatter(&|v| round_label(*v))
                .y_label_formatter(&|v| round_label(*v))
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
                .map_err(e)?;
            for (k, w) in walkers.iter().enumerate() {
                // One colour per walker (a qualitative palette), so paths
                // that cross stay told apart.
                let colour = WALKER_COLOURS[k % WALKER_COLOURS.len()];
                let clipped = w.iter().map(|p| (p.0, p.1.clamp(yr.0, yr.1)));
                chart.draw_series(LineSeries::new(clipped, colour.stroke_width(1))).map_err(e)?;
            }
        }
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Nothing covers the walkers' paths: a walker running along the top
    /// of each panel shows its colour across the whole width, the upper
    /// right included (where a key used to sit).
    #[test]
    fn the_trace_key_sits_above_the_panels_not_over_the_paths() {
        let steps = 400;
        let path = |level: f64| (0..steps).map(|i| (i as f64, level)).collect::<Vec<_>>();
        let walkers: WalkerPaths = vec![path(1.0), path(0.0), path(0.5)];
        let chart = TraceChart {
            title: "trace".into(),
            burn_in: 100,
            panels: vec![("a".into(), walkers.clone()), ("b".into(), walkers)],
        };
        crate::register_fonts();
        let (w, h) = TraceChart::SIZE;
        let mut buf = vec![0u8; (w * h * 3) as usize];
        {
            let root = BitMapBackend::with_buffer(&mut buf, (w, h)).into_drawing_area();
            chart.draw(&root).unwrap();
            root.present().unwrap();
        }
        let top = WALKER_COLOURS[0];
        let is_top = |x: u32, y: u32| {
            let i = ((y * w + x) * 3) as usize;
            (buf[i], buf[i + 1], buf[i + 2]) == (top.0, top.1, top.2)
        };
        // Columns (every 10 px across the right 40% of the image) in which
        // the top walker's colour appears in the upper panel.
        let upper = 84..(84 + (h - 84) / 2);
        let columns: Vec<u32> = (w * 6 / 10..w - 40).step_by(10).collect();
        let seen = columns.iter().filter(|&&x| upper.clone().any(|y| is_top(x, y))).count();
        assert!(seen + 2 >= columns.len(), "the top walker shows in {seen} of {} columns", columns.len());
        // The key strip under the title holds no walker.
        assert!((50..84).all(|y| (0..w).all(|x| !is_top(x, y))));
        if let Some(dir) = std::env::var_os("LATENS_CHART_DIR") {
            let path = std::path::Path::new(&dir).join("trace_test.png");
            let root = BitMapBackend::new(&path, (w, h)).into_drawing_area();
            chart.draw(&root).unwrap();
            root.present().unwrap();
        }
    }

    #[test]
    fn the_credible_region_holds_its_level_and_is_outlined_closed() {
        // A peaked 2-D histogram: 68% of the smoothed mass in the region.
        let mut grid = vec![0usize; BINS * BINS];
        for b in 0..BINS {
            for a in 0..BINS {
                let r2 = (a as f64 - 20.0).powi(2) + (b as f64 - 15.0).powi(2);
                grid[b * BINS + a] = (1000.0 * (-r2 / 18.0).exp()) as usize;
            }
        }
        let smooth = smoothed(&grid);
        let total: f64 = smooth.iter().sum();
        let inside = highest_density(&smooth, 0.68);
        let held: f64 = smooth.iter().zip(&inside).filter(|(_, i)| **i).map(|(v, _)| v).sum();
        assert!(held >= 0.68 * total && held < 0.75 * total, "{}", held / total);
        // Every corner of the outline is shared by an even number of edges:
        // the outline closes.
        let mut degree = std::collections::HashMap::new();
        for (p, q) in outline(&inside) {
            *degree.entry(p).or_insert(0) += 1;
            *degree.entry(q).or_insert(0) += 1;
        }
        assert!(!degree.is_empty() && degree.values().all(|d| d % 2 == 0));
        let q = quantiles(&[3.0, 1.0, 2.0, 5.0, 4.0], &QUANTILES);
        assert_eq!(q[1], 3.0);
    }
}
