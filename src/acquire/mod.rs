//! Acquisition: bytes from the serial line to timestamped frames. The
//! decoder is the core's (`wallflux_core::protocol::line`); this module owns
//! the port.
pub use wallflux_core::protocol::line;
pub mod serial;
