//! The pure core of wallflux: everything that turns readings into zone
//! states, alarms and energy, with no IO, no clock and no async runtime.
//! Every call that depends on time is given `now`; the edges (serial,
//! MQTT, files, signals) live in the root package.
//!
//! - [`physics`]: thermocouples (ITS-90), tolerances, materials, the profile
//!   fit, the single-layer wall solution, the steady layered wall, the
//!   transient wall model and its Kalman estimator, surface heat loss, the
//!   complete uncertainty budget.
//! - [`protocol`]: the line protocol v1 (sans-IO parser and encoder).
//! - [`monitor`]: per-channel signal chain and health, per-zone engine
//!   (fit schedule, rate histories, diagnostics, zone reports), alarm state
//!   machines and the alarm engine, commands, trend alerts, energy and
//!   lining accounting. Driven by `handle_*`, read by `poll_*`.
//! - [`bounded`]: fixed capacities, the checked push and its `Full` error.
//! - [`config`]: the TOML text and its validated settings.
//! - [`ids`]: typed ids of sources, channels, zones and alarms, and the
//!   vector indexed only by its own id type.
//! - [`time`]: UTC timestamps and RFC 3339.
#![forbid(unsafe_code)]

pub mod bounded;
pub mod config;
pub mod ids;
pub mod monitor;
pub mod physics;
pub mod protocol;
pub mod time;
pub mod words;
