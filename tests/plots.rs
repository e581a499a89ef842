//! SVG plots of paths and cross-validation: the files are written, are well-formed XML, and
//! carry the expected text; when `rsvg-convert` (an independent SVG renderer, Debian
//! librsvg2-bin) is installed they are rendered to PNG as an outside check that they parse.
#![cfg(feature = "cli")]

mod common;

use common::read_numeric_table;
use ellone::cv::{cross_validate, CvOptions};
use ellone::path::{fit_path, PathOptions};
use ellone::plot::{plot_cv, plot_path, PathPlotOptions};
use ellone::{LeastSquares, Penalty};
use std::path::{Path, PathBuf};
use std::process::Command;

fn temp(name: &str) -> PathBuf {
    std::env::temp_dir().join(format!("ellone-plots-{}-{name}", std::process::id()))
}

/// The macrodata lasso problem of tests/data (least squares with intercept).
fn macrodata() -> (LeastSquares, Vec<String>) {
    let (names, x) = read_numeric_table("macrodata-lasso-X.csv");
    let (_, y) = read_numeric_table("macrodata-lasso-y.csv");
    let loss = LeastSquares::from_dense(x.view(), y.column(0).as_slice().unwrap(), true).unwrap();
    (loss, names)
}

/// A minimal XML well-formedness check: every tag is closed in order, attributes are
/// quoted, and `&` only starts an entity. (No XML parser is a dependency; the rendering
/// check below uses a real one when available.)
fn assert_well_formed(text: &str) {
    let mut stack: Vec<String> = Vec::new();
    let mut rest = text;
    let mut roots = 0;
    while let Some(start) = rest.find('<') {
        check_text(&rest[..start]);
        let after = &rest[start..];
        if after.starts_with("<?") {
            let end = after.find("?>").expect("unterminated declaration");
            rest = &after[end + 2..];
            continue;
        }
        if after.starts_with("<!--") {
            let end = after.find("-->").expect("unterminated comment");
            rest = &after[end + 3..];
            continue;
        }
        let end = after.find('>').expect("unterminated tag");
        let tag = &after[1..end];
        rest = &after[end + 1..];
        if let Some(name) = tag.strip_prefix('/') {
            let open = stack.pop().expect("closing tag without an opening one");
            assert_eq!(open, name.trim(), "mismatched closing tag");
            continue;
        }
        let name: String = tag
            .chars()
            .take_while(|c| !c.is_whitespace() && *c != '/')
            .collect();
        assert!(!name.is_empty(), "empty tag name");
        assert_eq!(
            tag.matches('"').count() % 2,
            0,
            "unbalanced quotes in <{tag}>"
        );
        if stack.is_empty() {
            roots += 1;
        }
        if !tag.ends_with('/') {
            stack.push(name);
        }
    }
    check_text(rest);
    assert!(stack.is_empty(), "unclosed tags {stack:?}");
    assert_eq!(roots, 1, "an XML document has exactly one root element");
}

fn check_text(t: &str) {
    for (i, _) in t.match_indices('&') {
        let ent = &t[i..];
        let semi = ent.find(';').expect("bare & in text");
        assert!(semi < 10, "bare & in text");
    }
}

/// Renders with rsvg-convert when it is installed; returns the PNG path, or None (with a
/// printed note) when it is not.
fn render_png(svg: &Path) -> Option<PathBuf> {
    let png = svg.with_extension("png");
    match Command::new("rsvg-convert")
        .arg("-o")
        .arg(&png)
        .arg(svg)
        .output()
    {
        Ok(out) => {
            assert!(
                out.status.success(),
                "rsvg-convert rejected {}: {}",
                svg.display(),
                String::from_utf8_lossy(&out.stderr)
            );
            let size = std::fs::metadata(&png).expect("PNG written").len();
            assert!(size > 0, "empty PNG");
            Some(png)
        }
        Err(_) => {
            println!("note: rsvg-convert not installed; PNG rendering check skipped");
            None
        }
    }
}

