//! Fuzzes `ellone solve` in-process: argument parsing (clap), option checks, file reading
//! and the solve itself. The fuzz bytes choose a command line from a fixed vocabulary of
//! flags, losses, solvers and numbers (valid, hostile and malformed), and the contents of up
//! to four input files (--x, --y, --cov, --weights, as .csv or .mtx), written to a
//! per-process temporary directory. Every run must return (Ok or a CLI error), never panic
//! or hang; a time limit of at most one second is always given, so a run that outlives
//! libFuzzer's -timeout means a time limit was not honoured. When a JSON file is written it
//! must parse, and a "converged" status must come with a finite KKT residual.
//!
//! The seeds in corpus/cli_solve/seed-* encode complete, successful command lines (every loss,
//! every solver, CSV and Matrix Market inputs, weights, limits), so mutation starts from runs
//! that reach the solvers: one byte per choice in the order `command_line` asks, a two-byte
//! big-endian length before each file's contents.
//!
//! The CLI's logic lives in the binary (src/bin/ellone/), so this target compiles the
//! binary's `solve` modules in by path, with a parser mirroring the binary's `solve`
//! subcommand.
#![no_main]

// The command-line tool's own modules, compiled into this target unchanged (the binary's
// crate root is replaced by the small parser below, which mirrors its `solve` subcommand).
#[allow(dead_code)]
#[path = "../../src/bin/ellone/error.rs"]
mod error;
#[allow(dead_code)]
#[path = "../../src/bin/ellone/input.rs"]
mod input;
#[allow(dead_code)]
#[path = "../../src/bin/ellone/output.rs"]
mod output;
#[allow(dead_code)]
#[path = "../../src/bin/ellone/solve.rs"]
mod solve;
#[allow(dead_code)]
#[path = "../../src/bin/ellone/solvers.rs"]
mod solvers;

pub use error::{CliError, CliResult};

use clap::Parser;
use libfuzzer_sys::arbitrary::{Result as ArbResult, Unstructured};
use libfuzzer_sys::fuzz_target;
use std::path::{Path, PathBuf};

#[derive(Debug, Parser)]
#[command(name = "ellone")]
struct Cli {
    #[command(subcommand)]
    command: Command,
}

#[derive(Debug, clap::Subcommand)]
enum Command {
    Solve(solve::Args),
}

/// Parses and runs a command line, as the binary's `main` does.
fn run_cli(args: &[String]) -> CliResult<()> {
    let cli = Cli::try_parse_from(args).map_err(|e| CliError::new(e.to_string()))?;
    match &cli.command {
        Command::Solve(a) => solve::run(a),
    }
}

const LOSSES: &[&str] = &[
    "least-squares",
    "logistic",
    "precision",
    "gaussian-crf",
    "lasso",
    "",
];
const SOLVERS: &[&str] = &["newton-cd", "fista", "admm", "owl-qn", "bogus"];
const NUMBERS: &[&str] = &[
    "0", "1", "0.1", "0.5", "1e-12", "1e-300", "1e12", "1e308", "-1", "-0", "nan", "NaN", "inf",
    "-inf", "4.9e-324", "abc", "", "1,5", " 1", "0x10", "1e", "--",
];
const TOLS: &[&str] = &[
    "1e-7", "1e-3", "1e-14", "1e-300", "0", "-1", "nan", "inf", "x",
];
const ITERS: &[&str] = &[
    "0",
    "1",
    "5",
    "100",
    "1000000",
    "18446744073709551615",
    "18446744073709551616",
    "-1",
    "1.5",
];
/// Always bounded: at most one second, or invalid (rejected before solving).
const TIME_LIMITS: &[&str] = &["0.05", "0.3", "1", "1e-9", "0", "-1", "nan", "inf", "abc"];
const EXTRA: &[&str] = &[
    "--bogus",
    "--lambda",
    "--x",
    "solve",
    "-h",
    "--intercept",
    "--loss=precision",
    "--lambda=-0",
    "positional",
];

