//! The sensitivity map: detection probability over log mass and log
//! distance, with the 50% and 90% detection contours and the 95% exclusion
//! curve. Greyscale cells (white = never detected, black = always), so it
//! reads in print, with a colour bar); the curves in one accent colour
//! with different dashes, drawn the same way in the legend. Axis ticks at
//! round values (powers of ten; 1-2-5 over few decades).

use plotters::prelude::*;

use crate::axes::{TickedAxis, round_label};

/// One cell to draw: distance (au), mass (Earth masses), probability.
pub type MapCell = (f64, f64, f64);

/// A curve: (distance, mass) points.
pub type Curve = Vec<(f64, f64)>;

pub struct SensitivityChart<'a> {
    pub cells: &'a [MapCell],
    pub contour_50: Curve,
    pub contour_90: Curve,
    pub exclusion_95: Curve,
    pub title: String,
}

const INK: RGBColor = RGBColor(40, 40, 40);
const ACCENT: RGBColor = RGBColor(200, 80, 20);

impl SensitivityChart<'_> {
    pub fn draw_png(&self, path: &std::path::Path) -> Result<(), String> {
        super::register_fonts();
        let root = BitMapBackend::new(path, (1400, 1000)).into_drawing_area();
        self.draw(&root).map_err(|e| e.to_string())?;
        root.present().map_err(|e| e.to_string())
    }

    pub fn draw_svg(&self) -> Result<String, String> {
        super::register_fonts();
        let mut out = String::new();
        {
            let root = SVGBackend::with_string(&mut out, (1400, 1000)).into_drawing_area();
            self.draw(&root).map_err(|e| e.to_string())?;
            root.present().map_err(|e| e.to_string())?;
        }
        Ok(out)
    }

    fn draw<DB: DrawingBackend>(
        &self,
        root: &DrawingArea<DB, plotters::coord::Shift>,
    ) -> Result<(), DrawingAreaErrorKind<DB::ErrorType>> {
        root.fill(&WHITE)?;
        let (width, _) = root.dim_in_pixel();
        let (main, bar) = root.split_horizontally(width.saturating_sub(150));
        let lx: Vec<f64> = self.cells.iter().map(|c| c.0.log10()).collect();
        let ly: Vec<f64> = self.cells.iter().map(|c| c.1.log10()).collect();
        let (x0, x1) = minmax(&lx);
        let (y0, y1) = minmax(&ly);
        // Half a cell beyond the centres on each side.
        let nx = distinct_count(&lx).max(2) as f64;
        let ny = distinct_count(&ly).max(2) as f64;
        let (hx, hy) = (0.5 * (x1 - x0) / (nx - 1.0), 0.5 * (y1 - y0) / (ny - 1.0));
        let (xr, yr) = ((x0 - hx)..(x1 + hx), (y0 - hy)..(y1 + hy));
        let (key_at, _) = self.key_corner((xr.start, xr.end), (yr.start, yr.end));
        let mut chart = ChartBuilder::on(&main)
            .caption(self.title.clone(), ("sans-serif", 26).into_font().color(&INK))
            .margin(25)
            .x_label_area_size(60)
            .y_label_area_size(90)
            .build_cartesian_2d(TickedAxis::log(xr), TickedAxis::log(yr))?;
        chart
            .configure_mesh()
            .disable_mesh()
            .x_desc("heliocentric distance of the perturber (au)")
            .y_desc("perturber mass (Earth masses)")
            .x_label_formatter(&|v| round_label(10f64.powf(*v)))
            .y_label_formatter(&|v| round_label(10f64.powf(*v)))
            .label_style(("sans-serif", 18).into_font().color(&INK))
            .axis_desc_style(("sans-serif", 20).into_font().color(&INK))
            .draw()?;
        chart.draw_series(
            self.cells
                .iter()
                .zip(lx.iter().zip(&ly))
                .map(|(c, (&x, &y))| Rectangle::new([(x - hx, y - hy), (x + hx, y + hy)], grey(c.2).filled())),
        )?;
        let to_log = |c: &Curve| c.iter().map(|(d, m)| (d.log10(), m.log10())).collect::<Vec<_>>();
        let blue = RGBColor(20, 90, 200);
        chart
            .draw_series(LineSeries::new(to_log(&self.contour_50), ACCENT.stroke_width(2)))?
            .label("50% detection")
            .legend(|(x, y)| PathElement::new([(x - 14, y), (x + 14, y)], ACCENT.stroke_width(2)));
        chart
            .draw_series(DashedLineSeries::new(to_log(&self.contour_90), 10, 6, ACCENT.stroke_width(3)))?
            .label("90% detection")
            // The legend draws the curve's own dashes (relative pixels).
            .legend(|(x, y)| {
                let style = ACCENT.stroke_width(3);
                EmptyElement::at((x, y))
                    + PathElement::new([(-14, 0), (-4, 0)], style)
                    + PathElement::new([(2, 0), (12, 0)], style)
            });
        chart
            .draw_series(DashedLineSeries::new(to_log(&self.exclusion_95), 3, 5, blue.stroke_width(4)))?
            .label("95% exclusion (above: ruled out if nothing is detected)")
            .legend(move |(x, y)| {
                let style = blue.stroke_width(4);
                EmptyElement::at((x, y))
                    + PathElement::new([(-14, 0), (-11, 0)], style)
                    + PathElement::new([(-6, 0), (-3, 0)], style)
                    + PathElement::new([(2, 0), (5, 0)], style)
                    + PathElement::new([(10, 0), (13, 0)], style)
            });
        chart
            .configure_series_labels()
            .position(key_at)
            .label_font(("sans-serif", 18).into_font().color(&INK))
            .background_style(WHITE.mix(0.9))
            .border_style(INK)
            .draw()?;
        self.draw_colour_bar(&bar)
    }

    /// The corner where the key covers the fewest marks (cells with a
    /// detection probability of at least 0.02, points of the curves),
    /// with that count; the lower right (far and light: nothing detected)
    /// when no corner is better. `xr`, `yr`: the axes' log10 ranges.
    fn key_corner(&self, xr: (f64, f64), yr: (f64, f64)) -> (SeriesLabelPosition, usize) {
        let corners = [
            (SeriesLabelPosition::LowerRight, (true, false)),
            (SeriesLabelPosition::UpperLeft, (false, true)),
            (SeriesLabelPosition::LowerLeft, (false, false)),
            (SeriesLabelPosition::UpperRight, (true, true)),
        ];
        let marks: Vec<(f64, f64)> = self
            .cells
            .iter()
            .filter(|c| c.2 >= 0.02)
            .map(|c| (c.0, c.1))
            .chain([&self.contour_50, &self.contour_90, &self.exclusion_95].into_iter().flatten().copied())
            .map(|(d, m)| (d.log10(), m.log10()))
            .collect();
        corners
            .into_iter()
            .map(|(pos, (right, top))| {
                let (kx, ky) = key_box(xr, yr, right, top);
                let covered = marks.iter().filter(|(x, y)| kx.contains(x) && ky.contains(y)).count();
                (pos, covered)
            })
            .min_by_key(|c| c.1)
            .expect("four corners")
    }

    /// The grey scale's key: detection probability from 0 (white) to 1
    /// (black), beside the map.
    fn draw_colour_bar<DB: DrawingBackend>(
        &self,
        area: &DrawingArea<DB, plotters::coord::Shift>,
    ) -> Result<(), DrawingAreaErrorKind<DB::ErrorType>> {
        let mut bar = ChartBuilder::on(area)
            .margin_top(80)
            .margin_bottom(110)
            .margin_right(20)
            .y_label_area_size(60)
            .build_cartesian_2d(0.0..1.0, 0.0..1.0)?;
        bar.configure_mesh()
            .disable_mesh()
            .disable_x_axis()
            .y_labels(6)
            .y_label_formatter(&|v| format!("{v:.1}"))
            .y_desc("detection probability")
            .label_style(("sans-serif", 16).into_font().color(&INK))
            .axis_desc_style(("sans-serif", 18).into_font().color(&INK))
            .draw()?;
        let steps = 100;
        bar.draw_series((0..steps).map(|k| {
            let (a, b) = (k as f64 / steps as f64, (k + 1) as f64 / steps as f64);
            Rectangle::new([(0.0, a), (1.0, b)], grey(0.5 * (a + b)).filled())
        }))?;
        bar.draw_series(std::iter::once(Rectangle::new([(0.0, 0.0), (1.0, 1.0)], INK.stroke_width(1))))?;
        Ok(())
    }
}

