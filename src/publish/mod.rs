//! Publishing: engine outputs to MQTT messages (and log lines).
pub mod mqtt;
pub mod queue;
