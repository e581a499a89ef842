//! SVG figures of the district-heating pipeline (feature `cli`), in the style of
//! [`crate::plot`]:
//!
//! * `fan.svg`: forecast against actual for one substation on one test day, with the CRF's
//!   scenario fan (5–95 % and 25–75 % bands, a few scenarios) and the lasso's
//!   independent-error 90 % band for comparison;
//! * `precision.svg`: the learned sparsity pattern of Λ against the true one (found true
//!   edges, spurious edges, missed edges), outputs in substation-major order;
//! * `validation.svg`: the validation curve of the CRF grid (mean negative log-likelihood per
//!   day against λ_Λ, one line per ratio λ_Θ/λ_Λ), with the chosen point marked, and the
//!   number of edges of Λ against the true number;
//! * `race.svg`: the solver race on the chosen problem ([`crate::race_plot::plot_race`]).

use std::path::{Path, PathBuf};

use plotters::prelude::*;

use super::pipeline::{CrfGridPoint, Fan, Report};
use crate::error::{Error, Result};
use crate::plot::{check_size, draw_legend, padded, CAPTION_SIZE, PALETTE};

/// A class of cells of the sparsity figure: legend label, colour, the (i < j) pairs.
type EdgeCategory = (&'static str, RGBAColor, Vec<(usize, usize)>);

fn io(file: &Path) -> impl Fn(String) -> Error + '_ {
    move |message| Error::Io {
        file: file.display().to_string(),
        message,
    }
}

/// Writes every figure of `report` into `dir` (created if missing); returns the files
/// written.
///
/// # Errors
/// [`Error::Io`] if the folder cannot be created or a figure cannot be written; the
/// figures' own errors ([`plot_fan`], [`plot_structure`], [`plot_validation`]).
pub fn write_figures(report: &Report, dir: &Path) -> Result<Vec<PathBuf>> {
    std::fs::create_dir_all(dir).map_err(|e| io(dir)(e.to_string()))?;
    let mut files = Vec::new();
    let f = dir.join("fan.svg");
    plot_fan(&report.fan, &f, 900, 560)?;
    files.push(f);
    let f = dir.join("precision.svg");
    plot_structure(report, &f, 820, 860)?;
    files.push(f);
    let f = dir.join("validation.svg");
    plot_validation(
        &report.crf_grid,
        report.chosen,
        report.structure.true_edges,
        &f,
        1100,
        520,
    )?;
    files.push(f);
    if let Some(race) = &report.race {
        let f = dir.join("race.svg");
        crate::race_plot::plot_race(race, &f, 900, 560)?;
        files.push(f);
    }
    Ok(files)
}

