//! Decoders of the inputs' wire formats, sans IO: bytes in, frames out.
pub mod line;
