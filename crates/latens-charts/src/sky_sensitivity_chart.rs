//! The sky map of sensitivity: for a few distances of the map, the mass a
//! perturber in each HEALPix cell needs to be detected with 50%
//! probability, on the same Hammer-Aitoff sky as the search chart (RA 180
//! deg in the centre, RA increasing to the left, the ecliptic dashed).
//! Sequential blues on a log scale, darker where a smaller mass suffices
//! (the mass-distance chart's convention: dark is sensitive), with its
//! colour bar; light grey where no mass within the map's range is
//! detected, white where no perturber was drawn (outside the direction
//! band).

use plotters::prelude::*;

use latens::perturber::sensitivity::SkyCellMass;
use latens::vec3::Vec3;

use crate::search_chart::{SkyCell, draw_graticule, hammer_ra_dec, split_curve};

const INK: RGBColor = RGBColor(40, 40, 40);
const NOT_REACHED: RGBColor = RGBColor(215, 215, 215);
const ECLIPTIC: RGBColor = RGBColor(200, 80, 20);
/// Panels drawn at most (the nearest, a middle and the farthest distance).
const MAX_PANELS: usize = 3;

/// One panel: a distance and its cells (outline, centre, 50% mass).
struct Panel {
    distance_au: f64,
    cells: Vec<(SkyCell, Option<f64>)>,
}

pub struct SkySensitivityChart {
    panels: Vec<Panel>,
    /// log10 of the smallest and largest 50% mass over the panels.
    log_range: (f64, f64),
    ecliptic: Vec<Vec3>,
}

/// Sequential blues: t = 0 dark (a small mass suffices), t = 1 pale.
pub fn blues(t: f64) -> RGBColor {
    let t = t.clamp(0.0, 1.0);
    let stops = [(8.0, 48.0, 107.0), (33.0, 113.0, 181.0), (107.0, 174.0, 214.0), (198.0, 219.0, 239.0)];
    let x = t * (stops.len() - 1) as f64;
    let i = (x.floor() as usize).min(stops.len() - 2);
    let f = x - i as f64;
    let mix = |a: f64, b: f64| (a + f * (b - a)).round() as u8;
    RGBColor(mix(stops[i].0, stops[i + 1].0), mix(stops[i].1, stops[i + 1].1), mix(stops[i].2, stops[i + 1].2))
}

/// A cell's projected outline, and for a cell across the chart's edge
/// (RA 0h) its part on the other side too: the outline unwrapped in RA
/// around the cell's centre, drawn once as it is and once shifted by a
/// whole turn, each clamped to the chart.
fn wrapped_outlines(cell: &SkyCell) -> Vec<Vec<(f64, f64)>> {
    let tau = std::f64::consts::TAU;
    let (rc, _) = latens::skymap::lon_lat(cell.centre);
    let unwrapped: Vec<(f64, f64)> = cell
        .corners
        .iter()
        .map(|c| {
            let (mut r, d) = latens::skymap::lon_lat(*c);
            while r - rc > std::f64::consts::PI {
                r -= tau;
            }
            while rc - r > std::f64::consts::PI {
                r += tau;
            }
            (r, d)
        })
        .collect();
    let lo = unwrapped.iter().map(|p| p.0).fold(f64::INFINITY, f64::min);
    let hi = unwrapped.iter().map(|p| p.0).fold(f64::NEG_INFINITY, f64::max);
    let mut shifts = vec![0.0];
    if lo < 0.0 {
        shifts.push(tau);
    }
    if hi > tau {
        shifts.push(-tau);
    }
    shifts
        .into_iter()
        .map(|s| unwrapped.iter().map(|&(r, d)| hammer_ra_dec((r + s).clamp(1e-9, tau - 1e-9), d)).collect())
        .collect()
}

impl SkySensitivityChart {
    pub const SIZE: (u32, u32) = (1400, 1700);