#[test]
fn path_plot_is_well_formed_and_labelled() {
    let (loss, names) = macrodata();
    let p = names.len();
    let path = fit_path(
        &loss,
        &Penalty::l1(1.0).unwrap(),
        (203, p),
        &PathOptions {
            n_lambdas: 50,
            ..Default::default()
        },
    )
    .unwrap();
    let file = temp("path.svg");
    let mut all_names = names.clone();
    all_names.push("intercept".into());
    let opts = PathPlotOptions {
        title: "Macrodata lasso path".into(),
        coordinates: Some((0..p).collect()),
        names: Some(all_names),
        ..Default::default()
    };
    plot_path(&path, &file, &opts).unwrap();
    let text = std::fs::read_to_string(&file).unwrap();
    assert_well_formed(&text);
    for label in ["log10 λ", "coefficient", "Macrodata lasso path", "realgdp"] {
        assert!(text.contains(label), "missing label {label}");
    }
    // The intercept is not a drawn coordinate, so it has no legend entry.
    assert!(!text.contains(">intercept<"));
    // One 2-pixel polyline per coefficient that is ever non-zero (at least the 10 of the
    // reference solution at 0.01·λ_max, tests/data/README.md), plus one legend sample each.
    let ever: std::collections::BTreeSet<usize> = path
        .points
        .iter()
        .flat_map(|q| q.x.indices.iter().copied())
        .filter(|&k| k < p)
        .collect();
    assert!(ever.len() >= 10);
    let lines = text
        .split("<polyline")
        .skip(1)
        .filter(|t| t.contains("stroke-width=\"2\""))
        .count();
    assert_eq!(lines, 2 * ever.len(), "{lines} coefficient lines");
    if let Some(png) = render_png(&file) {
        println!("rendered {}", png.display());
    }
    // Too small a canvas is an error, not a panic.
    let small = PathPlotOptions {
        width: 10,
        ..opts.clone()
    };
    assert!(plot_path(&path, &file, &small).is_err());
    let bad_names = PathPlotOptions {
        names: Some(vec!["a".into()]),
        ..opts
    };
    assert!(plot_path(&path, &file, &bad_names).is_err());
    let _ = std::fs::remove_file(&file);
}

#[test]
fn cv_plot_is_well_formed_and_marks_both_choices() {
    let (loss, _) = macrodata();
    let cv = cross_validate(
        &loss,
        &Penalty::l1(1.0).unwrap(),
        &CvOptions {
            folds: 5,
            seed: 3,
            path: PathOptions {
                n_lambdas: 30,
                ..Default::default()
            },
            parallel: true,
        },
    )
    .unwrap();
    let file = temp("cv.svg");
    plot_cv(&cv, &file, "Macrodata lasso, 5-fold CV", 900, 600).unwrap();
    let text = std::fs::read_to_string(&file).unwrap();
    assert_well_formed(&text);
    for label in [
        "log10 λ",
        "mean_squared_error",
        "Macrodata lasso, 5-fold CV",
        "λ_min",
        "λ_1se",
    ] {
        assert!(text.contains(label), "missing label {label}");
    }
    assert!(text.contains(&format!("λ_min = {:.3e}", cv.lambda_best().unwrap())));
    assert!(text.contains(&format!("λ_1se = {:.3e}", cv.lambda_one_se().unwrap())));
    // One marker per λ (plus the legend's sample).
    assert_eq!(text.matches("<circle").count(), cv.lambdas.len() + 1);
    if let Some(png) = render_png(&file) {
        println!("rendered {}", png.display());
    }
    assert!(plot_cv(&cv, &file, "t", 100, 100).is_err());
    let _ = std::fs::remove_file(&file);
}

