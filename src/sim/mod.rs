//! Simulation for the demo and the tests.
pub mod pty;
