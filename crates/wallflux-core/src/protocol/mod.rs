//! Decoders of the inputs' wire formats, sans IO: bytes in, frames out, and
//! each decoder's frames turned into the input-neutral [`scan::Scan`] the
//! monitor takes.
pub mod line;
pub mod modbus;
pub mod scan;
