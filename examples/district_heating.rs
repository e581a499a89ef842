//! Worked scenario: next-day heat-demand forecasting for a district-heating network, end to
//! end (16 substations × 24 hours = 384 outputs from about 110 weather, calendar and
//! previous-day inputs; six years of synthetic daily data from a known sparse Gaussian CRF).
//!
//! Run with `cargo run --release --example district_heating`. It fits the sparse CRF path,
//! chooses (λ_Λ, λ_Θ) on the validation year, compares the test year against a per-output
//! lasso with independent errors and unpenalised least squares with the full residual
//! covariance, prints a table and writes SVG figures and a JSON report into
//! `out/district_heating/`. The pipeline itself is `ellone::scenario::pipeline`.
//!
//! Options: `--quick` runs the reduced test configuration (no race unless `--race`, which
//! sets a 3 s budget per solver); `--no-race` skips the solver race; `--out DIR` changes
//! the output folder.
//!
//! Forecasts are decision support: validate them against the operator's own data and
//! standards before operational use. The data here are synthetic.

#[cfg(feature = "cli")]
fn main() {
    if let Err(e) = app::main() {
        eprintln!("error: {e}");
        std::process::exit(1);
    }
}

#[cfg(not(feature = "cli"))]
fn main() {
    eprintln!("this example needs the default `cli` feature (progress display and figures)");
}

#[cfg(feature = "cli")]
mod app {
    use ellone::scenario::figures::write_figures;
    use ellone::scenario::pipeline::{run_with, ModelScores, PipelineConfig, Progress, Report};
    use indicatif::{ProgressBar, ProgressStyle};
    use std::io::IsTerminal;
    use std::path::PathBuf;
    use std::time::Instant;

    /// One row of the test-year score table.
    fn print_scores(m: &ModelScores) {
        println!(
            "  {:<32} {:>8.4} {:>14.2} {:>12.4} {:>8.4} {:>12.2} {:>9.1}%",
            m.name,
            m.rmse,
            m.nll,
            m.energy_score,
            m.crps,
            m.reserve,
            100.0 * m.coverage
        );
    }

    /// A terminal progress bar per step (plain lines when stderr is not a terminal).
    struct Bars {
        bar: Option<ProgressBar>,
        plain: bool,
        step: String,
        since: Instant,
    }

    impl Progress for Bars {
        fn begin(&mut self, step: &str, total: u64) {
            self.step = step.to_string();
            self.since = Instant::now();
            if self.plain {
                eprintln!("{step} ...");
                return;
            }
            let bar = ProgressBar::new(total);
            if let Ok(style) =
                ProgressStyle::with_template("{elapsed:>4} [{bar:30}] {pos}/{len} {prefix} {msg}")
            {
                bar.set_style(style.progress_chars("=> "));
            }
            bar.set_prefix(step.to_string());
            self.bar = Some(bar);
        }
        fn advance(&mut self, units: u64) {
            if let Some(b) = &self.bar {
                b.inc(units);
            }
        }
        fn end(&mut self) {
            if self.plain {
                eprintln!(
                    "{} done in {:.1} s",
                    self.step,
                    self.since.elapsed().as_secs_f64()
                );
            }
            if let Some(b) = self.bar.take() {
                b.finish_with_message("done");
            }
        }
        fn note(&mut self, message: &str) {
            if let Some(b) = &self.bar {
                b.set_message(message.to_string());
            }
        }
    }

    pub fn main() -> ellone::Result<()> {
        let args: Vec<String> = std::env::args().skip(1).collect();
        let mut config = if args.iter().any(|a| a == "--quick") {
            PipelineConfig::small()
        } else {
            PipelineConfig::default()
        };
        if args.iter().any(|a| a == "--race") {
            config.race_budget = Some(std::time::Duration::from_secs(3));
        }
        if args.iter().any(|a| a == "--no-race") {
            config.race_budget = None;
        }
        let out = args
            .iter()
            .position(|a| a == "--out")
            .and_then(|i| args.get(i + 1))
            .map_or_else(|| PathBuf::from("out/district_heating"), PathBuf::from);

        println!("District-heating demand forecasting: a worked scenario (synthetic data).");
        println!(
            "Forecasts are decision support: validate them against the operator's own data \
             and standards before operational use.\n"
        );
        let started = Instant::now();
        let mut bars = Bars {
            bar: None,
            plain: !std::io::stderr().is_terminal(),
            step: String::new(),
            since: Instant::now(),
        };
        let report = run_with(&config, &mut bars)?;
        print_report(&report);
        let files = write_figures(&report, &out)?;
        let json = out.join("report.json");
        let text = serde_json::to_string_pretty(&report)
            .map_err(|e| ellone::Error::Numerical(e.to_string()))?;
        std::fs::write(&json, text).map_err(|e| ellone::Error::Io {
            file: json.display().to_string(),
            message: e.to_string(),
        })?;
        println!("\nWrote:");
        for f in files.iter().chain(std::iter::once(&json)) {
            println!("  {}", f.display());
        }
        println!(
            "Total wall-clock time {:.1} s ({} threads).",
            started.elapsed().as_secs_f64(),
            rayon::current_num_threads()
        );
        Ok(())
    }

