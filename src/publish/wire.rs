//! The MQTT client of either protocol version (`[mqtt] protocol`, 3.1.1 or
//! 5) behind one face, so that the link (`mqtt`) and what it hands out
//! (`flight`) are written once. rumqttc has a client per version, with the
//! same shape but types of their own; this module maps both onto
//! [`WireEvent`] and [`WireError`] and gives the link the few handles it
//! needs on the event loop (its pending list, its unreported events).
//!
//! What MQTT 5 adds here: retained measurements carry a message expiry (the
//! broker forgets a zone state once it is three intervals old, so a
//! screen never shows a number from a daemon long gone), a command may name
//! a response topic and correlation data (its reply goes there, with the
//! same correlation data), a PUBACK says whether the broker accepted the
//! message, and the broker is told the largest packet the daemon takes (it
//! then drops a larger one itself instead of sending it).

use std::time::Duration;

use bytes::Bytes;
use rumqttc::{LastWill, MqttOptions, QoS, TlsConfiguration, Transport};

use crate::config::{MqttProtocol, MqttSettings};

/// Settings of one publish beyond topic, payload and retain.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct Props {
    /// MQTT 5: the broker drops the message this long after receiving it.
    pub expiry_s: Option<u32>,
    /// MQTT 5: the correlation data of the command this answers.
    pub correlation: Option<Vec<u8>>,
}

/// The client's request channel is full or its event loop gone.
#[derive(Debug)]
pub struct NotQueued;

/// A client handle: publishes go into the event loop's request channel.
#[derive(Clone)]
pub enum WireClient {
    V4(rumqttc::AsyncClient),
    V5(rumqttc::v5::AsyncClient),
}

impl WireClient {
    /// Queues a QoS 1 publish without waiting; an error when the channel
    /// is full or the event loop gone.
    pub fn try_publish(
        &self,
        topic: String,
        retain: bool,
        payload: Vec<u8>,
        props: &Props,
    ) -> Result<(), NotQueued> {
        match self {
            WireClient::V4(c) => c
                .try_publish(topic, QoS::AtLeastOnce, retain, payload)
                .map_err(|_| NotQueued),
            WireClient::V5(c) => {
                let qos = rumqttc::v5::mqttbytes::QoS::AtLeastOnce;
                if props == &Props::default() {
                    c.try_publish(topic, qos, retain, payload)
                        .map_err(|_| NotQueued)
                } else {
                    let p = rumqttc::v5::mqttbytes::v5::PublishProperties {
                        message_expiry_interval: props.expiry_s,
                        correlation_data: props.correlation.clone().map(Bytes::from),
                        ..Default::default()
                    };
                    c.try_publish_with_properties(topic, qos, retain, payload, p)
                        .map_err(|_| NotQueued)
                }
            }
        }
    }

    pub fn try_disconnect(&self) -> Result<(), NotQueued> {
        match self {
            WireClient::V4(c) => c.try_disconnect().map_err(|_| NotQueued),
            WireClient::V5(c) => c.try_disconnect().map_err(|_| NotQueued),
        }
    }
}

/// What the event loop reported, in the link's terms.
#[derive(Debug)]
pub enum WireEvent {
    Connected {
        session_present: bool,
    },
    /// A publish went out with this packet id.
    Written(u16),
    /// The broker acknowledged packet `pkid`; `refused`: MQTT 5 only, the
    /// broker's reason for not taking it (an access list, a quota).
    Acked {
        pkid: u16,
        refused: Option<String>,
    },
    /// A message on a subscribed topic.
    Message {
        topic: String,
        retain: bool,
        payload: Bytes,
        /// MQTT 5: the response topic and correlation data it names.
        respond_to: Option<(String, Vec<u8>)>,
    },
    /// Our DISCONNECT went out.
    Disconnected,
    Other,
}

/// A failed poll: the connection is down (or never came up).
#[derive(Debug)]
pub enum WireError {
    V4(rumqttc::ConnectionError),
    V5(rumqttc::v5::ConnectionError),
}

impl WireError {
    /// In words for the log, in the configuration's terms.
    pub fn describe(&self) -> String {
        match self {
            WireError::V4(e) => describe_v4(e),
            WireError::V5(e) => describe_v5(e),
        }
    }