/// The forecast fan of one substation-day (see the module docs).
///
/// # Errors
/// [`Error::InvalidArgument`] for a size below [`crate::plot::MIN_SIZE`], inconsistent
/// lengths, an hour outside [0, 24), or values beyond ±[`crate::plot::PLOT_LIMIT`];
/// [`Error::Io`] if drawing fails.
pub fn plot_fan(fan: &Fan, file: &Path, width: u32, height: u32) -> Result<()> {
    check_size(width, height)?;
    let h = fan.hour_start.len();
    let ok = h > 0
        && fan.actual.len() == h
        && fan.mean.len() == h
        && fan.quantiles.len() == 5
        && fan.quantiles.iter().all(|v| v.len() == h)
        && fan.scenarios.iter().all(|v| v.len() == h)
        && fan.lasso_band.len() == 2
        && fan.lasso_band.iter().all(|v| v.len() == h);
    // The x axis is the clock day [0, 24]: an hour outside it would be drawn far off the
    // chart (and overflow the drawing library's pixel arithmetic).
    if let Some(t) = fan.hour_start.iter().find(|t| !(0.0..24.0).contains(*t)) {
        return Err(Error::InvalidArgument(format!(
            "fan hour {t} is outside the clock day [0, 24)"
        )));
    }
    if !ok {
        return Err(Error::InvalidArgument(
            "fan data with inconsistent lengths".into(),
        ));
    }
    // Each output covers [start, start + width); draw values at the interval midpoints.
    let step = 24.0 / h as f64;
    let xs: Vec<f64> = fan.hour_start.iter().map(|t| t + 0.5 * step).collect();
    let all = fan
        .actual
        .iter()
        .chain(&fan.mean)
        .chain(fan.quantiles.iter().flatten())
        .chain(fan.scenarios.iter().flatten())
        .chain(fan.lasso_band.iter().flatten());
    let (lo, hi) = all.fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), &v| {
        (a.min(v), b.max(v))
    });
    let (lo, hi) = padded(lo, hi, 0.08)?;
    let io = io(file);
    let root = SVGBackend::new(file, (width, height)).into_drawing_area();
    root.fill(&WHITE).map_err(|e| io(e.to_string()))?;
    let title = format!(
        "Substation {}, day {} of the test year (largest network peak): forecast",
        fan.substation, fan.day_of_year
    );
    let mut chart = ChartBuilder::on(&root)
        .caption(title, ("sans-serif", CAPTION_SIZE))
        .margin(12)
        .x_label_area_size(45)
        .y_label_area_size(70)
        .build_cartesian_2d(0.0..24.0, lo..hi)
        .map_err(|e| io(e.to_string()))?;
    chart
        .configure_mesh()
        .x_desc("hour of the day (h, local clock time)")
        .y_desc("heat demand (MW)")
        .x_labels(13)
        .draw()
        .map_err(|e| io(e.to_string()))?;
    let blue = PALETTE[0];
    let band = |a: &[f64], b: &[f64]| -> Vec<(f64, f64)> {
        xs.iter()
            .zip(a)
            .map(|(&x, &v)| (x, v))
            .chain(xs.iter().zip(b).rev().map(|(&x, &v)| (x, v)))
            .collect()
    };
    chart
        .draw_series(std::iter::once(Polygon::new(
            band(&fan.quantiles[0], &fan.quantiles[4]),
            blue.mix(0.18).filled(),
        )))
        .map_err(|e| io(e.to_string()))?
        .label("CRF scenarios, 5–95 %")
        .legend(move |(x, y)| {
            Rectangle::new([(x, y - 5), (x + 20, y + 5)], blue.mix(0.18).filled())
        });
    chart
        .draw_series(std::iter::once(Polygon::new(
            band(&fan.quantiles[1], &fan.quantiles[3]),
            blue.mix(0.35).filled(),
        )))
        .map_err(|e| io(e.to_string()))?
        .label("CRF scenarios, 25–75 %")
        .legend(move |(x, y)| {
            Rectangle::new([(x, y - 5), (x + 20, y + 5)], blue.mix(0.35).filled())
        });
    for (i, sc) in fan.scenarios.iter().enumerate() {
        let series = chart
            .draw_series(LineSeries::new(
                xs.iter().copied().zip(sc.iter().copied()),
                blue.mix(0.45).stroke_width(1),
            ))
            .map_err(|e| io(e.to_string()))?;
        if i == 0 {
            series.label("CRF scenarios (a few)").legend(move |(x, y)| {
                PathElement::new(vec![(x, y), (x + 20, y)], blue.mix(0.45).stroke_width(1))
            });
        }
    }
    chart
        .draw_series(LineSeries::new(
            xs.iter().copied().zip(fan.mean.iter().copied()),
            blue.stroke_width(3),
        ))
        .map_err(|e| io(e.to_string()))?
        .label("CRF mean forecast")
        .legend(move |(x, y)| PathElement::new(vec![(x, y), (x + 20, y)], blue.stroke_width(3)));
    let orange = PALETTE[4];
    for (i, b) in fan.lasso_band.iter().enumerate() {
        let series = chart
            .draw_series(DashedLineSeries::new(
                xs.iter().copied().zip(b.iter().copied()),
                6,
                4,
                orange.stroke_width(2),
            ))
            .map_err(|e| io(e.to_string()))?;
        if i == 0 {
            series
                .label("lasso, independent errors, 5 % and 95 %")
                .legend(move |(x, y)| {
                    PathElement::new(vec![(x, y), (x + 20, y)], orange.stroke_width(2))
                });
        }
    }
    chart
        .draw_series(LineSeries::new(
            xs.iter().copied().zip(fan.actual.iter().copied()),
            BLACK.stroke_width(2),
        ))
        .map_err(|e| io(e.to_string()))?;
    chart
        .draw_series(
            xs.iter()
                .zip(&fan.actual)
                .map(|(&x, &v)| Circle::new((x, v), 4, BLACK.filled())),
        )
        .map_err(|e| io(e.to_string()))?
        .label("actual demand")
        .legend(|(x, y)| Circle::new((x + 10, y), 4, BLACK.filled()));
    draw_legend(&mut chart, SeriesLabelPosition::UpperRight, Some(14)).map_err(&io)?;
    root.present().map_err(|e| io(e.to_string()))?;
    Ok(())
}

