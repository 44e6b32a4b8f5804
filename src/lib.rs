//! wallflux: live through-wall heat flux of kiln, furnace and oven walls.
//!
//! Thermocouples embedded at several depths of each wall zone arrive over a
//! serial line; every interval the zone's temperature profile is fitted and
//! Fourier's law, the energy balance and the heat equation give the fluxes,
//! heat loss, equivalent source and rates, published over MQTT.
//!
//! # Layout
//! A workspace whose crate boundaries are the rules. The pure core lives in
//! `crates/wallflux-core` (re-exported here as `config`, `ids`, `monitor`,
//! `physics`, `protocol`, `time`): it has no IO, clock or async runtime among
//! its dependencies. The simulator is `crates/wallflux-sim`, built only with
//! the `demo` feature. This package holds the edges (`acquire::serial`,
//! `publish::mqtt`, `app`), which own the IO.
//!
//! - [`physics`]: thermocouples (ITS-90), tolerances, materials, the profile
//!   fit, the single-layer wall solution, the steady layered wall, the
//!   transient wall model and its Kalman estimator, surface heat loss, the
//!   complete uncertainty budget.
//! - [`acquire`]: line protocol v1 (sans-IO parser and encoder), the serial
//!   edge (open, read, reopen).
//! - [`monitor`]: per-channel signal chain and health, per-zone engine
//!   (fit schedule, rate histories, diagnostics, zone reports), alarm state
//!   machines and the alarm engine, commands, trend alerts, energy and
//!   lining accounting. Driven by `handle_*`, read by `poll_*`, every call
//!   given `now`.
//! - [`publish`]: the bounded queue to the MQTT task and the MQTT edge.
//! - [`store`]: the local database (SQLite): the spool of events until the
//!   broker acknowledges them, the history, `export`.
//! - [`config`]: the TOML file and its validated settings.
//! - [`ids`]: typed ids of sources, channels, zones and alarms.
//! - [`sim`]: a finite-difference wall model, the demo's firing schedule and
//!   a pseudo-terminal pair, for the demo and the tests.
//! - [`time`]: UTC timestamps and RFC 3339.
//! - [`app`]: command line, start-up, signals, `run`, `demo`, `check`,
//!   `analyze`, `tc`, the embedded broker, persistent state files.

pub mod acquire;
pub mod app;
pub mod publish;
pub mod store;

pub use wallflux_core::{config, ids, monitor, physics, protocol, time};
#[cfg(feature = "demo")]
pub use wallflux_sim as sim;