    /// The size of the packet, when this is the client refusing one over
    /// its limit (3.1.1: an MQTT 5 broker does not send one).
    pub fn oversize(&self) -> Option<usize> {
        match self {
            WireError::V4(rumqttc::ConnectionError::MqttState(
                rumqttc::StateError::Deserialization(
                    rumqttc::mqttbytes::Error::PayloadSizeLimitExceeded(n),
                ),
            )) => Some(*n),
            WireError::V5(rumqttc::v5::ConnectionError::MqttState(
                rumqttc::v5::StateError::IncomingPacketTooLarge { pkt_size, .. },
            )) => Some(*pkt_size),
            WireError::V5(rumqttc::v5::ConnectionError::MqttState(
                rumqttc::v5::StateError::Deserialization(
                    rumqttc::v5::mqttbytes::Error::PayloadSizeLimitExceeded { pkt_size, .. },
                ),
            )) => Some(*pkt_size),
            _ => None,
        }
    }
}

fn describe_v4(e: &rumqttc::ConnectionError) -> String {
    use rumqttc::ConnectReturnCode as C;
    match e {
        rumqttc::ConnectionError::ConnectionRefused(code) => refused(match code {
            C::BadUserNamePassword => Refusal::Account,
            C::NotAuthorized => Refusal::NotAuthorised,
            C::BadClientId => Refusal::ClientId,
            C::RefusedProtocolVersion => Refusal::Protocol,
            C::ServiceUnavailable | C::Success => Refusal::Unavailable,
        }),
        e => super::tls::describe(e).unwrap_or_else(|| e.to_string()),
    }
}

fn describe_v5(e: &rumqttc::v5::ConnectionError) -> String {
    use rumqttc::v5::mqttbytes::v5::ConnectReturnCode as C;
    match e {
        rumqttc::v5::ConnectionError::ConnectionRefused(code) => refused(match code {
            C::BadUserNamePassword | C::BadAuthenticationMethod => Refusal::Account,
            C::NotAuthorized | C::Banned => Refusal::NotAuthorised,
            C::BadClientId | C::ClientIdentifierNotValid => Refusal::ClientId,
            C::RefusedProtocolVersion | C::UnsupportedProtocolVersion => Refusal::Protocol,
            _ => Refusal::Unavailable,
        }),
        e => super::tls::describe_v5(e).unwrap_or_else(|| e.to_string()),
    }
}

enum Refusal {
    Account,
    NotAuthorised,
    ClientId,
    Protocol,
    Unavailable,
}

fn refused(r: Refusal) -> String {
    match r {
        Refusal::Account => "the broker refused the connection: bad user name or password (mqtt.username and its password)",
        Refusal::NotAuthorised => "the broker refused the connection: not authorised (the broker's account and access control)",
        Refusal::ClientId => "the broker refused the connection: client id not accepted (mqtt.client_id)",
        Refusal::Protocol => "the broker refused the connection: it does not speak this MQTT version (mqtt.protocol)",
        Refusal::Unavailable => "the broker refused the connection: service unavailable",
    }
    .into()
}

/// The event loop of either version.
pub enum Wire {
    V4(Box<rumqttc::EventLoop>),
    V5(Box<rumqttc::v5::EventLoop>),
}

/// What [`Wire::new`] needs beyond the settings.
pub struct Connect<'a> {
    pub cfg: &'a MqttSettings,
    pub password: Option<String>,
    pub tls: Option<std::sync::Arc<rustls::ClientConfig>>,
    pub will_topic: &'a str,
    pub will_payload: Vec<u8>,
    /// The largest packet taken from the broker, and sent to it.
    pub max_incoming: usize,
    pub max_outgoing: usize,
    pub request_capacity: usize,
}

