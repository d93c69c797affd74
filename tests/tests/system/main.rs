//! The black-box system tests, one module per area, in one test binary: each binary of
//! this package links reqwest and the harness, and one link instead of ten is most of the
//! build time of this package on two cores. Run one area with its module path, e.g.
//! `cargo test -p dispar-system-tests --test system reports::`.

mod analyze;
mod auth;
mod bad_input;
mod baselines;
mod batch;
mod counts;
mod crash;
mod demo;
mod hostile;
mod instances;
mod mix;
mod openapi;
mod operations;
mod reports;
mod sites;
mod trend;
