//! Coefficient paths: each coefficient x_k(λ) against log10 λ along a regularisation path,
//! one line per coefficient that is non-zero at some point of the path (coefficients that
//! stay at zero would only stack on the zero line).

use super::{check_size, draw_legend, io_error, padded, CAPTION_SIZE, PALETTE};
use crate::error::{Error, Result};
use crate::path::RegPath;
use plotters::prelude::*;
use std::collections::BTreeSet;
use std::path::Path;

/// At most this many lines get a legend entry; beyond it the legend would hide the plot.
pub const MAX_LEGEND_ENTRIES: usize = 12;

/// What to draw and how large.
#[derive(Debug, Clone, PartialEq)]
pub struct PathPlotOptions {
    /// The caption. Default "Coefficient paths".
    pub title: String,
    /// The coordinates that may be drawn (e.g. the coefficients without an intercept);
    /// `None` draws every coordinate. Default `None`.
    pub coordinates: Option<Vec<usize>>,
    /// A name per coordinate of the problem for the legend; `None` names coordinate k
    /// `x[k]`. Default `None`.
    pub names: Option<Vec<String>>,
    /// Width in pixels. Default 900.
    pub width: u32,
    /// Height in pixels. Default 600.
    pub height: u32,
}

impl Default for PathPlotOptions {
    fn default() -> Self {
        Self {
            title: "Coefficient paths".into(),
            coordinates: None,
            names: None,
            width: 900,
            height: 600,
        }
    }
}

/// Writes the SVG plot of the coefficient paths of `path` to `file`: x axis log10 λ, y axis
/// the coefficient value. Points with λ ≤ 0 have no logarithm and are left out.
///
/// # Errors
/// [`Error::InvalidArgument`] for a size below [`super::MIN_SIZE`], a coordinate outside the
/// problem, names of the wrong length, a path without a point at λ > 0, or coefficients
/// beyond ±[`super::PLOT_LIMIT`]; [`Error::Io`] if drawing or writing fails.
pub fn plot_path(path: &RegPath, file: &Path, opts: &PathPlotOptions) -> Result<()> {
    check_size(opts.width, opts.height)?;
    if let Some(names) = &opts.names {
        if names.len() != path.dim {
            return Err(Error::InvalidArgument(format!(
                "{} coordinate names for a problem with {} coordinates",
                names.len(),
                path.dim
            )));
        }
    }
    let allowed: Option<BTreeSet<usize>> = match &opts.coordinates {
        Some(c) => {
            if let Some(&k) = c.iter().find(|&&k| k >= path.dim) {
                return Err(Error::InvalidArgument(format!(
                    "coordinate {k} outside a problem with {} coordinates",
                    path.dim
                )));
            }
            Some(c.iter().copied().collect())
        }
        None => None,
    };
    let points: Vec<_> = path.points.iter().filter(|p| p.lambda > 0.0).collect();
    if points.is_empty() {
        return Err(Error::InvalidArgument(
            "the path has no point with λ > 0 to plot on a log scale".into(),
        ));
    }
    // The coordinates ever non-zero, and their values at every point.
    let drawn: Vec<usize> = points
        .iter()
        .flat_map(|p| p.x.indices.iter().copied())
        .filter(|k| allowed.as_ref().is_none_or(|a| a.contains(k)))
        .collect::<BTreeSet<_>>()
        .into_iter()
        .collect();
    let line_of = |k: usize| drawn.binary_search(&k).ok();
    let mut values = vec![vec![0.0; points.len()]; drawn.len()];
    for (t, p) in points.iter().enumerate() {
        for (&k, &v) in p.x.indices.iter().zip(&p.x.values) {
            if let Some(l) = line_of(k) {
                values[l][t] = v;
            }
        }
    }
    let xs: Vec<f64> = points.iter().map(|p| p.lambda.log10()).collect();
    let (x_lo, x_hi) = xs
        .iter()
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), &v| {
            (a.min(v), b.max(v))
        });
    let (y_lo, y_hi) = values
        .iter()
        .flatten()
        .filter(|v| v.is_finite())
        .fold((0.0f64, 0.0f64), |(a, b), &v| (a.min(v), b.max(v)));
    let (x_lo, x_hi) = padded(x_lo, x_hi, 0.02)?;
    let (y_lo, y_hi) = padded(y_lo, y_hi, 0.05)?;
    let io = io_error(file);

    let root = SVGBackend::new(file, (opts.width, opts.height)).into_drawing_area();
    root.fill(&WHITE).map_err(|e| io(e.to_string()))?;
    let mut chart = ChartBuilder::on(&root)
        .caption(opts.title.as_str(), ("sans-serif", CAPTION_SIZE))
        .margin(12)
        .x_label_area_size(45)
        .y_label_area_size(75)
        .build_cartesian_2d(x_lo..x_hi, y_lo..y_hi)
        .map_err(|e| io(e.to_string()))?;
    chart
        .configure_mesh()
        .x_desc("log10 λ")
        .y_desc("coefficient")
        .draw()
        .map_err(|e| io(e.to_string()))?;
    chart
        .draw_series(LineSeries::new(
            vec![(x_lo, 0.0), (x_hi, 0.0)],
            BLACK.mix(0.4).stroke_width(1),
        ))
        .map_err(|e| io(e.to_string()))?;
    let legend = drawn.len() <= MAX_LEGEND_ENTRIES;
    for (l, &k) in drawn.iter().enumerate() {
        let color = PALETTE[l % PALETTE.len()];
        let series = chart
            .draw_series(LineSeries::new(
                xs.iter().copied().zip(values[l].iter().copied()),
                color.stroke_width(2),
            ))
            .map_err(|e| io(e.to_string()))?;
        if legend {
            let name = match &opts.names {
                Some(n) => n[k].clone(),
                None => format!("x[{k}]"),
            };
            series.label(name).legend(move |(x, y)| {
                PathElement::new(vec![(x, y), (x + 20, y)], color.stroke_width(2))
            });
        }
    }
    if legend && !drawn.is_empty() {
        draw_legend(&mut chart, SeriesLabelPosition::UpperRight, None).map_err(&io)?;
    }
    root.present().map_err(|e| io(e.to_string()))?;
    Ok(())
}