impl Wire {
    pub fn new(c: Connect<'_>) -> (WireClient, Wire) {
        let cfg = c.cfg;
        // Validated at load time: keep-alive ≥ 1 s and a non-empty client
        // id (rumqttc panics otherwise).
        let keep_alive = Duration::from_secs(cfg.keep_alive_s.max(1));
        let transport = c
            .tls
            .map(|t| Transport::tls_with_config(TlsConfiguration::Rustls(t)));
        match cfg.protocol {
            MqttProtocol::V311 => {
                let mut opts = MqttOptions::new(cfg.client_id.clone(), cfg.host.clone(), cfg.port);
                opts.set_keep_alive(keep_alive);
                opts.set_clean_session(false);
                if let (Some(cr), Some(p)) = (&cfg.credentials, c.password) {
                    opts.set_credentials(cr.username.clone(), p);
                }
                opts.set_max_packet_size(c.max_incoming, c.max_outgoing);
                if let Some(t) = transport {
                    opts.set_transport(t);
                }
                opts.set_last_will(LastWill::new(
                    c.will_topic,
                    c.will_payload,
                    QoS::AtLeastOnce,
                    true,
                ));
                let (client, ev) = rumqttc::AsyncClient::new(opts, c.request_capacity);
                (WireClient::V4(client), Wire::V4(Box::new(ev)))
            }
            MqttProtocol::V5 => {
                use rumqttc::v5::mqttbytes::v5::LastWill as Will5;
                let mut opts = rumqttc::v5::MqttOptions::new(
                    cfg.client_id.clone(),
                    cfg.host.clone(),
                    cfg.port,
                );
                opts.set_keep_alive(keep_alive);
                // Nothing of ours rests in the broker's session (the link
                // takes everything back at a disconnection, and `cmd` is
                // subscribed at most once): a clean start each time.
                opts.set_clean_start(true);
                if let (Some(cr), Some(p)) = (&cfg.credentials, c.password) {
                    opts.set_credentials(cr.username.clone(), p);
                }
                // The broker drops what is larger instead of sending it.
                opts.set_max_packet_size(Some(c.max_incoming as u32));
                if let Some(t) = transport {
                    opts.set_transport(t);
                }
                opts.set_last_will(Will5::new(
                    c.will_topic,
                    c.will_payload,
                    rumqttc::v5::mqttbytes::QoS::AtLeastOnce,
                    true,
                    None,
                ));
                let (client, ev) = rumqttc::v5::AsyncClient::new(opts, c.request_capacity);
                (WireClient::V5(client), Wire::V5(Box::new(ev)))
            }
        }
    }

    pub async fn poll(&mut self) -> Result<WireEvent, WireError> {
        match self {
            Wire::V4(ev) => {
                use rumqttc::{Event, Outgoing, Packet};
                Ok(match ev.poll().await.map_err(WireError::V4)? {
                    Event::Incoming(Packet::ConnAck(a)) => WireEvent::Connected {
                        session_present: a.session_present,
                    },
                    Event::Outgoing(Outgoing::Publish(pkid)) => WireEvent::Written(pkid),
                    Event::Incoming(Packet::PubAck(a)) => WireEvent::Acked {
                        pkid: a.pkid,
                        refused: None,
                    },
                    Event::Incoming(Packet::Publish(p)) => WireEvent::Message {
                        topic: p.topic,
                        retain: p.retain,
                        payload: p.payload,
                        respond_to: None,
                    },
                    Event::Outgoing(Outgoing::Disconnect) => WireEvent::Disconnected,
                    _ => WireEvent::Other,
                })
            }
            Wire::V5(ev) => {
                use rumqttc::v5::mqttbytes::v5::Packet;
                use rumqttc::v5::Event;
                use rumqttc::Outgoing;
                Ok(match ev.poll().await.map_err(WireError::V5)? {
                    Event::Incoming(Packet::ConnAck(a)) => WireEvent::Connected {
                        session_present: a.session_present,
                    },
                    Event::Outgoing(Outgoing::Publish(pkid)) => WireEvent::Written(pkid),
                    Event::Incoming(Packet::PubAck(a)) => WireEvent::Acked {
                        pkid: a.pkid,
                        refused: puback_refusal(&a),
                    },
                    Event::Incoming(Packet::Publish(p)) => {
                        let respond_to = p.properties.as_ref().and_then(|pr| {
                            let t = pr.response_topic.clone()?;
                            Some((
                                t,
                                pr.correlation_data
                                    .clone()
                                    .map_or_else(Vec::new, |b| b.to_vec()),
                            ))
                        });
                        WireEvent::Message {
                            topic: String::from_utf8_lossy(&p.topic).into_owned(),
                            retain: p.retain,
                            payload: p.payload,
                            respond_to,
                        }
                    }
                    Event::Outgoing(Outgoing::Disconnect) => WireEvent::Disconnected,
                    _ => WireEvent::Other,
                })
            }
        }
    }

