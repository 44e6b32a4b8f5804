//! PLACEHOLDER until the surface module lands.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Orientation { Vertical, Roof, Floor }
