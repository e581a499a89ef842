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

/// The largest magnitude drawn on a linear axis. Beyond it the axis arithmetic of the
/// drawing library (tick spacing, pixel mapping) overflows or does not terminate, so such
/// values are an error: rescale the data before plotting.
pub const PLOT_LIMIT: f64 = 1e150;

/// An axis range [lo, hi] widened by `pad` of its length on both sides (and to a unit
/// interval around a single value, or around a span too small for a double to divide into
/// ticks), so data never sits on the frame. An empty range (lo > hi, as left by a fold
/// over no values) gives [0, 1].
///
/// # Errors
/// [`Error::InvalidArgument`] when the padded range leaves ±[`PLOT_LIMIT`] (including an
/// end that overflowed to ±∞, or NaN).
pub(crate) fn padded(lo: f64, hi: f64, pad: f64) -> Result<(f64, f64)> {
    if lo > hi {
        return Ok((0.0, 1.0));
    }
    let big = lo.abs().max(hi.abs());
    let span = hi - lo;
    // A span below ~1e3 ulps of the values (or below 1e-150 absolute) cannot be divided
    // into distinct tick labels: treat it as a single value.
    let (a, b) = if !(span > 1e3 * f64::EPSILON * big && span > 1.0 / PLOT_LIMIT) {
        let mid = 0.5 * lo + 0.5 * hi;
        let half = mid.abs().max(1.0) * 0.5;
        (mid - half, mid + half)
    } else {
        (lo - pad * span, hi + pad * span)
    };
    if !(a.abs() <= PLOT_LIMIT && b.abs() <= PLOT_LIMIT) {
        return Err(Error::InvalidArgument(format!(
            "values up to {big:e} in magnitude are beyond the plottable range ±{PLOT_LIMIT:e} \
             (rescale before plotting)"
        )));
    }
    Ok((a, b))
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
