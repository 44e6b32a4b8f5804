//! Acquisition: bytes from the serial line to timestamped frames.
pub mod line;
pub mod serial;