    fn print_report(r: &Report) {
        let z = &r.sizes;
        println!(
            "\n{} substations × {} hours = {} outputs, {} inputs; {} training, {} validation, {} test days.",
            z.substations, z.hours, z.outputs, z.inputs, z.train_days, z.validation_days, z.test_days
        );
        println!("\nSparse CRF grid (validation year; outputs scaled by the lasso residual sd):");
        println!(
            "  {:>8} {:>8} {:>14} {:>9} {:>7} {:>8} {:>6} {:>10} {:>20}",
            "λ_Λ", "λ_Θ", "val. NLL/day", "val. RMSE", "edges", "nnz(Θ)", "iter", "KKT", "status"
        );
        for (i, g) in r.crf_grid.iter().enumerate() {
            println!(
                "  {:>8.4} {:>8.4} {:>14.2} {:>9.4} {:>7} {:>8} {:>6} {:>10.2e} {:>20}{}",
                g.lambda_precision,
                g.lambda_interaction,
                g.validation_nll,
                g.validation_rmse,
                g.edges,
                g.interaction_nnz,
                g.iterations,
                g.kkt_residual,
                g.status.as_str(),
                if i == r.chosen { "  ← chosen" } else { "" }
            );
        }
        let unconverged = r
            .crf_grid
            .iter()
            .filter(|g| g.status != ellone::solver::Status::Converged)
            .count();
        if unconverged > 0 {
            println!(
                "  Note: {unconverged} of {} CRF fits stopped before the KKT tolerance (status and \
                 KKT residual above); their estimates are the best iterates reached.",
                r.crf_grid.len()
            );
        }
        println!(
            "\nLasso: {:.1} non-zero coefficients per output on average; {} of {} outputs chose the path's smallest λ.",
            r.lasso.mean_nnz, r.lasso.at_path_end, z.outputs
        );
        println!(
            "Least squares: {} residual covariance{}.",
            if r.ols.full_covariance {
                "full"
            } else {
                "diagonal (full one not positive definite)"
            },
            if r.ols.ridge > 0.0 {
                format!(", ridge {:.2e} added to XᵀX", r.ols.ridge)
            } else {
                String::new()
            }
        );
        println!("\nTest year (lower is better except coverage; MW unless stated):");
        println!(
            "  {:<32} {:>8} {:>14} {:>12} {:>8} {:>12} {:>10}",
            "model", "RMSE", "NLL (nats/day)", "energy sc.", "CRPS", "reserve q95", "coverage"
        );
        for m in &r.models {
            print_scores(m);
        }
        println!(
            "  (reserve: mean over test days of the 95th percentile of the network's daily peak \
             demand minus the peak of the mean forecast; coverage: share of days whose actual \
             peak stayed below the provisioned 95th percentile, target 95%)"
        );
        println!(
            "\nEnergy-score decomposition (swap the mean and the covariance of CRF and lasso):"
        );
        for m in &r.swaps {
            print_scores(m);
        }
        let s = &r.structure;
        println!(
            "\nStructure of Λ: {} edges found, {} true, {} correct: precision {:.3}, recall {:.3}; chance level (edge density) {:.4}.",
            s.found_edges, s.true_edges, s.true_positives, s.precision, s.recall, s.chance
        );
        if let Some(race) = &r.race {
            println!("\nSolver race on the chosen problem (same start, same budget):");
            for i in race.ranking() {
                let e = &race.entries[i];
                println!(
                    "  {:<16} {:>5} iterations, final relative suboptimality {:.2e}",
                    e.solver,
                    e.records.len().saturating_sub(1),
                    race.relative_suboptimality(e.objective)
                );
            }
        }
        println!("\nTimings:");
        for t in &r.timings {
            println!("  {:<20} {:>8.1} s", t.step, t.seconds);
        }
    }
}