    /// The chart of a sky map's cells (all distances; up to three are drawn).
    pub fn new(sky: &[SkyCellMass]) -> Self {
        let mut distances: Vec<usize> = sky.iter().map(|c| c.distance_index).collect();
        distances.sort();
        distances.dedup();
        let chosen: Vec<usize> = match distances.len() {
            0 => Vec::new(),
            n if n <= MAX_PANELS => distances.clone(),
            n => vec![distances[0], distances[n / 2], distances[n - 1]],
        };
        let panels: Vec<Panel> = chosen
            .iter()
            .map(|&di| {
                let cells: Vec<(SkyCell, Option<f64>)> = sky
                    .iter()
                    .filter(|c| c.distance_index == di)
                    .map(|c| {
                        let cell = SkyCell {
                            corners: latens::skymap::cell_outline(c.order, c.cell, 8),
                            centre: latens::skymap::cell_centre(c.order, c.cell),
                            layer: 0,
                        };
                        (cell, c.mass50_earth)
                    })
                    .collect();
                let distance_au = sky.iter().find(|c| c.distance_index == di).map_or(f64::NAN, |c| c.distance_au);
                Panel { distance_au, cells }
            })
            .collect();
        let logs: Vec<f64> = panels.iter().flat_map(|p| p.cells.iter().filter_map(|c| c.1)).map(f64::log10).collect();
        let lo = logs.iter().copied().fold(f64::INFINITY, f64::min);
        let hi = logs.iter().copied().fold(f64::NEG_INFINITY, f64::max);
        let log_range = if lo.is_finite() && hi > lo + 1e-9 {
            (lo, hi)
        } else if lo.is_finite() {
            (lo - 0.5, lo + 0.5)
        } else {
            (0.0, 1.0)
        };
        let ecliptic = (0..=720)
            .map(|k| {
                let l = (k as f64 * 0.5).to_radians();
                latens::frames::icrf_from_ecliptic(Vec3::new(l.cos(), l.sin(), 0.0))
            })
            .collect();
        SkySensitivityChart { panels, log_range, ecliptic }
    }

    pub fn draw_png(&self, path: &std::path::Path) -> Result<(), String> {
        super::register_fonts();
        let root = BitMapBackend::new(path, Self::SIZE).into_drawing_area();
        self.draw(&root).map_err(|e| e.to_string())?;
        root.present().map_err(|e| e.to_string())
    }

    pub fn draw_svg(&self) -> Result<String, String> {
        super::register_fonts();
        let mut out = String::new();
        {
            let root = SVGBackend::with_string(&mut out, Self::SIZE).into_drawing_area();
            self.draw(&root).map_err(|e| e.to_string())?;
            root.present().map_err(|e| e.to_string())?;
        }
        Ok(out)
    }

    /// The colour of a 50% mass (Earth masses).
    fn colour(&self, mass: f64) -> RGBColor {
        let (lo, hi) = self.log_range;
        blues((mass.log10() - lo) / (hi - lo))
    }

    pub fn draw<DB: DrawingBackend>(&self, root: &DrawingArea<DB, plotters::coord::Shift>) -> Result<(), String> {
        let e = |x: DrawingAreaErrorKind<DB::ErrorType>| x.to_string();
        root.fill(&WHITE).map_err(e)?;
        let (top, rest) = root.split_vertically(110);
        top.draw(&Text::new(
            "Where on the sky a perturber would be detected",
            (30, 14),
            ("sans-serif", 30).into_font().color(&INK),
        ))
        .map_err(e)?;
        top.draw(&Text::new(
            "Mass detected with 50% probability in each HEALPix cell of the perturber's heliocentric direction (ICRF); darker: a smaller mass suffices",
            (30, 56),
            ("sans-serif", 18).into_font().color(&INK),
        ))
        .map_err(e)?;
        top.draw(&Text::new(
            "grey: not detected within the map's mass range; white: no perturber drawn there (outside the direction band); dashed: the ecliptic",
            (30, 82),
            ("sans-serif", 18).into_font().color(&INK),
        ))
        .map_err(e)?;
        if self.panels.is_empty() {
            return Ok(());
        }
        let (maps, bar) = rest.split_horizontally(1180);
        let areas = maps.split_evenly((self.panels.len(), 1));
        for (panel, area) in self.panels.iter().zip(&areas) {
            self.draw_panel(panel, area)?;
        }
        self.draw_colour_bar(&bar)
    }

