//! Reports: charts and summaries drawn from finished results. Never
//! propagates an orbit.

pub mod axes;
pub mod posterior_chart;
pub mod residual_chart;
pub mod search_chart;
pub mod sensitivity_chart;
pub mod sky_sensitivity_chart;

/// Registers the embedded DejaVu Sans font with plotters once, so charts need
/// no system font library.
pub fn register_fonts() {
    use std::sync::Once;
    static ONCE: Once = Once::new();
    ONCE.call_once(|| {
        let _ =
            plotters::style::register_font("sans-serif", plotters::style::FontStyle::Normal, dejavu::sans::regular());
        let _ = plotters::style::register_font("sans-serif", plotters::style::FontStyle::Bold, dejavu::sans::bold());
    });
}

/// The drawing area of a PNG chart, as callers of [`posterior_chart::render_png`] see it.
pub type PngArea<'a> = plotters::prelude::DrawingArea<plotters::prelude::BitMapBackend<'a>, plotters::coord::Shift>;
/// The drawing area of an SVG chart, as callers of [`posterior_chart::render_svg`] see it.
pub type SvgArea<'a> = plotters::prelude::DrawingArea<plotters::prelude::SVGBackend<'a>, plotters::coord::Shift>;