    /// At a connection: the `cmd` subscription (at most once), then the
    /// retained `online`, ahead of anything the client still holds.
    pub fn connected(&mut self, cmd_topic: &str, status_topic: &str, online: Vec<u8>) {
        match self {
            Wire::V4(ev) => {
                use rumqttc::mqttbytes::v4::{Publish, Subscribe};
                use rumqttc::Request;
                // Persistent again after a fresh session.
                ev.mqtt_options.set_clean_session(false);
                let mut p = Publish::new(status_topic, QoS::AtLeastOnce, online);
                p.retain = true;
                ev.pending.push_front(Request::Publish(p));
                ev.pending.push_front(Request::Subscribe(Subscribe::new(
                    cmd_topic,
                    QoS::AtMostOnce,
                )));
            }
            Wire::V5(ev) => {
                use rumqttc::v5::mqttbytes::v5::{Filter, Publish, Subscribe};
                use rumqttc::v5::mqttbytes::QoS as Q5;
                use rumqttc::v5::Request;
                let mut p = Publish::new(status_topic, Q5::AtLeastOnce, online, None);
                p.retain = true;
                ev.pending.push_front(Request::Publish(p));
                ev.pending.push_front(Request::Subscribe(Subscribe::new(
                    Filter::new(cmd_topic, Q5::AtMostOnce),
                    None,
                )));
            }
        }
    }

    /// The next connection starts a fresh session (the broker forgets
    /// what it still held for the old one).
    pub fn fresh_session(&mut self) {
        if let Wire::V4(ev) = self {
            ev.mqtt_options.set_clean_session(true);
        }
    }

    /// The connection dropped: the events it had not yet reported, and the
    /// client emptied of everything of ours (see `flight`).
    pub fn take_back(&mut self) -> Vec<WireEvent> {
        match self {
            Wire::V4(ev) => {
                use rumqttc::{Event, Outgoing, Packet};
                let out = ev
                    .state
                    .events
                    .drain(..)
                    .map(|e| match e {
                        Event::Outgoing(Outgoing::Publish(pkid)) => WireEvent::Written(pkid),
                        Event::Incoming(Packet::PubAck(a)) => WireEvent::Acked {
                            pkid: a.pkid,
                            refused: None,
                        },
                        _ => WireEvent::Other,
                    })
                    .collect();
                // Requests still in the channel join the pending list,
                // which then goes: the subscription and `online` are made
                // afresh at the next connection, everything else is ours
                // to send again.
                ev.clean();
                ev.pending.clear();
                ev.state.collision = None;
                out
            }
            Wire::V5(ev) => {
                use rumqttc::v5::mqttbytes::v5::Packet;
                use rumqttc::v5::Event;
                use rumqttc::Outgoing;
                let out = ev
                    .state
                    .events
                    .drain(..)
                    .map(|e| match e {
                        Event::Outgoing(Outgoing::Publish(pkid)) => WireEvent::Written(pkid),
                        Event::Incoming(Packet::PubAck(a)) => WireEvent::Acked {
                            pkid: a.pkid,
                            refused: puback_refusal(&a),
                        },
                        _ => WireEvent::Other,
                    })
                    .collect();
                ev.clean();
                ev.pending.clear();
                ev.state.collision = None;
                out
            }
        }
    }
}

/// An MQTT 5 PUBACK's reason, when it says the broker did not take the
/// message (no subscriber is not a refusal).
fn puback_refusal(a: &rumqttc::v5::mqttbytes::v5::PubAck) -> Option<String> {
    use rumqttc::v5::mqttbytes::v5::PubAckReason as R;
    let why = match a.reason {
        R::Success | R::NoMatchingSubscribers => return None,
        R::NotAuthorized => "not authorised (the broker's access control)",
        R::TopicNameInvalid => "the topic name is not valid",
        R::QuotaExceeded => "a quota is exceeded",
        R::PayloadFormatInvalid => "the payload format is not valid",
        R::PacketIdentifierInUse => "the packet id is in use",
        R::UnspecifiedError | R::ImplementationSpecificError => "unspecified error",
    };
    let detail = a.properties.as_ref().and_then(|p| p.reason_string.clone());
    Some(match detail {
        Some(d) => format!("{why}: {d}"),
        None => why.to_string(),
    })
}
