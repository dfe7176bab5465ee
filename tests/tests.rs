//! Integration tests, one module per capability a user relies on. They compile into one binary.
//! Every check against the outside world names its source beside it.

// Source: none checked here; each module names the sources of its own check values.

// Helpers outside #[test] functions unwrap too: a failure there is a test failure.
#![allow(clippy::unwrap_used)]

mod common;

mod batch;
mod biharmonic;
mod cli;
mod convergence;
mod detection;
mod direct_solver;
mod edge_cases;
mod exact_harmonic;
mod exact_rationals;
mod fidelity;
mod grain;
mod guided;
mod maximum_principle;
mod random_walk;
mod regression;
mod round_trip;
mod samples;
mod solver_api;
mod window;
