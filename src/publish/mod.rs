//! Publishing: the monitor's outputs to their sinks. `route` decides where
//! each output goes on MQTT (one place); `queue` hands messages to the
//! `mqtt` link without waiting on it; `flight` tracks what the link has
//! handed to the MQTT client until the broker acknowledges it; `log` writes
//! the log lines, `fold` keeps repeated ones from flooding the journal;
//! `tls` builds the link's TLS client configuration from `[mqtt.tls]`;
//! `wire` puts the MQTT 3.1.1 and 5 clients behind one face.
pub mod flight;
pub mod fold;
pub mod log;
pub mod mqtt;
pub mod queue;
pub mod route;
pub mod tls;
pub mod wire;
