//! Acquisition: bytes from the serial line to timestamped scans. The
//! decoders are the core's (`wallflux_core::protocol::line`,
//! `protocol::modbus`); this module owns the ports: `serial` a line-protocol
//! box, `modbus` an RTU bus of input modules.
pub use wallflux_core::protocol::line;
pub mod modbus;
pub mod serial;
