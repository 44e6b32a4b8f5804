//! Operator commands arriving on `{root}/cmd`, and their replies on
//! `{root}/cmd/reply`. Pure parsing: no IO, and every input, however
//! malformed, is an error value, never a panic.
//!
//! A command is one JSON object:
//!
//! ```json
//! {"id": "c-17", "action": "shelve", "alarm": "side-wall.shell_high", "by": "j.smith", "minutes": 30, "time": "2026-03-14T08:15:00Z"}
//! ```
//!
//! - `id` (required): the sender's correlation id, echoed in the reply.
//! - `time` (required): when it was sent, RFC 3339; a command older than
//!   the configuration's `max_command_age_s` (or as far ahead of the
//!   daemon's clock) is refused, so that a command held back somewhere is
//!   never applied late.
//! - `action` (required): `ack`, `shelve`, `unshelve`, `reset`,
//!   `out_of_service` or `in_service`.
//! - `alarm` (required): the alarm's configured name (the caller looks it up
//!   and answers [`CommandError::UnknownAlarm`] if there is none).
//! - `by` (required): who asks, for the audit trail.
//! - `minutes` (required for `shelve`, checked wherever present): above 0,
//!   at most [`MAX_SHELVE_MIN`].
//!
//! A zone's lining baseline takes `baseline_start`, `baseline_stop` and
//! `baseline_reset`, with `zone` (the zone's configured name) in place of
//! `alarm`:
//!
//! ```json
//! {"id": "c-18", "action": "baseline_start", "zone": "side-wall", "by": "j.smith", "time": "2026-03-14T08:16:00Z"}
//! ```
//!
//! Text fields are 1 to [`MAX_TEXT_CHARS`] characters with no control
//! characters and no invisible bidirectional or zero-width formatting
//! characters, so an audit line reads as what it says. Unknown keys are
//! ignored (a sender may add its own); a key given twice is an error, since
//! two readers could take different ones.
//!
//! Then the configuration's `[commands]` policy ([`check_policy`]): the
//! action must be enabled, `by` one of `allowed_by` (when it lists any),
//! a shelve no longer than `max_shelve_min`.
//!
//! The reply is `{"id": ..., "ok": true}` or `{"id": ..., "ok": false,
//! "error": "<text>", "code": "<snake_case>"}`; `id` is null when the
//! command had no readable id.

use serde::{Deserialize, Serialize};
use serde_json::Value;

use crate::config::CommandSettings;
use crate::monitor::alarm::{check_shelve_minutes, MAX_SHELVE_MIN};
use crate::time::Timestamp;

/// The largest command payload accepted, bytes.
pub const MAX_COMMAND_BYTES: usize = 4096;

/// The longest `id`, `alarm` or `by`, characters.
pub const MAX_TEXT_CHARS: usize = 64;

crate::word_enum! {
    /// What a command asks for.
    #[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
    pub enum Action {
        Ack = "ack",
        Shelve = "shelve",
        Unshelve = "unshelve",
        Reset = "reset",
        OutOfService = "out_of_service",
        InService = "in_service",
        /// A zone's lining baseline: start learning.
        BaselineStart = "baseline_start",
        /// End learning now and use what is learned.
        BaselineStop = "baseline_stop",
        /// Forget the baseline (after a reline).
        BaselineReset = "baseline_reset",
    }
}

impl Action {
    /// Whether the action addresses a zone's lining baseline (`zone`)
    /// rather than an alarm (`alarm`).
    pub fn is_baseline(self) -> bool {
        matches!(
            self,
            Action::BaselineStart | Action::BaselineStop | Action::BaselineReset
        )
    }
}

/// A parsed, checked operator command.
#[derive(Clone, Debug, PartialEq)]
pub struct Command {
    pub id: String,
    pub action: Action,
    /// What the command addresses: the alarm's name, or for the baseline
    /// actions ([`Action::is_baseline`]) the zone's name (`zone` on the wire).
    pub alarm: String,
    pub by: String,
    /// The shelve duration (always present for [`Action::Shelve`]).
    pub minutes: Option<f64>,
    /// When the sender sent it.
    pub time: Timestamp,
}

