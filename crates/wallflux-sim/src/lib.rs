//! Simulation for the demo and the tests: a finite-difference wall (the
//! independent oracle the core's models are checked against), an invented
//! firing schedule, deterministic noise, and a pseudo-terminal serial line.
//!
//! Not part of the production build: the root package uses this crate only
//! behind its `demo` feature and in its tests.
#![forbid(unsafe_code)]
pub mod firing;
pub mod pty;
pub mod rng;
pub mod scenario;
pub mod wall;
