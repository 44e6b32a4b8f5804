//! wallflux: live through-wall heat flux of kiln, furnace and oven walls.
//!
//! Thermocouples embedded at several depths of each wall zone arrive over a
//! serial line; every interval the zone's temperature profile is fitted and
//! Fourier's law, the energy balance and the heat equation give the fluxes,
//! heat loss, equivalent source and rates, published over MQTT.
//!
//! # Layout
//! Folder names are the data flow. The pure core (`physics`, the protocol
//! parser `acquire::line`, `monitor`, `time`) does no IO and reads no clock;
//! the edges (`acquire::serial`, `publish::mqtt`, `app`) own the IO.
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
//! - [`config`]: the TOML file and its validated settings.
//! - [`sim`]: a finite-difference wall model, the demo's firing schedule and
//!   a pseudo-terminal pair, for the demo and the tests.
//! - [`time`]: UTC timestamps and RFC 3339.
//! - [`app`]: command line, start-up, signals, `run`, `demo`, `check`,
//!   `analyze`, `tc`, the embedded broker, persistent state files.

pub mod acquire;
pub mod app;
pub mod config;
pub mod monitor;
pub mod physics;
pub mod publish;
pub mod sim;
pub mod time;
