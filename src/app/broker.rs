//! The embedded MQTT broker (rumqttd) for the demo and the tests. Behind
//! the `demo` feature: the production package leaves it out.

use std::collections::HashMap;
use std::net::SocketAddr;
use std::time::Duration;

use anyhow::{anyhow, Context};
use rumqttd::{ConnectionSettings, LinkType, Router, RouterConfig, Server, ServerSettings};

/// Starts a broker on 127.0.0.1:`port` on the current tokio runtime and
/// waits until it accepts connections. rumqttd cannot report a failed bind
/// other than by its task ending, so the port is tried first.
pub async fn start(port: u16) -> anyhow::Result<()> {
    let listen: SocketAddr = ([127, 0, 0, 1], port).into();
    // Fail clearly if the port is taken (another broker, an earlier demo).
    drop(
        std::net::TcpListener::bind(listen)
            .with_context(|| format!("cannot listen on {listen} for the embedded MQTT broker (is another broker running? try --broker-port or --no-broker)"))?,
    );
    let router = Router::new(
        0,
        RouterConfig {
            max_connections: 64,
            max_outgoing_packet_count: 200,
            max_segment_size: 4 * 1024 * 1024,
            max_segment_count: 4,
            custom_segment: None,
            initialized_filters: None,
            shared_subscriptions_strategy: Default::default(),
        },
    );
    let link = router.spawn();
    let settings = ServerSettings {
        name: "wallflux-embedded".into(),
        listen,
        tls: None,
        next_connection_delay_ms: 1,
        connections: ConnectionSettings {
            connection_timeout_ms: 10_000,
            max_payload_size: 256 * 1024,
            max_inflight_count: 200,
            auth: None::<HashMap<String, String>>,
            external_auth: None,
            dynamic_filters: true,
        },
    };
    let mut server = Server::new(settings, link, rumqttd::protocol::v4::V4);
    let task = tokio::spawn(async move { server.start(LinkType::Remote).await });
    for _ in 0..100 {
        if task.is_finished() {
            return match task.await {
                Ok(Err(e)) => Err(anyhow!("embedded MQTT broker failed to start: {e}")),
                _ => Err(anyhow!("embedded MQTT broker stopped at start-up")),
            };
        }
        if tokio::net::TcpStream::connect(listen).await.is_ok() {
            return Ok(());
        }
        tokio::time::sleep(Duration::from_millis(20)).await;
    }
    Err(anyhow!(
        "embedded MQTT broker did not accept connections on {listen}"
    ))
}
