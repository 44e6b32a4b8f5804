//! The real binary with real brokers, pseudo-terminals and files: these tests
//! mostly wait on the daemon, so they share one binary and run side by side.

#[path = "../common/mod.rs"]
mod common;
/// The JSON Schema validator of docs/schema/ (only these tests use it).
#[path = "../common/schema.rs"]
mod schema;

mod alarms;
mod baseline_commands;
mod check_warnings;
mod cli;
mod cold_junction_live;
mod contract;
mod daemon;
mod demo;
mod deploy;
mod diagnostics_live;
mod link;
mod modbus;
mod mqtt5;
mod no_panic;
mod spool;
mod tls;
