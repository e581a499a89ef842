//! The cross-validation curve: the mean held-out score over folds against log10 λ, with
//! ±1 standard-error bars, and dashed vertical markers at the two chosen values, λ_min (the
//! minimum mean score) and λ_1se (the largest λ within one standard error of it).

use super::{check_size, draw_legend, io_error, padded, CAPTION_SIZE, PALETTE};
use crate::cv::CvResult;
use crate::error::{Error, Result};
use plotters::prelude::*;
use std::path::Path;

/// Writes the SVG plot of `cv` to `file` (width × height pixels) with the caption `title`.
/// The y axis is labelled with the primary score's name. λ values ≤ 0 have no logarithm
/// and are left out.
///
/// # Errors
/// [`Error::InvalidArgument`] for a size below [`super::MIN_SIZE`], inconsistent lengths,
/// no λ > 0, or scores beyond ±[`super::PLOT_LIMIT`]; [`Error::Io`] if drawing or writing
/// fails.
pub fn plot_cv(cv: &CvResult, file: &Path, title: &str, width: u32, height: u32) -> Result<()> {
    check_size(width, height)?;
    let nl = cv.lambdas.len();
    if cv.mean.len() != nl || cv.std_error.len() != nl || cv.best >= nl || cv.one_se >= nl {
        return Err(Error::InvalidArgument(
            "cross-validation result with inconsistent lengths".into(),
        ));
    }
    // (log10 λ, mean, se) for λ > 0 and finite scores.
    let pts: Vec<(f64, f64, f64)> = (0..nl)
        .filter(|&l| cv.lambdas[l] > 0.0 && cv.mean[l].is_finite())
        .map(|l| {
            let se = if cv.std_error[l].is_finite() {
                cv.std_error[l]
            } else {
                0.0
            };
            (cv.lambdas[l].log10(), cv.mean[l], se)
        })
        .collect();
    if pts.is_empty() {
        return Err(Error::InvalidArgument(
            "no λ > 0 with a finite score to plot on a log scale".into(),
        ));
    }
    let (mut x_lo, mut x_hi, mut y_lo, mut y_hi) = (
        f64::INFINITY,
        f64::NEG_INFINITY,
        f64::INFINITY,
        f64::NEG_INFINITY,
    );
    for &(x, m, se) in &pts {
        x_lo = x_lo.min(x);
        x_hi = x_hi.max(x);
        y_lo = y_lo.min(m - se);
        y_hi = y_hi.max(m + se);
    }
    // Half the typical grid spacing, for the error-bar caps.
    let cap = if pts.len() > 1 {
        0.25 * (x_hi - x_lo) / (pts.len() - 1) as f64
    } else {
        0.05
    };
    let (x_lo, x_hi) = padded(x_lo, x_hi, 0.03)?;
    let (y_lo, y_hi) = padded(y_lo, y_hi, 0.08)?;
    // Headroom for the three-line legend in the upper left, so it does not cover data.
    let y_hi = y_hi + 0.2 * (y_hi - y_lo);
    let score = cv
        .score_names
        .first()
        .map_or("held-out score", String::as_str);
    let io = io_error(file);

    let root = SVGBackend::new(file, (width, height)).into_drawing_area();
    root.fill(&WHITE).map_err(|e| io(e.to_string()))?;
    let mut chart = ChartBuilder::on(&root)
        .caption(title, ("sans-serif", CAPTION_SIZE))
        .margin(12)
        .x_label_area_size(45)
        .y_label_area_size(75)
        .build_cartesian_2d(x_lo..x_hi, y_lo..y_hi)
        .map_err(|e| io(e.to_string()))?;
    chart
        .configure_mesh()
        .x_desc("log10 λ")
        .y_desc(format!("{score} (mean ± 1 s.e.)"))
        .draw()
        .map_err(|e| io(e.to_string()))?;
    let bar = PALETTE[7];
    chart
        .draw_series(pts.iter().flat_map(|&(x, m, se)| {
            [
                PathElement::new(vec![(x, m - se), (x, m + se)], bar.stroke_width(1)),
                PathElement::new(
                    vec![(x - cap, m - se), (x + cap, m - se)],
                    bar.stroke_width(1),
                ),
                PathElement::new(
                    vec![(x - cap, m + se), (x + cap, m + se)],
                    bar.stroke_width(1),
                ),
            ]
        }))
        .map_err(|e| io(e.to_string()))?;
    let line = PALETTE[0];
    chart
        .draw_series(
            pts.iter()
                .map(|&(x, m, _)| Circle::new((x, m), 3, line.filled())),
        )
        .map_err(|e| io(e.to_string()))?
        .label(format!("{score}, mean over folds"))
        .legend(move |(x, y)| Circle::new((x + 10, y), 3, line.filled()));
    let markers = [
        (cv.lambda_best()?, "λ_min", PALETTE[1]),
        (cv.lambda_one_se()?, "λ_1se", PALETTE[2]),
    ];
    for (lambda, name, color) in markers {
        let x = lambda.log10();
        // λ ≤ 0 has no place on the axis; a λ whose score was not finite (left out of the
        // points) may lie outside the drawn range.
        if !(x_lo..=x_hi).contains(&x) {
            continue;
        }
        chart
            .draw_series(DashedLineSeries::new(
                vec![(x, y_lo), (x, y_hi)],
                6,
                4,
                color.stroke_width(2),
            ))
            .map_err(|e| io(e.to_string()))?
            .label(format!("{name} = {lambda:.3e}"))
            .legend(move |(x, y)| {
                PathElement::new(vec![(x, y), (x + 20, y)], color.stroke_width(2))
            });
    }
    draw_legend(&mut chart, SeriesLabelPosition::UpperLeft, None).map_err(&io)?;
    root.present().map_err(|e| io(e.to_string()))?;
    Ok(())
}
