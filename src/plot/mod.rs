//! SVG plots of regularisation paths and cross-validation curves (feature `cli`).
//!
//! * [`path_plot`]: coefficient paths against log10 λ, one line per coefficient that is ever
//!   non-zero along the path.
//! * [`cv_plot`]: the mean cross-validation score with ±1 standard-error bars against
//!   log10 λ, with the two chosen λ (minimum, one standard error) marked.
//!
//! Both draw with the plotters SVG backend in the style of the race plot
//! ([`crate::race_plot`]): white background, 22-pixel caption, labelled axes, the same
//! colour cycle, a bordered legend. The helpers here hold that shared styling.

pub mod cv_plot;
pub mod path_plot;

pub use cv_plot::plot_cv;
pub use path_plot::{plot_path, PathPlotOptions};

use crate::error::{Error, Result};
use plotters::coord::CoordTranslate;
use plotters::prelude::*;
use plotters::style::RGBColor;
use std::path::Path;

/// Line colours (cycled): the race plot's palette extended by four more distinguishable
/// colours, since a path plot may draw many lines.
pub const PALETTE: [RGBColor; 10] = [
    RGBColor(31, 119, 180),
    RGBColor(214, 39, 40),
    RGBColor(44, 160, 44),
    RGBColor(148, 103, 189),
    RGBColor(255, 127, 14),
    RGBColor(140, 86, 75),
    RGBColor(227, 119, 194),
    RGBColor(127, 127, 127),
    RGBColor(188, 189, 34),
    RGBColor(23, 190, 207),
];

/// Caption font size in pixels (as in the race plot).
pub const CAPTION_SIZE: u32 = 22;

/// The smallest accepted plot size.
pub const MIN_SIZE: (u32, u32) = (200, 150);

/// Checks a plot size against [`MIN_SIZE`].
///
/// # Errors
/// [`Error::InvalidArgument`] if either side is too small.
pub fn check_size(width: u32, height: u32) -> Result<()> {
    if width < MIN_SIZE.0 || height < MIN_SIZE.1 {
        return Err(Error::InvalidArgument(format!(
            "plot size {width}x{height} is too small (at least {}x{})",
            MIN_SIZE.0, MIN_SIZE.1
        )));
    }
    Ok(())
}

/// Maps a drawing failure to [`Error::Io`] naming the output file.
pub(crate) fn io_error(path: &Path) -> impl Fn(String) -> Error + '_ {
    move |message| Error::Io {
        file: path.display().to_string(),
        message,
    }
}

/// An axis range [lo, hi] widened by `pad` of its length on both sides (and to a unit
/// interval around a single value), so data never sits on the frame.
pub(crate) fn padded(lo: f64, hi: f64, pad: f64) -> (f64, f64) {
    if !(lo.is_finite() && hi.is_finite()) {
        return (0.0, 1.0);
    }
    let span = hi - lo;
    if span <= 0.0 {
        let half = lo.abs().max(1.0) * 0.5;
        return (lo - half, hi + half);
    }
    (lo - pad * span, hi + pad * span)
}

/// Draws the chart's legend in the shared style (translucent white box, black border) at
/// `position`, with `font_size`-pixel labels when given (plotters' default otherwise).
///
/// # Errors
/// The drawing backend's message.
pub(crate) fn draw_legend<'a, DB, CT>(
    chart: &mut ChartContext<'a, DB, CT>,
    position: SeriesLabelPosition,
    font_size: Option<u32>,
) -> std::result::Result<(), String>
where
    DB: DrawingBackend + 'a,
    CT: CoordTranslate,
{
    let mut style = chart.configure_series_labels();
    style
        .position(position)
        .background_style(WHITE.mix(0.85))
        .border_style(BLACK);
    if let Some(size) = font_size {
        style.label_font(("sans-serif", size));
    }
    style.draw().map_err(|e| e.to_string())
}