/// Values a double holds but a drawing cannot: the axis arithmetic of the SVG library
/// used to overflow (a debug-build panic) or loop without end on ranges near ±1e308 and on
/// spans of a few ulps. Such input is now a typed error, and tiny but representable spans
/// still draw. (Edge cases of our own plotting code; no outside reference applies.)
#[test]
fn extreme_values_are_errors_and_tiny_spans_still_draw() {
    let (loss, names) = macrodata();
    let path = fit_path(
        &loss,
        &Penalty::l1(1.0).unwrap(),
        (203, names.len()),
        &PathOptions {
            n_lambdas: 8,
            ..Default::default()
        },
    )
    .unwrap();
    let file = temp("extreme.svg");
    let opts = PathPlotOptions::default();
    let scaled = |factor: f64| {
        let mut p = path.clone();
        for point in &mut p.points {
            point.x.values.iter_mut().for_each(|v| *v *= factor);
        }
        p
    };
    // Coefficients near the top of the double range: an error naming the limit.
    let err = plot_path(&scaled(1e300), &file, &opts).unwrap_err();
    assert!(err.to_string().contains("plottable range"), "{err}");
    // Coefficients near the bottom: drawn (the axis widens to a unit interval).
    plot_path(&scaled(1e-300), &file, &opts).unwrap();
    assert_well_formed(&std::fs::read_to_string(&file).unwrap());

    // A CV curve whose mean ± s.e. overflows to ∞, and one spanning a few ulps.
    let cv = cross_validate(
        &loss,
        &Penalty::l1(1.0).unwrap(),
        &CvOptions {
            folds: 3,
            seed: 1,
            path: PathOptions {
                n_lambdas: 6,
                ..Default::default()
            },
            parallel: false,
        },
    )
    .unwrap();
    let mut huge = cv.clone();
    huge.mean.iter_mut().for_each(|m| *m = 1e308);
    huge.std_error.iter_mut().for_each(|s| *s = 1e308);
    assert!(plot_cv(&huge, &file, "t", 400, 300).is_err());
    let mut flat = cv.clone();
    for (l, m) in flat.mean.iter_mut().enumerate() {
        *m = 1.0 + l as f64 * f64::EPSILON;
    }
    flat.std_error.iter_mut().for_each(|s| *s = 0.0);
    plot_cv(&flat, &file, "t", 400, 300).unwrap();
    assert_well_formed(&std::fs::read_to_string(&file).unwrap());
    // A chosen λ whose score is not finite lies outside the drawn range: no marker (its
    // pixel position used to overflow), the rest is drawn.
    let mut off = cv.clone();
    off.lambdas[off.best] = 1e-300;
    off.mean[off.best] = f64::NAN;
    plot_cv(&off, &file, "t", 400, 300).unwrap();
    assert!(!std::fs::read_to_string(&file).unwrap().contains("λ_min"));

    // A race record at a negative time is left out; a fan hour outside the clock day is
    // an error.
    use ellone::race::{RaceEntry, RaceResult};
    use ellone::solver::{Status, TraceRecord};
    let record = |objective: f64, seconds: f64| TraceRecord {
        iteration: 0,
        seconds,
        objective,
        kkt_residual: 1.0,
        duality_gap: None,
        nnz: 1,
        inner: 1,
    };
    let race = RaceResult {
        entries: vec![RaceEntry {
            solver: "a".into(),
            records: vec![record(2.0, -1e300), record(1.5, 0.5), record(1.0, 1.0)],
            status: Status::Converged,
            objective: 1.0,
            seconds: 1.0,
        }],
        reference: None,
        best_objective: 1.0,
        target: 1e-6,
    };
    ellone::race_plot::plot_race(&race, &file, 400, 300).unwrap();
    // A target beyond the drawable range ("any accuracy") is drawn without its line.
    let any = RaceResult {
        target: 1e308,
        ..race.clone()
    };
    ellone::race_plot::plot_race(&any, &file, 400, 300).unwrap();
    let fan = ellone::scenario::pipeline::Fan {
        substation: 0,
        day_of_year: 1,
        hour_start: vec![0.0, 12.0, 30.0],
        actual: vec![1.0; 3],
        mean: vec![1.0; 3],
        quantiles: vec![vec![1.0; 3]; 5],
        scenarios: vec![],
        lasso_band: vec![vec![1.0; 3]; 2],
    };
    let err = ellone::scenario::figures::plot_fan(&fan, &file, 400, 300).unwrap_err();
    assert!(err.to_string().contains("clock day"), "{err}");
    let _ = std::fs::remove_file(&file);
}
