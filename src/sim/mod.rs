//! Simulation for the demo and the tests: a finite-difference wall, an
//! invented firing schedule, and a pseudo-terminal serial line.
pub mod firing;
pub mod pty;
pub mod wall;
