//! The district-heating worked scenario at reduced size: the report's structure, its
//! internal consistency, the comparison the scenario is built to show, and reproducibility
//! (the same seed twice gives bit-identical numbers).
//!
//! Outside references used here: the true generating model (the generator returns Λ and Θ,
//! so the oracle row and the edge counts are checked against it), the textbook Gaussian
//! entropy for the oracle's expected log-likelihood, and the definition of a 95 % quantile
//! (coverage of a correct predictive distribution is 0.95 up to binomial noise).

use ellone::scenario::pipeline::{
    run, PipelineConfig, Report, CRF, LASSO, OLS, ORACLE, SWAP_CRF_COVARIANCE, SWAP_CRF_MEAN,
};
use ellone::scenario::{generate, HeatingConfig};
use ellone::solver::Status;

fn small() -> PipelineConfig {
    PipelineConfig::small()
}

fn numbers(r: &Report) -> Vec<u64> {
    // Everything except the wall-clock timings (and the race, which is off here).
    let mut v: Vec<f64> = Vec::new();
    for g in &r.crf_grid {
        v.extend([
            g.lambda_precision,
            g.lambda_interaction,
            g.validation_nll,
            g.validation_rmse,
            g.edges as f64,
            g.interaction_nnz as f64,
            g.iterations as f64,
            g.kkt_residual,
        ]);
    }
    for m in r.models.iter().chain(&r.swaps) {
        v.extend([m.rmse, m.nll, m.energy_score, m.crps, m.reserve, m.coverage]);
    }
    v.extend([
        r.lasso.mean_nnz,
        r.lasso.mean_ratio,
        r.structure.precision,
        r.structure.recall,
    ]);
    v.extend(r.fan.mean.iter().chain(r.fan.quantiles.iter().flatten()));
    v.iter().map(|x| x.to_bits()).collect()
}

