//! `--solver NAME`: the methods the tool can run. A new solver adds one variant to
//! [`SolverKind`] and one arm to [`SolverKind::build`].

use ellone::solver::{NewtonCd, Solver, SolverOptions};

/// The solver chosen on the command line.
#[derive(Debug, Clone, Copy, PartialEq, Eq, clap::ValueEnum)]
pub enum SolverKind {
    /// Newton coordinate descent (the main method).
    NewtonCd,
}

impl SolverKind {
    /// The library solver with the given options.
    pub fn build(self, options: SolverOptions) -> Box<dyn Solver> {
        match self {
            SolverKind::NewtonCd => Box::new(NewtonCd::new(options)),
        }
    }
}
