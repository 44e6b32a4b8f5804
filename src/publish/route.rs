//! Where an output goes on MQTT, decided from its kind in this one place.
//!
//! | output | topic | retained | queue policy |
//! |---|---|---|---|
//! | zone state | `{root}/zone/{zone}/state` | yes | latest wins, droppable |
//! | kiln state | `{root}/kiln/state` | yes | latest wins, droppable |
//! | channel state | `{root}/channel/{channel}` | yes | latest wins, droppable |
//! | alarm state | `{root}/alarm/{alarm}` | yes | latest wins, never dropped |
//! | alarm event, trend alert | `{root}/events` | no | never coalesced |
//! | command reply | `{root}/cmd/reply` | no | never coalesced |
//! | command audit (every command reply) | `{root}/events` | no | never coalesced |
//! | status | `{root}/status` | yes | never dropped |
//!
//! Every message goes with QoS 1 (at least once); retained is every kind
//! but the events ([`Message::retain`]). The log-only outputs (a channel's
//! health changing, an unknown input, the flood notices) have no topic.

use super::queue::{Kind, Message};
use crate::monitor::output::Output;

/// The topic and queue kind of `out` under `root`; `None` for an output
/// that only the log shows.
pub fn route(root: &str, out: &Output) -> Option<(String, Kind)> {
    Some(match out {
        Output::ZoneState(z) => (
            format!("{root}/zone/{}/state", z.report.zone),
            Kind::ZoneState,
        ),
        Output::KilnState(_) => (format!("{root}/kiln/state"), Kind::ZoneState),
        Output::ChannelState(c) => (format!("{root}/channel/{}", c.channel), Kind::Channel),
        Output::AlarmState(a) => (format!("{root}/alarm/{}", a.report.name), Kind::Alarm),
        Output::AlarmEvent(_) | Output::TrendAlert(_) => (format!("{root}/events"), Kind::Event),
        Output::CommandReply(_) => (format!("{root}/cmd/reply"), Kind::Event),
        Output::Status(_) => (format!("{root}/status"), Kind::Status),
        Output::ChannelHealth(_) | Output::UnknownInput(_) | Output::AlarmFlood(_) => return None,
    })
}

/// `out` as the message to publish, if it has a topic; an output that
/// cannot be encoded is reported by the caller with the error.
pub fn message(root: &str, out: &Output) -> Option<Result<Message, serde_json::Error>> {
    let (topic, kind) = route(root, out)?;
    Some(serde_json::to_vec(out).map(|payload| Message {
        topic,
        payload,
        kind,
        after: 0,
        props: Default::default(),
    }))
}

/// Every message of `out`: [`message`], and for a command reply its audit
/// event on `{root}/events` too.
pub fn messages(
    root: &str,
    out: &Output,
) -> impl Iterator<Item = Result<Message, serde_json::Error>> {
    let audit = match out {
        Output::CommandReply(r) => Some(serde_json::to_vec(&r.audit()).map(|payload| Message {
            topic: format!("{root}/events"),
            payload,
            kind: Kind::Event,
            after: 0,
            props: Default::default(),
        })),
        _ => None,
    };
    message(root, out).into_iter().chain(audit)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::monitor::command::parse_command;
    use crate::monitor::output::{CommandReply, UnknownInput};
    use crate::time::Timestamp;

    #[test]
    fn a_command_reply_is_an_event_on_its_topic_with_its_audit_event() {
        let payload = br#"{"id":"c-1","action":"shelve","alarm":"a","by":"op-x","minutes":30,"time":"2026-03-14T08:15:00Z"}"#;
        let out = Output::CommandReply(CommandReply {
            id: Some("c-1".into()),
            result: Ok(()),
            command: Some(parse_command(payload).unwrap()),
            payload_bytes: payload.len(),
            time: Timestamp::parse("2026-03-14T08:15:02Z").unwrap(),
        });
        let all: Vec<_> = messages("wallflux/p/k", &out).map(Result::unwrap).collect();
        assert_eq!(all.len(), 2);
        let m = &all[0];
        assert_eq!(m.topic, "wallflux/p/k/cmd/reply");
        assert_eq!(m.kind, Kind::Event);
        assert!(!m.retain());
        assert_eq!(m.payload, br#"{"id":"c-1","ok":true}"#);
        let a = &all[1];
        assert_eq!(a.topic, "wallflux/p/k/events");
        assert!(!a.retain());
        let json: serde_json::Value = serde_json::from_slice(&a.payload).unwrap();
        assert_eq!(json["schema"], "wallflux.command/1");
        assert_eq!(json["type"], "command");
        assert_eq!(json["action"], "shelve");
        assert_eq!(json["by"], "op-x");
        assert_eq!(json["minutes"], 30.0);
        assert_eq!(json["ok"], true);
        assert_eq!(json["sent"], "2026-03-14T08:15:00.000Z");
        assert_eq!(json["time"], "2026-03-14T08:15:02.000Z");
        assert_eq!(json["bytes"], payload.len());
    }

    #[test]
    fn log_only_outputs_have_no_topic() {
        let out = Output::UnknownInput(UnknownInput {
            source: "box".try_into().unwrap(),
            input: 9,
        });
        assert!(route("r", &out).is_none());
    }
}