/// Why a command was refused (by the parser, or by the alarm it names).
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum CommandError {
    /// The payload is larger than [`MAX_COMMAND_BYTES`].
    #[error("command larger than {} bytes", MAX_COMMAND_BYTES)]
    TooLarge,
    /// The payload is not JSON we can read (syntax, a duplicate key, a number out of range).
    #[error("not a readable JSON command: {0}")]
    NotJson(String),
    /// The payload is JSON, but not an object.
    #[error("the command must be a JSON object")]
    NotAnObject,
    /// A required field is absent (or null).
    #[error("missing field \"{0}\"")]
    MissingField(&'static str),
    /// A field has the wrong JSON type (e.g. a number where text belongs).
    #[error("field \"{0}\" has the wrong type")]
    WrongType(&'static str),
    /// A text field is empty.
    #[error("field \"{0}\" is empty")]
    EmptyField(&'static str),
    /// A text field is longer than [`MAX_TEXT_CHARS`] characters.
    #[error("field \"{0}\" is longer than {max} characters", max = MAX_TEXT_CHARS)]
    TooLong(&'static str),
    /// A text field holds a control or invisible formatting character.
    #[error("field \"{0}\" contains a control or invisible formatting character")]
    ControlCharacter(&'static str),
    /// The action is none of the known ones.
    #[error("unknown action \"{0}\" (expected ack, shelve, unshelve, reset, out_of_service, in_service, baseline_start, baseline_stop or baseline_reset)")]
    UnknownAction(String),
    /// No alarm of that name is configured.
    #[error("unknown alarm \"{0}\"")]
    UnknownAlarm(String),
    /// The shelve duration is not above 0 and at most [`MAX_SHELVE_MIN`] minutes.
    #[error("minutes must be a number above 0 and at most {}", MAX_SHELVE_MIN)]
    BadMinutes,
    /// The alarm owes no acknowledgement (never active, or already acknowledged).
    #[error("the alarm has nothing to acknowledge")]
    NothingToAcknowledge,
    /// The alarm does not latch, or its latch is not holding.
    #[error("the alarm is not latched")]
    NotLatched,
    /// A reset was asked while the alarm's condition is still present.
    #[error("the alarm's condition is still present")]
    ConditionStillPresent,
    /// A reset was asked before the latched alarm was acknowledged.
    #[error("the alarm must be acknowledged before it is reset")]
    NotAcknowledged,
    /// An unshelve was asked for an alarm that is not shelved.
    #[error("the alarm is not shelved")]
    NotShelved,
    /// The alarm is already out of service.
    #[error("the alarm is already out of service")]
    AlreadyOutOfService,
    /// The alarm is already in service.
    #[error("the alarm is already in service")]
    AlreadyInService,
    /// `time` is not an RFC 3339 date and time.
    #[error("field \"time\" is not an RFC 3339 date and time (e.g. 2026-03-14T08:15:00Z)")]
    BadTime,
    /// The command is older than `max_command_age_s`.
    #[error("the command is {age_s:.0} s old, more than max_command_age_s = {max_s} s: not applied late")]
    Stale { age_s: f64, max_s: f64 },
    /// The command's time is further ahead of the daemon's clock than
    /// `max_command_age_s` (a clock that is wrong on one side).
    #[error("the command's time is {ahead_s:.0} s ahead of the daemon's clock (more than max_command_age_s = {max_s} s): check both clocks")]
    FromTheFuture { ahead_s: f64, max_s: f64 },
    /// The action is not among `[commands] enabled`.
    #[error("the action \"{}\" is not enabled on this daemon ([commands] enabled)", .0.name())]
    ActionDisabled(Action),
    /// `by` is not among `[commands] allowed_by`.
    #[error("\"{0}\" is not among those allowed to command this daemon ([commands] allowed_by)")]
    NotAllowed(String),
    /// A shelve longer than `[commands] max_shelve_min`.
    #[error("a shelve may last at most {0} minutes here ([commands] max_shelve_min)")]
    ShelveTooLong(f64),
    /// The change was applied but could not be saved.
    #[error("applied, but it could not be saved and will not survive a restart: {0}")]
    NotPersisted(String),
    /// No zone of that name is configured.
    #[error("unknown zone \"{0}\"")]
    UnknownZone(String),
    /// The zone has no lining baseline (it needs `model = "layered"` and a `hot_face_channel`).
    #[error(
        "zone \"{0}\" has no lining baseline (it needs model = \"layered\" and a hot_face_channel)"
    )]
    NoBaseline(String),
    /// The baseline refused the command in its present state.
    #[error("{0}")]
    Baseline(#[from] crate::monitor::lining::BaselineError),
}

impl CommandError {
    /// A stable machine-readable name for the reply's `code`.
    pub fn code(&self) -> &'static str {
        match self {
            CommandError::TooLarge => "too_large",
            CommandError::NotJson(_) => "not_json",
            CommandError::NotAnObject => "not_an_object",
            CommandError::MissingField(_) => "missing_field",
            CommandError::WrongType(_) => "wrong_type",
            CommandError::EmptyField(_) => "empty_field",
            CommandError::TooLong(_) => "too_long",
            CommandError::ControlCharacter(_) => "control_character",
            CommandError::UnknownAction(_) => "unknown_action",
            CommandError::UnknownAlarm(_) => "unknown_alarm",
            CommandError::BadMinutes => "bad_minutes",
            CommandError::NothingToAcknowledge => "nothing_to_acknowledge",
            CommandError::NotLatched => "not_latched",
            CommandError::ConditionStillPresent => "condition_still_present",
            CommandError::NotAcknowledged => "not_acknowledged",
            CommandError::NotShelved => "not_shelved",
            CommandError::AlreadyOutOfService => "already_out_of_service",
            CommandError::AlreadyInService => "already_in_service",
            CommandError::BadTime => "bad_time",
            CommandError::Stale { .. } => "stale",
            CommandError::FromTheFuture { .. } => "from_the_future",
            CommandError::ActionDisabled(_) => "action_disabled",
            CommandError::NotAllowed(_) => "not_allowed",
            CommandError::ShelveTooLong(_) => "shelve_too_long",
            CommandError::NotPersisted(_) => "not_persisted",
            CommandError::UnknownZone(_) => "unknown_zone",
            CommandError::NoBaseline(_) => "no_baseline",
            CommandError::Baseline(e) => {
                use crate::monitor::lining::BaselineError as B;
                match e {
                    B::AlreadyLearning => "baseline_already_learning",
                    B::AlreadyLearned => "baseline_already_learned",
                    B::NotLearning => "baseline_not_learning",
                    B::NotReady => "baseline_not_ready",
                    B::NothingToReset => "baseline_nothing_to_reset",
                }
            }
        }
    }
}

/// Is `c` a character that must not reach an audit line: a control
/// character (C0, DEL, C1), or one of the invisible characters that change
/// how text reads (zero-width space/joiners, bidirectional marks, embeddings,
/// overrides and isolates, the byte-order mark; Unicode's "Trojan Source"
/// set, CVE-2021-42574).
fn forbidden(c: char) -> bool {
    c.is_control()
        || matches!(c,
            '\u{200B}'..='\u{200F}'
            | '\u{202A}'..='\u{202E}'
            | '\u{2060}'..='\u{2069}'
            | '\u{FEFF}')
}

/// Checks a text field: not empty, at most [`MAX_TEXT_CHARS`] characters,
/// no forbidden character. Used by the parser and by the alarm commands.
pub fn check_text(field: &'static str, text: &str) -> Result<(), CommandError> {
    if text.is_empty() {
        return Err(CommandError::EmptyField(field));
    }
    if text.chars().count() > MAX_TEXT_CHARS {
        return Err(CommandError::TooLong(field));
    }
    if text.chars().any(forbidden) {
        return Err(CommandError::ControlCharacter(field));
    }
    Ok(())
}

/// The command as it arrives: every field is taken as any JSON value so
/// that a wrong type names its field, and the derive rejects duplicate keys.
#[derive(Deserialize)]
struct Raw {
    id: Option<Value>,
    action: Option<Value>,
    alarm: Option<Value>,
    by: Option<Value>,
    minutes: Option<Value>,
    zone: Option<Value>,
    time: Option<Value>,
}

fn text(value: Option<Value>, field: &'static str) -> Result<String, CommandError> {
    match value {
        None => Err(CommandError::MissingField(field)),
        Some(Value::String(s)) => check_text(field, &s).map(|()| s),
        Some(_) => Err(CommandError::WrongType(field)),
    }
}

fn read_raw(payload: &[u8]) -> Result<Raw, CommandError> {
    if payload.len() > MAX_COMMAND_BYTES {
        return Err(CommandError::TooLarge);
    }
    // A derived struct also accepts a JSON array (fields by position):
    // insist on an object before handing it over.
    let first = payload.iter().find(|b| !b.is_ascii_whitespace());
    if first != Some(&b'{') {
        return Err(
            match serde_json::from_slice::<serde::de::IgnoredAny>(payload) {
                Ok(_) => CommandError::NotAnObject,
                Err(e) => CommandError::NotJson(e.to_string()),
            },
        );
    }
    serde_json::from_slice(payload).map_err(|e| CommandError::NotJson(e.to_string()))
}

/// Parses and checks one command payload (see the module doc).
pub fn parse_command(payload: &[u8]) -> Result<Command, CommandError> {
    let raw = read_raw(payload)?;
    let id = text(raw.id, "id")?;
    let action_text = text(raw.action, "action")?;
    let action = Action::from_name(&action_text).ok_or(CommandError::UnknownAction(action_text))?;
    let alarm = if action.is_baseline() {
        text(raw.zone, "zone")?
    } else {
        text(raw.alarm, "alarm")?
    };
    let by = text(raw.by, "by")?;
    let minutes = match raw.minutes {
        None => None,
        Some(Value::Number(n)) => {
            let m = n.as_f64().ok_or(CommandError::BadMinutes)?;
            check_shelve_minutes(m)?;
            Some(m)
        }
        Some(_) => return Err(CommandError::WrongType("minutes")),
    };
    if action == Action::Shelve && minutes.is_none() {
        return Err(CommandError::MissingField("minutes"));
    }
    let time = Timestamp::parse(&text(raw.time, "time")?).map_err(|_| CommandError::BadTime)?;
    Ok(Command {
        id,
        action,
        alarm,
        by,
        minutes,
        time,
    })
}

/// Checks `cmd`, handled at `now`, against the `[commands]` policy: its
/// age, its action, its sender, its shelve duration.
pub fn check_policy(
    policy: &CommandSettings,
    cmd: &Command,
    now: Timestamp,
) -> Result<(), CommandError> {
    let age_s = now.since(cmd.time);
    let max_s = policy.max_age_s;
    if age_s > max_s {
        return Err(CommandError::Stale { age_s, max_s });
    }
    if -age_s > max_s {
        return Err(CommandError::FromTheFuture {
            ahead_s: -age_s,
            max_s,
        });
    }
    if !policy.enabled.contains(&cmd.action) {
        return Err(CommandError::ActionDisabled(cmd.action));
    }
    if !policy.allowed_by.is_empty() && !policy.allowed_by.iter().any(|b| b == &cmd.by) {
        return Err(CommandError::NotAllowed(cmd.by.clone()));
    }
    if cmd.minutes.is_some_and(|m| m > policy.max_shelve_min) {
        return Err(CommandError::ShelveTooLong(policy.max_shelve_min));
    }
    Ok(())
}

/// The `id` of a payload that may have failed [`parse_command`], for the
/// reply: Some when the payload is a JSON object whose `id` is valid text.
pub fn command_id(payload: &[u8]) -> Option<String> {
    let raw = read_raw(payload).ok()?;
    text(raw.id, "id").ok()
}

/// The reply payload: `{"id":…,"ok":true}` or
/// `{"id":…,"ok":false,"error":"…","code":"…"}`; `id` None is `null`.
#[derive(Serialize)]
pub struct Reply<'a> {
    id: Option<&'a str>,
    ok: bool,
    #[serde(skip_serializing_if = "Option::is_none")]
    error: Option<String>,
    #[serde(skip_serializing_if = "Option::is_none")]
    code: Option<&'static str>,
}

impl<'a> Reply<'a> {
    pub fn new(id: Option<&'a str>, result: Result<(), &CommandError>) -> Self {
        match result {
            Ok(()) => Reply {
                id,
                ok: true,
                error: None,
                code: None,
            },
            Err(e) => Reply {
                id,
                ok: false,
                error: Some(e.to_string()),
                code: Some(e.code()),
            },
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use proptest::prelude::*;

    fn parse(text: &str) -> Result<Command, CommandError> {
        parse_command(text.as_bytes())
    }

    #[test]
    fn every_action_parses() {
        for (name, action) in [
            ("ack", Action::Ack),
            ("unshelve", Action::Unshelve),
            ("reset", Action::Reset),
            ("out_of_service", Action::OutOfService),
            ("in_service", Action::InService),
        ] {
            let c = parse(&format!(
                r#"{{"time":"2026-03-14T08:15:00Z","id":"c-1","action":"{name}","alarm":"side.shell_high","by":"j.smith"}}"#
            ))
            .unwrap();
            assert_eq!(c.action, action);
            assert_eq!(c.action.name(), name);
            assert_eq!(
                (c.id.as_str(), c.alarm.as_str(), c.by.as_str(), c.minutes),
                ("c-1", "side.shell_high", "j.smith", None)
            );
        }
        let c = parse(
            r#" {"time":"2026-03-14T08:15:00Z","id":"7","action":"shelve","alarm":"a","by":"b","minutes":30, "note":"ignored"} "#,
        )
        .unwrap();
        assert_eq!((c.action, c.minutes), (Action::Shelve, Some(30.0)));
    }

    /// The baseline actions name a `zone`, not an `alarm`: without one
    /// they are refused, and an `alarm` key does not stand in for it.
    #[test]
    fn baseline_actions_take_a_zone() {
        for (name, action) in [
            ("baseline_start", Action::BaselineStart),
            ("baseline_stop", Action::BaselineStop),
            ("baseline_reset", Action::BaselineReset),
        ] {
            let c = parse(&format!(
                r#"{{"time":"2026-03-14T08:15:00Z","id":"b-1","action":"{name}","zone":"side-wall","by":"j.smith"}}"#
            ))
            .unwrap();
            assert_eq!((c.action, c.alarm.as_str()), (action, "side-wall"));
            assert!(c.action.is_baseline() && c.action.name() == name);
            assert_eq!(
                parse(&format!(
                    r#"{{"id":"b-1","action":"{name}","alarm":"side-wall","by":"j.smith"}}"#
                )),
                Err(CommandError::MissingField("zone"))
            );
        }
        assert_eq!(
            parse(r#"{"id":"b","action":"baseline_start","zone":7,"by":"x"}"#),
            Err(CommandError::WrongType("zone"))
        );
        assert!(!Action::Ack.is_baseline());
    }

    #[test]
    fn malformed_payloads_are_errors() {
        use CommandError::*;
        let long = "x".repeat(65);
        let cases: Vec<(String, CommandError)> = vec![
            ("".into(), NotJson(String::new())),
            ("ack".into(), NotJson(String::new())),
            ("{\"id\":".into(), NotJson(String::new())),
            ("[\"c\",\"ack\",\"a\",\"b\"]".into(), NotAnObject),
            ("42".into(), NotAnObject),
            ("null".into(), NotAnObject),
            ("\"ack\"".into(), NotAnObject),
            (
                r#"{"action":"ack","alarm":"a","by":"b"}"#.into(),
                MissingField("id"),
            ),
            (
                r#"{"id":"1","alarm":"a","by":"b"}"#.into(),
                MissingField("action"),
            ),
            (
                r#"{"id":"1","action":"ack","by":"b"}"#.into(),
                MissingField("alarm"),
            ),
            (
                r#"{"id":"1","action":"ack","alarm":"a"}"#.into(),
                MissingField("by"),
            ),
            (
                r#"{"id":"1","action":"ack","alarm":"a","by":null}"#.into(),
                MissingField("by"),
            ),
            (
                r#"{"id":"1","action":"ack","alarm":"a","by":""}"#.into(),
                EmptyField("by"),
            ),
            (
                r#"{"id":1,"action":"ack","alarm":"a","by":"b"}"#.into(),
                WrongType("id"),
            ),
            (
                r#"{"id":"1","action":["ack"],"alarm":"a","by":"b"}"#.into(),
                WrongType("action"),
            ),
            (
                r#"{"id":"1","action":"ACK","alarm":"a","by":"b"}"#.into(),
                UnknownAction("ACK".into()),
            ),
            (
                r#"{"id":"1","action":"silence","alarm":"a","by":"b"}"#.into(),
                UnknownAction("silence".into()),
            ),
            (
                format!(r#"{{"id":"{long}","action":"ack","alarm":"a","by":"b"}}"#),
                TooLong("id"),
            ),
            (
                format!(r#"{{"id":"1","action":"ack","alarm":"a","by":"{long}"}}"#),
                TooLong("by"),
            ),
            (
                r#"{"id":"1","action":"ack","alarm":"a\u0000","by":"b"}"#.into(),
                ControlCharacter("alarm"),
            ),
            (
                r#"{"id":"1","action":"ack","alarm":"a","by":"b\nFAKE LOG LINE"}"#.into(),
                ControlCharacter("by"),
            ),
            (
                r#"{"id":"1","action":"ack","alarm":"a","by":"b\u202e"}"#.into(),
                ControlCharacter("by"),
            ),
            (
                r#"{"id":"1","action":"ack","alarm":"a","by":"b\u009b"}"#.into(),
                ControlCharacter("by"),
            ),
            (
                r#"{"id":"1","action":"shelve","alarm":"a","by":"b"}"#.into(),
                MissingField("minutes"),
            ),
            (
                r#"{"id":"1","action":"shelve","alarm":"a","by":"b","minutes":-5}"#.into(),
                BadMinutes,
            ),
            (
                r#"{"id":"1","action":"shelve","alarm":"a","by":"b","minutes":0}"#.into(),
                BadMinutes,
            ),
            (
                r#"{"id":"1","action":"shelve","alarm":"a","by":"b","minutes":1440.5}"#.into(),
                BadMinutes,
            ),
            (
                r#"{"id":"1","action":"shelve","alarm":"a","by":"b","minutes":"30"}"#.into(),
                WrongType("minutes"),
            ),
            (
                r#"{"id":"1","action":"shelve","alarm":"a","by":"b","minutes":NaN}"#.into(),
                NotJson(String::new()),
            ),
            (
                r#"{"id":"1","action":"shelve","alarm":"a","by":"b","minutes":1e400}"#.into(),
                NotJson(String::new()),
            ),
            (
                r#"{"id":"1","id":"2","action":"ack","alarm":"a","by":"b"}"#.into(),
                NotJson(String::new()),
            ),
        ];
        for (payload, want) in cases {
            let got = parse(&payload);
            match (&got, &want) {
                // The parser's message is not ours to pin down.
                (Err(NotJson(msg)), NotJson(_)) => assert!(!msg.is_empty(), "{payload}"),
                _ => assert_eq!(got, Err(want), "{payload}"),
            }
        }
    }

    #[test]
    fn limits_are_inclusive() {
        let id = "i".repeat(MAX_TEXT_CHARS);
        let by = "é".repeat(MAX_TEXT_CHARS); // 64 characters, 128 bytes
        let c = parse(&format!(
            r#"{{"time":"2026-03-14T08:15:00Z","id":"{id}","action":"shelve","alarm":"a","by":"{by}","minutes":1440}}"#
        ))
        .unwrap();
        assert_eq!(
            (c.id.len(), c.by.chars().count(), c.minutes),
            (64, 64, Some(MAX_SHELVE_MIN))
        );
    }

    #[test]
    fn payload_size_limit() {
        let head = r#"{"time":"2026-03-14T08:15:00Z","id":"1","action":"ack","alarm":"a","by":"b","pad":""#;
        let fill = |n: usize| format!("{head}{}\"}}", "p".repeat(n - head.len() - 2));
        let at_limit = fill(MAX_COMMAND_BYTES);
        assert_eq!(at_limit.len(), MAX_COMMAND_BYTES);
        assert!(parse(&at_limit).is_ok());
        let over = fill(MAX_COMMAND_BYTES + 1);
        assert_eq!(parse(&over), Err(CommandError::TooLarge));
        assert_eq!(
            parse_command(&vec![b'{'; 1 << 20]),
            Err(CommandError::TooLarge)
        );
    }

    #[test]
    fn deep_nesting_is_an_error_not_a_stack_overflow() {
        // In an unknown key the value is skipped without recursion ...
        let deep = format!(
            r#"{{"id":"1","x":{}{}}}"#,
            "[".repeat(2000),
            "]".repeat(2000)
        );
        assert_eq!(parse(&deep), Err(CommandError::MissingField("action")));
        // ... in a known one serde_json's recursion limit (128) stops it.
        let deep = format!(r#"{{"id":{}{}}}"#, "[".repeat(2000), "]".repeat(2000));
        assert!(matches!(parse(&deep), Err(CommandError::NotJson(_))));
    }

    #[test]
    fn the_id_of_a_refused_command_is_still_found_for_the_reply() {
        assert_eq!(
            command_id(br#"{"id":"c-9","action":"dance"}"#).as_deref(),
            Some("c-9")
        );
        assert_eq!(command_id(b"not json"), None);
        assert_eq!(command_id(br#"{"id":"bad\u0007"}"#), None);
        assert_eq!(command_id(br#"{"id":17}"#), None);
    }

    fn reply_json(id: Option<&str>, result: Result<(), &CommandError>) -> Vec<u8> {
        serde_json::to_vec(&Reply::new(id, result)).unwrap()
    }

    #[test]
    fn replies() {
        let ok: serde_json::Value =
            serde_json::from_slice(&reply_json(Some("c-1"), Ok(()))).unwrap();
        assert_eq!(ok, serde_json::json!({"id": "c-1", "ok": true}));
        let e = CommandError::NothingToAcknowledge;
        let err: serde_json::Value =
            serde_json::from_slice(&reply_json(Some("c-2"), Err(&e))).unwrap();
        assert_eq!(
            err,
            serde_json::json!({"id": "c-2", "ok": false, "error": "the alarm has nothing to acknowledge", "code": "nothing_to_acknowledge"})
        );
        let e = CommandError::NotJson("expected value at line 1 column 1".into());
        let anon: serde_json::Value = serde_json::from_slice(&reply_json(None, Err(&e))).unwrap();
        assert_eq!(anon["id"], serde_json::Value::Null);
        assert_eq!(anon["code"], "not_json");
        // An id with a quote in it stays one JSON string.
        let q: serde_json::Value =
            serde_json::from_slice(&reply_json(Some(r#"a"b"#), Ok(()))).unwrap();
        assert_eq!(q["id"], r#"a"b"#);
    }

    proptest! {
        #![proptest_config(ProptestConfig::with_cases(2048))]

        #[test]
        fn arbitrary_bytes_never_panic(bytes in prop::collection::vec(any::<u8>(), 0..600)) {
            let r = parse_command(&bytes);
            let _ = command_id(&bytes);
            if let Err(e) = &r {
                let reply: serde_json::Value = serde_json::from_slice(&reply_json(None, Err(e))).unwrap();
                prop_assert_eq!(&reply["ok"], false);
            }
        }

        #[test]
        fn arbitrary_command_like_objects_never_panic(
            id in prop::option::of(".{0,70}"),
            action in prop::option::of(prop_oneof![Just("ack".to_string()), Just("shelve".to_string()), ".{0,10}"]),
            by in prop::option::of(".{0,70}"),
            minutes in prop::option::of(prop_oneof![any::<f64>().prop_map(serde_json::Value::from), Just(serde_json::json!("5")), Just(serde_json::json!(null))]),
        ) {
            let mut obj = serde_json::Map::new();
            if let Some(v) = &id { obj.insert("id".into(), v.clone().into()); }
            if let Some(v) = &action { obj.insert("action".into(), v.clone().into()); }
            obj.insert("alarm".into(), "a".into());
            if let Some(v) = &by { obj.insert("by".into(), v.clone().into()); }
            if let Some(v) = minutes { obj.insert("minutes".into(), v); }
            let payload = serde_json::to_vec(&serde_json::Value::Object(obj)).unwrap();
            if let Ok(c) = parse_command(&payload) {
                // Whatever is accepted honours the rules.
                prop_assert!(check_text("id", &c.id).is_ok() && check_text("by", &c.by).is_ok());
                if c.action == Action::Shelve {
                    prop_assert!(c.minutes.is_some_and(|m| m > 0.0 && m <= MAX_SHELVE_MIN));
                }
            }
        }
    }

    #[test]
    fn a_command_carries_its_time() {
        let base = r#""id":"t","action":"ack","alarm":"a","by":"b""#;
        assert_eq!(
            parse(&format!("{{{base}}}")),
            Err(CommandError::MissingField("time"))
        );
        for bad in [r#""yesterday""#, r#""2026-13-01T00:00:00Z""#] {
            assert_eq!(
                parse(&format!(r#"{{{base},"time":{bad}}}"#)),
                Err(CommandError::BadTime),
                "{bad}"
            );
        }
        assert_eq!(
            parse(&format!(r#"{{{base},"time":1700000000}}"#)),
            Err(CommandError::WrongType("time"))
        );
        let c = parse(&format!(r#"{{{base},"time":"2026-03-14T08:15:00Z"}}"#)).unwrap();
        assert_eq!(c.time, Timestamp::parse("2026-03-14T08:15:00Z").unwrap());
    }

    /// Each rule of `[commands]` refuses with its own code; the age limit
    /// holds both ways and is inclusive.
    #[test]
    fn the_policy_refuses_stale_disabled_unlisted_and_long() {
        let sent = Timestamp::parse("2026-03-14T08:15:00Z").unwrap();
        let cmd = |action: &str, by: &str, minutes: &str| {
            parse(&format!(
                r#"{{"id":"p","action":"{action}","alarm":"a","by":"{by}"{minutes},"time":"2026-03-14T08:15:00Z"}}"#
            ))
            .unwrap()
        };
        let policy = CommandSettings {
            enabled: vec![Action::Ack, Action::Shelve],
            allowed_by: vec!["op-anna".into(), "scada-1".into()],
            max_shelve_min: 60.0,
            max_age_s: 120.0,
        };
        let ack = cmd("ack", "op-anna", "");
        assert_eq!(check_policy(&policy, &ack, sent.plus_s(120.0)), Ok(()));
        assert_eq!(check_policy(&policy, &ack, sent.plus_s(-120.0)), Ok(()));
        let e = check_policy(&policy, &ack, sent.plus_s(121.0)).unwrap_err();
        assert_eq!(
            (e.code(), e.to_string().contains("121 s old")),
            ("stale", true)
        );
        let e = check_policy(&policy, &ack, sent.plus_s(-3600.0)).unwrap_err();
        assert_eq!(e.code(), "from_the_future");
        let oos = cmd("out_of_service", "op-anna", "");
        let e = check_policy(&policy, &oos, sent).unwrap_err();
        assert_eq!(e, CommandError::ActionDisabled(Action::OutOfService));
        assert!(
            e.to_string().contains("\"out_of_service\" is not enabled"),
            "{e}"
        );
        let e = check_policy(&policy, &cmd("ack", "mallory", ""), sent).unwrap_err();
        assert_eq!(e, CommandError::NotAllowed("mallory".into()));
        assert_eq!(e.code(), "not_allowed");
        let long = cmd("shelve", "scada-1", r#","minutes":61"#);
        assert_eq!(
            check_policy(&policy, &long, sent),
            Err(CommandError::ShelveTooLong(60.0))
        );
        let short = cmd("shelve", "scada-1", r#","minutes":60"#);
        assert_eq!(check_policy(&policy, &short, sent), Ok(()));
        // The defaults: every action, anyone, a day's shelve, 5 minutes.
        let open = CommandSettings::default();
        assert_eq!(
            check_policy(&open, &cmd("ack", "mallory", ""), sent),
            Ok(())
        );
        assert_eq!(check_policy(&open, &oos, sent.plus_s(300.0)), Ok(()));
        assert_eq!(
            check_policy(&open, &oos, sent.plus_s(301.0)).map_err(|e| e.code()),
            Err("stale")
        );
    }
}