    fn draw_panel<DB: DrawingBackend>(
        &self,
        panel: &Panel,
        area: &DrawingArea<DB, plotters::coord::Shift>,
    ) -> Result<(), String> {
        let e = |x: DrawingAreaErrorKind<DB::ErrorType>| x.to_string();
        let xr = 2.0 * std::f64::consts::SQRT_2;
        let yr = std::f64::consts::SQRT_2;
        let mut chart = ChartBuilder::on(area)
            .margin(14)
            .caption(format!("at {:.0} au", panel.distance_au), ("sans-serif", 22).into_font().color(&INK))
            .build_cartesian_2d(-xr * 1.04..xr * 1.04, -yr * 1.04..yr * 1.04)
            .map_err(e)?;
        for (cell, mass) in &panel.cells {
            let colour = mass.map_or(NOT_REACHED, |m| self.colour(m));
            for outline in wrapped_outlines(cell) {
                chart.draw_series([Polygon::new(outline, colour.filled())]).map_err(e)?;
            }
        }
        draw_graticule(&mut chart, 4, 15, false)?;
        for part in split_curve(&self.ecliptic) {
            chart.draw_series(DashedLineSeries::new(part, 12, 6, ECLIPTIC.stroke_width(3))).map_err(e)?;
        }
        Ok(())
    }

    fn draw_colour_bar<DB: DrawingBackend>(
        &self,
        area: &DrawingArea<DB, plotters::coord::Shift>,
    ) -> Result<(), String> {
        let e = |x: DrawingAreaErrorKind<DB::ErrorType>| x.to_string();
        let (lo, hi) = self.log_range;
        let (x0, x1, y0, y1) = (30, 70, 80, 1400);
        let steps = 200;
        for k in 0..steps {
            let t = k as f64 / steps as f64;
            let y = y0 + ((y1 - y0) as f64 * t) as i32;
            let y_next = y0 + ((y1 - y0) as f64 * (k + 1) as f64 / steps as f64) as i32;
            area.draw(&Rectangle::new([(x0, y), (x1, y_next.max(y + 1))], blues(t).filled())).map_err(e)?;
        }
        area.draw(&Rectangle::new([(x0, y0), (x1, y1)], INK.stroke_width(1))).map_err(e)?;
        area.draw(&Text::new("Earth masses", (x0 - 10, y0 - 40), ("sans-serif", 18).into_font().color(&INK)))
            .map_err(e)?;
        // Ticks at 1-2-5 values within the range (powers of ten only when
        // the range spans several decades).
        let span = hi - lo;
        let mantissas: &[f64] = if span > 3.0 { &[1.0] } else { &[1.0, 2.0, 5.0] };
        let mut decade = lo.floor() as i32;
        while decade as f64 <= hi.ceil() {
            for m in mantissas {
                let v = m * 10f64.powi(decade);
                let t = (v.log10() - lo) / span;
                if (0.0..=1.0).contains(&t) {
                    let y = y0 + ((y1 - y0) as f64 * t) as i32;
                    area.draw(&PathElement::new(vec![(x1, y), (x1 + 8, y)], INK.stroke_width(1))).map_err(e)?;
                    area.draw(&Text::new(
                        crate::axes::round_label(v),
                        (x1 + 12, y - 9),
                        ("sans-serif", 17).into_font().color(&INK),
                    ))
                    .map_err(e)?;
                }
            }
            decade += 1;
        }
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_palette_runs_from_dark_to_pale() {
        let lum = |c: RGBColor| 0.2126 * c.0 as f64 + 0.7152 * c.1 as f64 + 0.0722 * c.2 as f64;
        let l: Vec<f64> = (0..=10).map(|k| lum(blues(k as f64 / 10.0))).collect();
        assert!(l.windows(2).all(|w| w[1] > w[0]), "{l:?}");
    }

    #[test]
    fn the_chart_draws_the_nearest_middle_and_farthest_distance() {
        let cell = |di: usize, c: u64, m: Option<f64>| SkyCellMass {
            distance_index: di,
            distance_au: 10.0 * (di + 1) as f64,
            order: 0,
            cell: c,
            n_trials: 4,
            mass50_earth: m,
            mass90_earth: None,
        };
        let sky: Vec<SkyCellMass> =
            (0..5).flat_map(|di| (0..12).map(move |c| cell(di, c, (c != 3).then_some(1.0 + c as f64)))).collect();
        let chart = SkySensitivityChart::new(&sky);
        let shown: Vec<f64> = chart.panels.iter().map(|p| p.distance_au).collect();
        assert_eq!(shown, vec![10.0, 30.0, 50.0]);
        assert_eq!(chart.panels[0].cells.len(), 12);
        assert!((chart.log_range.0 - 0.0).abs() < 1e-12 && (chart.log_range.1 - 12f64.log10()).abs() < 1e-12);
        // A smaller mass is darker.
        assert!(chart.colour(1.0).0 < chart.colour(12.0).0);
        assert!(chart.draw_svg().unwrap().contains("at 30 au"));
    }
}
