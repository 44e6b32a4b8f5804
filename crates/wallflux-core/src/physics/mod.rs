//! The physics: pure functions over values, no IO, no clock.

pub mod fit;
pub mod kirchhoff;
pub mod layered;
pub mod linalg;
pub mod material;
pub mod profile;
pub mod surface;
pub mod thermocouple;
pub mod tolerance;
pub mod transient;
pub mod uncertainty;