#[test]
fn reduced_scenario_report_is_complete_consistent_and_reproducible() {
    let cfg = small();
    let a = run(&cfg).unwrap();

    // Structure of the report.
    let z = &a.sizes;
    assert_eq!(z.outputs, z.substations * z.hours);
    assert_eq!(
        (z.train_days, z.validation_days, z.test_days),
        (365, 365, 365)
    );
    assert_eq!(
        a.crf_grid.len(),
        cfg.crf_lambdas.len() * cfg.theta_ratios.len()
    );
    assert!(a.chosen < a.crf_grid.len());
    let best = a
        .crf_grid
        .iter()
        .map(|g| g.validation_nll)
        .fold(f64::INFINITY, f64::min);
    assert_eq!(a.crf_grid[a.chosen].validation_nll, best);
    for name in [CRF, LASSO, OLS, ORACLE] {
        let m = a.model(name).unwrap();
        assert!(
            m.rmse > 0.0 && m.energy_score > 0.0 && m.crps > 0.0,
            "{m:?}"
        );
        assert!(m.nll.is_finite());
        assert!((0.0..=1.0).contains(&m.coverage));
        // The CRPS of each marginal is at most the mean absolute error of its mean, which is
        // at most the RMSE (Jensen): E|X − y| ≥ CRPS because E|X − X'| ≥ 0.
        assert!(m.crps <= m.rmse, "{name}: CRPS {} RMSE {}", m.crps, m.rmse);
    }
    assert!(a.race.is_none());
    assert_eq!(a.fan.actual.len(), z.hours);
    assert_eq!(a.fan.quantiles.len(), 5);
    for w in a.fan.quantiles.windows(2) {
        assert!(w[0].iter().zip(&w[1]).all(|(lo, hi)| lo <= hi));
    }

    // Edges against the generator's true Λ.
    let data = generate(&cfg.scenario).unwrap();
    let q = z.outputs;
    let true_edges = (0..q)
        .flat_map(|i| (i + 1..q).map(move |j| (i, j)))
        .filter(|&(i, j)| data.true_precision[[i, j]] != 0.0)
        .count();
    assert_eq!(a.structure.true_edges, true_edges);
    assert_eq!(a.true_edges.len(), true_edges);
    assert_eq!(a.structure.found_edges, a.learned_edges.len());
    let tp = a
        .learned_edges
        .iter()
        .filter(|&&(i, j)| data.true_precision[[i, j]] != 0.0)
        .count();
    assert_eq!(a.structure.true_positives, tp);
    let density = true_edges as f64 / (q * (q - 1) / 2) as f64;
    assert!((a.structure.chance - density).abs() < 1e-15);
    // Better than chance: the learned edges hit true ones more often than random pairs
    // (here about 8× as often), and most true edges are found.
    assert!(
        a.structure.precision > 2.0 * a.structure.chance,
        "{:?}",
        a.structure
    );
    assert!(a.structure.recall > 0.8, "{:?}", a.structure);
    // The reduced fits reach the KKT tolerance (no fit is reported as an iteration limit).
    for g in &a.crf_grid {
        assert_eq!(g.status, Status::Converged, "{g:?}");
    }
    // The swapped models take their means from the donor: the same mean forecasts (up to
    // the rounding of ΣΛ = I), so the same RMSE; with the CRF's covariance the lasso mean gains likelihood.
    let swap = |name: &str| a.swaps.iter().find(|m| m.name == name).unwrap();
    let (lasso, crf) = (a.model(LASSO).unwrap(), a.model(CRF).unwrap());
    assert!((swap(SWAP_CRF_COVARIANCE).rmse - lasso.rmse).abs() <= 1e-9 * lasso.rmse);
    assert!((swap(SWAP_CRF_MEAN).rmse - crf.rmse).abs() <= 1e-9 * crf.rmse);
    assert!(swap(SWAP_CRF_COVARIANCE).nll < lasso.nll - 1.0);

    // The oracle's expected negative log-likelihood is the Gaussian entropy
    // ½(q log 2πe + log det Σ) (textbook); over 365 days the average of the quadratic form
    // ½rᵀΛr (mean q/2, sd √(q/2)) stays within 4 standard errors.
    let oracle = a.model(ORACLE).unwrap();
    let ch = ellone::linalg::cholesky(data.true_precision.view()).unwrap();
    let qf = q as f64;
    let entropy =
        0.5 * (qf * (2.0 * std::f64::consts::PI * std::f64::consts::E).ln() - ch.log_det());
    let se = (qf / 2.0).sqrt() / (z.test_days as f64).sqrt();
    assert!(
        (oracle.nll - entropy).abs() < 4.0 * se,
        "oracle NLL {} vs entropy {entropy} (se {se})",
        oracle.nll
    );
    // The true model's 95 % peak quantile covers about 95 % of days: binomial sd
    // √(0.95·0.05/365) ≈ 0.011, plus the 100-scenario quantile error; 0.90..0.99 is loose.
    assert!(
        (0.90..=0.99).contains(&oracle.coverage),
        "{}",
        oracle.coverage
    );
    // Independent errors understate the spread of the network total (positively
    // correlated errors), so the lasso provisions less reserve than the oracle.
    assert!(a.model(LASSO).unwrap().reserve < oracle.reserve);
    // Modelling the error dependence pays on the likelihood: the CRF's joint density beats
    // independent errors by far (here by about 5 nats per day).
    assert!(a.model(CRF).unwrap().nll < a.model(LASSO).unwrap().nll - 1.0);
    // No model beats the truth on log-likelihood by more than noise.
    for name in [CRF, LASSO, OLS] {
        assert!(a.model(name).unwrap().nll > oracle.nll - 4.0 * se, "{name}");
    }

    // Reproducibility: the same configuration again gives identical numbers.
    let b = run(&cfg).unwrap();
    assert_eq!(numbers(&a), numbers(&b));
    assert_eq!(a.learned_edges, b.learned_edges);
    // A different scenario seed gives different data and numbers.
    let mut other = cfg.clone();
    other.scenario = HeatingConfig {
        seed: 99,
        ..cfg.scenario.clone()
    };
    other.crf_lambdas = vec![cfg.crf_lambdas[0]];
    let c = run(&other).unwrap();
    assert_ne!(
        a.model(ORACLE).unwrap().nll.to_bits(),
        c.model(ORACLE).unwrap().nll.to_bits()
    );
}

#[test]
fn invalid_configurations_are_rejected() {
    let base = small();
    let mut bad = Vec::new();
    let mut c = base.clone();
    c.crf_lambdas.clear();
    bad.push(c);
    let mut c = base.clone();
    c.theta_ratios = vec![-1.0];
    bad.push(c);
    let mut c = base.clone();
    c.scenarios = 5;
    bad.push(c);
    let mut c = base.clone();
    c.fan_substation = 99;
    bad.push(c);
    let mut c = base.clone();
    c.lasso_ratio = 0.0;
    bad.push(c);
    let mut c = base.clone();
    c.race_budget = Some(std::time::Duration::ZERO);
    bad.push(c);
    let mut c = base;
    c.validation_years = 5;
    bad.push(c);
    for c in bad {
        assert!(run(&c).is_err(), "{c:?}");
    }
}