/// The share of the plot's width and height the key takes, with its
/// margin: three entries of 18 px type, the longest about 540 px wide, on a
/// plot area of about 1140 x 820 px (looked at on the rendered chart; the
/// box is taken a little larger than drawn).
const KEY_SHARE: (f64, f64) = (0.52, 0.18);

/// The key's box in data coordinates at a corner of the axes.
fn key_box(
    xr: (f64, f64),
    yr: (f64, f64),
    right: bool,
    top: bool,
) -> (std::ops::RangeInclusive<f64>, std::ops::RangeInclusive<f64>) {
    let (w, h) = ((xr.1 - xr.0) * KEY_SHARE.0, (yr.1 - yr.0) * KEY_SHARE.1);
    let x = if right { (xr.1 - w)..=xr.1 } else { xr.0..=(xr.0 + w) };
    let y = if top { (yr.1 - h)..=yr.1 } else { yr.0..=(yr.0 + h) };
    (x, y)
}

/// White for probability 0, black for 1.
fn grey(p: f64) -> RGBColor {
    let g = (255.0 * (1.0 - p.clamp(0.0, 1.0))).round() as u8;
    RGBColor(g, g, g)
}

fn minmax(v: &[f64]) -> (f64, f64) {
    let lo = v.iter().copied().fold(f64::INFINITY, f64::min);
    let hi = v.iter().copied().fold(f64::NEG_INFINITY, f64::max);
    if hi > lo { (lo, hi) } else { (lo - 0.5, lo + 0.5) }
}

