//! The engine, the physics and the configuration through the public API, in
//! simulated time (no process, no network), in one binary.

#[path = "../common/mod.rs"]
mod common;

mod builtin_alarms;
mod cold_junction;
mod config_keys;
mod diagnostics;
mod garbled_input;
mod layered;
mod thermocouple_reference;
mod transient;
mod transient_reference;
mod trend_alerts;
mod uncertainty;
mod zone_status;
