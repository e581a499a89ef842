//! The convergence plot of a race (feature `cli`): relative suboptimality on a log scale
//! against wall-clock seconds, one line per solver, drawn and listed in the legend from the
//! fastest solver to the slowest ([`RaceResult::ranking`]).
//!
//! Suboptimalities at or below the display floor (1e-16, below the resolution of a double
//! relative to F_best) are drawn at the floor, so a racer that reached F_best exactly stays
//! visible. A dashed horizontal line marks the race's target accuracy.

use crate::error::{Error, Result};
use crate::plot::{draw_legend, PLOT_LIMIT};
use crate::race::RaceResult;
use plotters::prelude::*;
use std::path::Path;

/// Lowest value drawn on the logarithmic axis.
pub const DISPLAY_FLOOR: f64 = 1e-16;

/// Line colours, one per racer in ranking order (cycled).
const PALETTE: [RGBColor; 6] = [
    RGBColor(31, 119, 180),
    RGBColor(214, 39, 40),
    RGBColor(44, 160, 44),
    RGBColor(148, 103, 189),
    RGBColor(255, 127, 14),
    RGBColor(140, 86, 75),
];

/// Writes the SVG convergence plot of `result` to `path` (width × height pixels).
///
/// # Errors
/// [`Error::InvalidArgument`] for a race without records, a size below 200 × 150, or
/// times or suboptimalities beyond [`PLOT_LIMIT`];
/// [`Error::Io`] if drawing or writing the file fails.
pub fn plot_race(result: &RaceResult, path: &Path, width: u32, height: u32) -> Result<()> {
    if width < 200 || height < 150 {
        return Err(Error::InvalidArgument(format!(
            "plot size {width}x{height} is too small (at least 200x150)"
        )));
    }
    let points: Vec<(String, Vec<(f64, f64)>)> = result
        .ranking()
        .into_iter()
        .map(|i| {
            let e = &result.entries[i];
            let pts = e
                .records
                .iter()
                .map(|r| {
                    let s = result.relative_suboptimality(r.objective);
                    (r.seconds, s.max(DISPLAY_FLOOR))
                })
                // Times are ≥ 0 (the axis starts at the solve's start).
                .filter(|(t, s)| t.is_finite() && *t >= 0.0 && s.is_finite())
                .collect();
            (e.solver.clone(), pts)
        })
        .collect();
    let all = points.iter().flat_map(|(_, p)| p.iter());
    let (mut t_max, mut s_min, mut s_max) = (0.0f64, f64::INFINITY, 0.0f64);
    let mut count = 0usize;
    for &(t, s) in all {
        t_max = t_max.max(t);
        s_min = s_min.min(s);
        s_max = s_max.max(s);
        count += 1;
    }
    if count == 0 {
        return Err(Error::InvalidArgument(
            "the race has no records to plot".into(),
        ));
    }
    let target = result.target.max(DISPLAY_FLOOR);
    // A target beyond the drawable range (e.g. 1e308: "any accuracy") gets no line.
    let draw_target = target <= PLOT_LIMIT / 3.0;
    if draw_target {
        s_min = s_min.min(target);
        s_max = s_max.max(target);
    }
    s_min /= 3.0;
    s_max *= 3.0;
    let t_max = if t_max > 0.0 { t_max * 1.05 } else { 1e-3 };
    if !(t_max <= PLOT_LIMIT && s_max <= PLOT_LIMIT) {
        return Err(Error::InvalidArgument(format!(
            "times or suboptimalities beyond the plottable range {PLOT_LIMIT:e} \
             (largest time {t_max:e} s, largest suboptimality {s_max:e})"
        )));
    }
    let io = |e: String| Error::Io {
        file: path.display().to_string(),
        message: e,
    };

    let root = SVGBackend::new(path, (width, height)).into_drawing_area();
    root.fill(&WHITE).map_err(|e| io(e.to_string()))?;
    let mut chart = ChartBuilder::on(&root)
        .caption("Convergence race", ("sans-serif", 22))
        .margin(12)
        .x_label_area_size(45)
        .y_label_area_size(75)
        .build_cartesian_2d(0.0..t_max, (s_min..s_max).log_scale())
        .map_err(|e| io(e.to_string()))?;
    chart
        .configure_mesh()
        .x_desc("wall-clock time (seconds)")
        .y_desc("relative suboptimality (F − F_best)/|F_best|")
        .y_label_formatter(&|v| format!("{v:.0e}"))
        .draw()
        .map_err(|e| io(e.to_string()))?;
    if draw_target {
        chart
            .draw_series(DashedLineSeries::new(
                vec![(0.0, target), (t_max, target)],
                6,
                4,
                BLACK.mix(0.5).stroke_width(1),
            ))
            .map_err(|e| io(e.to_string()))?;
    }
    for (k, (name, pts)) in points.iter().enumerate() {
        let color = PALETTE[k % PALETTE.len()];
        chart
            .draw_series(LineSeries::new(pts.iter().copied(), color.stroke_width(2)))
            .map_err(|e| io(e.to_string()))?
            .label(name.as_str())
            .legend(move |(x, y)| {
                PathElement::new(vec![(x, y), (x + 20, y)], color.stroke_width(2))
            });
    }
    draw_legend(&mut chart, SeriesLabelPosition::UpperRight, None).map_err(&io)?;
    root.present().map_err(|e| io(e.to_string()))?;
    Ok(())
}
