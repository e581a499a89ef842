//! `--solver NAME`: the methods the tool can run. A new solver adds one variant to
//! [`SolverKind`] and one arm to [`SolverKind::build`].

use ellone::solver::{Admm, Fista, NewtonCd, Owlqn, Solver, SolverOptions};

/// The solver chosen on the command line.
#[derive(Debug, Clone, Copy, PartialEq, Eq, clap::ValueEnum)]
pub enum SolverKind {
    /// Newton coordinate descent (the main method).
    NewtonCd,
    /// Accelerated proximal gradient with backtracking (baseline).
    Fista,
    /// Alternating direction method of multipliers (baseline).
    Admm,
    /// Orthant-wise limited-memory quasi-Newton (baseline).
    OwlQn,
}

impl SolverKind {
    /// The library solver with the given options.
    pub fn build(self, options: SolverOptions) -> Box<dyn Solver> {
        match self {
            SolverKind::NewtonCd => Box::new(NewtonCd::new(options)),
            SolverKind::Fista => Box::new(Fista::new(options)),
            SolverKind::Admm => Box::new(Admm::new(options)),
            SolverKind::OwlQn => Box::new(Owlqn::new(options)),
        }
    }
}
