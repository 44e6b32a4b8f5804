//! Simulation for the demo and the tests: a finite-difference wall (the
//! independent oracle the core's models are checked against), an invented
//! firing schedule, the demo's simulated kiln built from a configuration,
//! deterministic noise, and a pseudo-terminal serial line.
//!
//! # An independent oracle
//! The simulator shares no physics function with the core: its wall solver
//! ([`wall`]), shell loss ([`shell`]: its own air properties and
//! correlations) and property integration ([`property`]: Gauss–Legendre over
//! the curve) are its own. From the core it takes only the configuration's
//! types (settings, materials' property curves, surface parameters and their
//! validation), the line protocol's *encoder* and the ITS-90 *EMF* function,
//! to produce the wire input of the daemon: what is under test is the
//! daemon's decoding and physics.
//!
//! Not part of the production build: the root package uses this crate only
//! behind its `demo` feature and in its tests.
#![forbid(unsafe_code)]
pub mod firing;
pub mod property;
pub mod pty;
pub mod rng;
pub mod scenario;
pub mod shell;
pub mod wall;
