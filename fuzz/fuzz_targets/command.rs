//! The MQTT command parser on any payload: a command that keeps the text
//! rules, or an error with a JSON reply, never a panic.

#![no_main]

use libfuzzer_sys::fuzz_target;
use wallflux::monitor::command::{check_text, command_id, parse_command, reply_json};

fuzz_target!(|data: &[u8]| {
    let _ = command_id(data);
    match parse_command(data) {
        Ok(c) => assert!(check_text("id", &c.id).is_ok() && check_text("by", &c.by).is_ok()),
        Err(e) => {
            let reply: serde_json::Value =
                serde_json::from_slice(&reply_json(None, Err(&e))).expect("a JSON reply");
            assert_eq!(reply["ok"], false);
        }
    }
});