/// The learned sparsity pattern of Λ against the true one (see the module docs).
///
/// # Errors
/// [`Error::InvalidArgument`] for a size below [`crate::plot::MIN_SIZE`] or an edge outside
/// the q×q matrix; [`Error::Io`] if drawing fails.
pub fn plot_structure(report: &Report, file: &Path, width: u32, height: u32) -> Result<()> {
    check_size(width, height)?;
    let q = report.sizes.outputs;
    let hours = report.sizes.hours.max(1);
    let bad = report
        .learned_edges
        .iter()
        .chain(&report.true_edges)
        .any(|&(i, j)| i >= q || j >= q);
    if q == 0 || bad {
        return Err(Error::InvalidArgument(
            "edges outside the precision matrix".into(),
        ));
    }
    let truth: std::collections::HashSet<(usize, usize)> =
        report.true_edges.iter().copied().collect();
    let learned: std::collections::HashSet<(usize, usize)> =
        report.learned_edges.iter().copied().collect();
    let io = io(file);
    let root = SVGBackend::new(file, (width, height)).into_drawing_area();
    root.fill(&WHITE).map_err(|e| io(e.to_string()))?;
    let s = &report.structure;
    let title = format!(
        "Sparsity of Λ: precision {:.2}, recall {:.2} (chance {:.3})",
        s.precision, s.recall, s.chance
    );
    let qf = q as f64;
    let mut chart = ChartBuilder::on(&root)
        .caption(title, ("sans-serif", CAPTION_SIZE))
        .margin(12)
        .x_label_area_size(45)
        .y_label_area_size(70)
        .build_cartesian_2d(0.0..qf, qf..0.0)
        .map_err(|e| io(e.to_string()))?;
    let subs = report.sizes.substations.max(1);
    let tick = (subs / 8).max(1);
    chart
        .configure_mesh()
        .disable_mesh()
        .x_desc(format!(
            "output j = substation·{hours} + hour (substation-major)"
        ))
        .y_desc("output i")
        .x_labels(subs / tick + 1)
        .y_labels(subs / tick + 1)
        .x_label_formatter(&|v| format!("{:.0}", v))
        .y_label_formatter(&|v| format!("{:.0}", v))
        .draw()
        .map_err(|e| io(e.to_string()))?;
    // Substation blocks as a faint grid.
    let grid = BLACK.mix(0.12);
    chart
        .draw_series((1..subs).flat_map(|k| {
            let v = (k * hours) as f64;
            [
                PathElement::new(vec![(v, 0.0), (v, qf)], grid.stroke_width(1)),
                PathElement::new(vec![(0.0, v), (qf, v)], grid.stroke_width(1)),
            ]
        }))
        .map_err(|e| io(e.to_string()))?;
    let cell = |i: usize, j: usize, color: RGBAColor| {
        Rectangle::new(
            [(j as f64, i as f64), (j as f64 + 1.0, i as f64 + 1.0)],
            color.filled(),
        )
    };
    let categories: [EdgeCategory; 3] = [
        (
            "true edge, missed",
            PALETTE[0].mix(0.35),
            report
                .true_edges
                .iter()
                .copied()
                .filter(|e| !learned.contains(e))
                .collect(),
        ),
        (
            "learned edge, not in the truth",
            PALETTE[1].mix(0.9),
            report
                .learned_edges
                .iter()
                .copied()
                .filter(|e| !truth.contains(e))
                .collect(),
        ),
        (
            "learned edge, true",
            BLACK.mix(1.0),
            report
                .learned_edges
                .iter()
                .copied()
                .filter(|e| truth.contains(e))
                .collect(),
        ),
    ];
    for (name, color, edges) in categories {
        chart
            .draw_series(
                edges
                    .iter()
                    .flat_map(|&(i, j)| [cell(i, j, color), cell(j, i, color)]),
            )
            .map_err(|e| io(e.to_string()))?
            .label(format!("{name} ({})", edges.len()))
            .legend(move |(x, y)| Rectangle::new([(x, y - 5), (x + 12, y + 5)], color.filled()));
    }
    draw_legend(&mut chart, SeriesLabelPosition::LowerLeft, Some(14)).map_err(&io)?;
    root.present().map_err(|e| io(e.to_string()))?;
    Ok(())
}