fn distinct_count(v: &[f64]) -> usize {
    let mut s: Vec<f64> = v.to_vec();
    s.sort_by(f64::total_cmp);
    s.dedup_by(|a, b| (*a - *b).abs() < 1e-12);
    s.len()
}

#[cfg(test)]
mod tests {
    use super::*;

    /// A map whose detections follow mass against distance cubed (the
    /// tidal scaling): heavy and near is detected, light and far is not;
    /// `flip` turns it end for end (detections light and far).
    fn map(flip: bool) -> Vec<MapCell> {
        let mut cells = Vec::new();
        for i in 0..16 {
            for j in 0..16 {
                let d = 50.0 * 10f64.powf(i as f64 / 15.0 * 1.5);
                let m = 0.1 * 10f64.powf(j as f64 / 15.0 * 4.0);
                let (u, v) = if flip { (15 - i, 15 - j) } else { (i, j) };
                let (du, mv) = (50.0 * 10f64.powf(u as f64 / 15.0 * 1.5), 0.1 * 10f64.powf(v as f64 / 15.0 * 4.0));
                let z = mv.log10() - 3.0 * (du / 50.0).log10() - 0.5;
                let p = 1.0 / (1.0 + (-4.0 * z).exp());
                cells.push((d, m, if p < 0.01 { 0.0 } else { p }));
            }
        }
        cells
    }

    fn ranges(cells: &[MapCell]) -> ((f64, f64), (f64, f64)) {
        let lx: Vec<f64> = cells.iter().map(|c| c.0.log10()).collect();
        let ly: Vec<f64> = cells.iter().map(|c| c.1.log10()).collect();
        (minmax(&lx), minmax(&ly))
    }

    /// The key covers no detected cell and no curve: in the usual map it
    /// sits in the far, light corner; where that corner holds detections,
    /// it moves to an empty one.
    #[test]
    fn the_key_covers_no_detection_and_no_curve() {
        for flip in [false, true] {
            let cells = map(flip);
            // Per distance column, the first cell (lightest, or for the
            // flipped map heaviest) at the level.
            let curve = |level: f64| -> Curve {
                cells
                    .chunks(16)
                    .filter_map(|column| {
                        let mut col: Vec<&MapCell> = column.iter().collect();
                        if flip {
                            col.reverse();
                        }
                        col.into_iter().find(|c| c.2 >= level).map(|c| (c.0, c.1))
                    })
                    .collect()
            };
            let chart = SensitivityChart {
                cells: &cells,
                contour_50: curve(0.5),
                contour_90: curve(0.9),
                exclusion_95: curve(0.95),
                title: "map".into(),
            };
            let (xr, yr) = ranges(&cells);
            let (pos, covered) = chart.key_corner(xr, yr);
            assert_eq!(covered, 0, "flip {flip}");
            let expected = if flip { SeriesLabelPosition::UpperLeft } else { SeriesLabelPosition::LowerRight };
            assert!(std::mem::discriminant(&pos) == std::mem::discriminant(&expected), "flip {flip}");
            if let Some(dir) = std::env::var_os("LATENS_CHART_DIR") {
                chart.draw_png(&std::path::Path::new(&dir).join(format!("sensitivity_key_{flip}.png"))).unwrap();
            }
        }
    }
}