fn pick<'a>(u: &mut Unstructured<'_>, from: &[&'a str]) -> ArbResult<&'a str> {
    Ok(from[u.choose_index(from.len())?])
}

/// A number: from the vocabulary, or an arbitrary f64 printed in full.
fn number(u: &mut Unstructured<'_>) -> ArbResult<String> {
    Ok(if u.ratio(3, 4)? {
        pick(u, NUMBERS)?.to_string()
    } else {
        format!("{}", f64::from_bits(u.arbitrary::<u64>()?))
    })
}

/// Writes a fuzz-provided input file, or points at a missing file or a directory.
fn file_arg(u: &mut Unstructured<'_>, dir: &Path, name: &str) -> ArbResult<String> {
    let choice = u.int_in_range(0u8..=9)?;
    let path: PathBuf = match choice {
        0 => dir.join("missing.csv"),
        1 => dir.to_path_buf(),
        _ => {
            let ext = if u.ratio(1, 3)? { "mtx" } else { "csv" };
            let path = dir.join(format!("{name}.{ext}"));
            let len = u.int_in_range(0usize..=512)?;
            let bytes = u.bytes(len.min(u.len()))?;
            let _ = std::fs::write(&path, bytes);
            path
        }
    };
    Ok(path.to_string_lossy().into_owned())
}

fn command_line(u: &mut Unstructured<'_>, dir: &Path) -> ArbResult<Vec<String>> {
    let mut args = vec!["ellone".to_string(), "solve".to_string()];
    let flag = |args: &mut Vec<String>, name: &str, value: Option<String>| {
        args.push(format!("--{name}"));
        if let Some(v) = value {
            args.push(v);
        }
    };
    if u.ratio(15, 16)? {
        let loss = pick(u, LOSSES)?.to_string();
        flag(&mut args, "loss", Some(loss));
    }
    for name in ["x", "y", "cov", "weights"] {
        if u.ratio(1, 2)? {
            let f = file_arg(u, dir, name)?;
            flag(&mut args, name, Some(f));
        }
    }
    if u.ratio(15, 16)? {
        let v = number(u)?;
        flag(&mut args, "lambda", Some(v));
    }
    if u.ratio(1, 4)? {
        let v = number(u)?;
        flag(&mut args, "lambda-theta", Some(v));
    }
    if u.ratio(1, 4)? {
        let v = number(u)?;
        flag(&mut args, "l2", Some(v));
    }
    for name in ["intercept", "center", "penalize-diagonal"] {
        if u.ratio(1, 4)? {
            flag(&mut args, name, None);
        }
    }
    if u.ratio(1, 4)? {
        let v = pick(u, TOLS)?.to_string();
        flag(&mut args, "tol", Some(v));
    }
    if u.ratio(1, 4)? {
        let v = pick(u, ITERS)?.to_string();
        flag(&mut args, "max-iter", Some(v));
    }
    if u.ratio(1, 2)? {
        let v = pick(u, SOLVERS)?.to_string();
        flag(&mut args, "solver", Some(v));
    }
    match u.int_in_range(0u8..=3)? {
        0 => {}
        1 => flag(&mut args, "out", Some(dir.to_string_lossy().into_owned())),
        2 => flag(
            &mut args,
            "out",
            Some("/nonexistent-ellone-dir/out.json".into()),
        ),
        _ => flag(
            &mut args,
            "out",
            Some(dir.join("out.json").to_string_lossy().into_owned()),
        ),
    }
    if u.ratio(1, 8)? {
        args.push(pick(u, EXTRA)?.to_string());
    }
    let t = pick(u, TIME_LIMITS)?.to_string();
    flag(&mut args, "time-limit", Some(t));
    Ok(args)
}

/// The per-process scratch directory, emptied of the previous run's files.
fn scratch() -> PathBuf {
    static DIR: std::sync::OnceLock<PathBuf> = std::sync::OnceLock::new();
    let dir = DIR.get_or_init(|| {
        let d = std::env::temp_dir().join(format!("ellone-fuzz-cli-{}", std::process::id()));
        let _ = std::fs::create_dir_all(&d);
        d
    });
    for name in ["x", "y", "cov", "weights"] {
        for ext in ["csv", "mtx"] {
            let _ = std::fs::remove_file(dir.join(format!("{name}.{ext}")));
        }
    }
    let _ = std::fs::remove_file(dir.join("out.json"));
    dir.clone()
}

fuzz_target!(|data: &[u8]| {
    let dir = scratch();
    let mut u = Unstructured::new(data);
    let Ok(args) = command_line(&mut u, &dir) else {
        return;
    };
    let result = run_cli(&args);
    let out = dir.join("out.json");
    if result.is_ok() && args.iter().any(|a| Path::new(a) == out) {
        let text = std::fs::read_to_string(&out).expect("a successful run wrote --out");
        let json: serde_json::Value = serde_json::from_str(&text).expect("valid JSON");
        let status = json["status"].as_str().expect("a status");
        assert!(json["objective"].as_f64().is_some_and(f64::is_finite));
        let kkt = json["kkt_residual"].as_f64().expect("a KKT residual");
        if status == "converged" {
            assert!(kkt.is_finite());
        }
    }
});