/// The validation curve of the CRF grid (see the module docs): two panels, validation
/// negative log-likelihood and edges of Λ against log10 λ_Λ.
///
/// # Errors
/// [`Error::InvalidArgument`] for a size below [`crate::plot::MIN_SIZE`], an empty grid,
/// `chosen` out of range, or values beyond ±[`crate::plot::PLOT_LIMIT`]; [`Error::Io`] if
/// drawing fails.
pub fn plot_validation(
    grid: &[CrfGridPoint],
    chosen: usize,
    true_edges: usize,
    file: &Path,
    width: u32,
    height: u32,
) -> Result<()> {
    check_size(width, height)?;
    if grid.is_empty() || chosen >= grid.len() {
        return Err(Error::InvalidArgument(
            "validation curve needs a non-empty grid and a chosen point in it".into(),
        ));
    }
    // Group the grid by ratio λ_Θ/λ_Λ (paths), keeping the fitting order.
    let mut ratios: Vec<f64> = Vec::new();
    for g in grid {
        let c = g.lambda_interaction / g.lambda_precision;
        if !ratios.iter().any(|r| (r - c).abs() <= 1e-12 * c) {
            ratios.push(c);
        }
    }
    let series_of = |c: f64, f: &dyn Fn(&CrfGridPoint) -> f64| -> Vec<(f64, f64)> {
        let mut v: Vec<(f64, f64)> = grid
            .iter()
            .filter(|g| (g.lambda_interaction / g.lambda_precision - c).abs() <= 1e-12 * c)
            .map(|g| (g.lambda_precision.log10(), f(g)))
            .filter(|(_, y)| y.is_finite())
            .collect();
        v.sort_by(|a, b| a.0.total_cmp(&b.0));
        v
    };
    let xs = grid.iter().map(|g| g.lambda_precision.log10());
    let (x_lo, x_hi) = xs.fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), v| {
        (a.min(v), b.max(v))
    });
    let (x_lo, x_hi) = padded(x_lo, x_hi, 0.05)?;
    let io = io(file);
    let root = SVGBackend::new(file, (width, height)).into_drawing_area();
    root.fill(&WHITE).map_err(|e| io(e.to_string()))?;
    let root = root
        .titled(
            "Sparse CRF: choice of (λ_Λ, λ_Θ) on the validation year",
            ("sans-serif", CAPTION_SIZE),
        )
        .map_err(|e| io(e.to_string()))?;
    let (left, right) = root.split_horizontally(width / 2);
    type Panel<'a, A> = (&'a str, &'a dyn Fn(&CrfGridPoint) -> f64, A);
    let panels: [Panel<_>; 2] = [
        (
            "validation NLL (nats per day)",
            &|g: &CrfGridPoint| g.validation_nll,
            left,
        ),
        ("edges of Λ", &|g: &CrfGridPoint| g.edges as f64, right),
    ];
    for (p, (ylabel, f, area)) in panels.into_iter().enumerate() {
        let vals = grid.iter().map(f).filter(|v| v.is_finite());
        let (mut lo, mut hi) = vals.fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), v| {
            (a.min(v), b.max(v))
        });
        if p == 1 {
            lo = lo.min(true_edges as f64);
            hi = hi.max(true_edges as f64);
            lo = lo.min(0.0);
        }
        let (lo, hi) = padded(lo, hi, 0.08)?;
        let mut chart = ChartBuilder::on(&area)
            .margin(12)
            .x_label_area_size(45)
            .y_label_area_size(80)
            .build_cartesian_2d(x_lo..x_hi, lo..hi)
            .map_err(|e| io(e.to_string()))?;
        chart
            .configure_mesh()
            .x_desc("log10 λ_Λ (outputs scaled by residual sd)")
            .y_desc(ylabel)
            .draw()
            .map_err(|e| io(e.to_string()))?;
        for (k, &c) in ratios.iter().enumerate() {
            let color = PALETTE[k % PALETTE.len()];
            let pts = series_of(c, f);
            chart
                .draw_series(LineSeries::new(pts.clone(), color.stroke_width(2)))
                .map_err(|e| io(e.to_string()))?
                .label(format!("λ_Θ = {}·λ_Λ", short(c)))
                .legend(move |(x, y)| {
                    PathElement::new(vec![(x, y), (x + 20, y)], color.stroke_width(2))
                });
            chart
                .draw_series(
                    pts.iter()
                        .map(|&(x, y)| Circle::new((x, y), 3, color.filled())),
                )
                .map_err(|e| io(e.to_string()))?;
        }
        let g = &grid[chosen];
        let red = PALETTE[1];
        chart
            .draw_series(std::iter::once(Circle::new(
                (g.lambda_precision.log10(), f(g)),
                8,
                red.stroke_width(2),
            )))
            .map_err(|e| io(e.to_string()))?
            .label(format!(
                "chosen: λ_Λ = {}, λ_Θ = {}",
                short(g.lambda_precision),
                short(g.lambda_interaction)
            ))
            .legend(move |(x, y)| Circle::new((x + 10, y), 6, red.stroke_width(2)));
        if p == 1 {
            let t = true_edges as f64;
            chart
                .draw_series(DashedLineSeries::new(
                    vec![(x_lo, t), (x_hi, t)],
                    6,
                    4,
                    BLACK.mix(0.6).stroke_width(1),
                ))
                .map_err(|e| io(e.to_string()))?
                .label(format!("true edges ({true_edges})"))
                .legend(|(x, y)| {
                    PathElement::new(vec![(x, y), (x + 20, y)], BLACK.mix(0.6).stroke_width(1))
                });
        }
        draw_legend(
            &mut chart,
            if p == 0 {
                SeriesLabelPosition::UpperLeft
            } else {
                SeriesLabelPosition::UpperRight
            },
            Some(14),
        )
        .map_err(&io)?;
    }
    root.present().map_err(|e| io(e.to_string()))?;
    Ok(())
}

/// A grid value for a legend: four significant digits, no trailing zeros or
/// representation noise (0.1·3 shows as 0.3, not 0.30000000000000004).
fn short(v: f64) -> String {
    if v == 0.0 || !v.is_finite() {
        return format!("{v}");
    }
    let digits = (3 - v.abs().log10().floor() as i32).max(0) as usize;
    let s = format!("{v:.digits$}");
    if s.contains('.') {
        s.trim_end_matches('0').trim_end_matches('.').to_string()
    } else {
        s
    }
}

#[cfg(test)]
mod tests {
    use super::short;

    #[test]
    fn legend_values_are_short() {
        assert_eq!(short(0.1 * 1.0000000000000002), "0.1");
        assert_eq!(short(0.3 * 0.025), "0.0075");
        assert_eq!(short(0.025), "0.025");
        assert_eq!(short(1.0), "1");
        assert_eq!(short(123.456), "123.5");
        assert_eq!(short(0.0), "0");
    }
}
