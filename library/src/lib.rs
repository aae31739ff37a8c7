//! # Waypath
//!
//! Structured causal questions of observational data, answered with Bayesian
//! models. Data flows one way through the modules:
//!
//! `table` → `graph` → `model` → `infer` → `draws` → `query` → `plot` → `cells`
//!
//! * [`table`] reads and types the data (CSV in, typed columns out).
//! * [`graph`] holds the causal graph and answers questions of it
//!   (d-separation, paths, adjustment sets, testable implications).
//! * [`model`] turns a regression specification and a table into a log
//!   posterior density with an analytic gradient.
//! * [`infer`] draws from that density (Laplace approximation, NUTS) and
//!   diagnoses the run.
//! * [`draws`] stores the posterior draws by parameter label; summaries are
//!   computed from draws last.
//! * [`query`] computes causal contrasts and simulated interventions from draws.
//! * [`plot`] draws every figure as SVG.
//! * [`cells`] is the declarative cell language that ties it together for a
//!   notebook; nothing below it knows about notebooks or Jupyter.

pub mod table;
pub mod graph;
pub mod model;
pub mod infer;
pub mod draws;
pub mod query;
pub mod plot;
pub mod cells;
pub mod names;
pub mod limits;

/// Random number generation, re-exported so `%%rust` cells can write
/// seeded simulations with the same generators the library uses.
pub use rand;
/// Probability distributions for `%%rust` cells (see [`rand`]).
pub use rand_distr;
