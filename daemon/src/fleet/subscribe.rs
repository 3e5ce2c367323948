//! One task per `[[fleet.broker]]`: connect, subscribe to `PREFIX/+/status` and `PREFIX/+/+/state`, hand
//! every message to the [`Fleet`]. A clean session each time; the broker's retained messages (MQTT 3.1.1
//! §3.3.1.3) give the latest of every lab on each subscription. Subscribes only, never publishes.

use std::sync::{Arc, Mutex};
use std::time::Duration;

use rumqttc::{AsyncClient, Event, MqttOptions, Packet, QoS};
use tokio::task::JoinHandle;

use super::{Fleet, Ignored, MAX_PAYLOAD_BYTES};
use crate::clock::Clock;
use crate::config::MqttBroker;

/// Reconnection waits: doubling from the first to the last.
const BACKOFF_FIRST: Duration = Duration::from_secs(1);
const BACKOFF_LAST: Duration = Duration::from_secs(30);

/// The two filters read under `prefix` (`+` is one level, MQTT 3.1.1 §4.7.1.3).
pub fn filters(prefix: &str) -> [String; 2] {
    [format!("{prefix}/+/status"), format!("{prefix}/+/+/state")]
}

/// Starts one subscriber per broker.
pub fn start(brokers: &[MqttBroker], fleet: Arc<Mutex<Fleet>>, clock: Arc<dyn Clock>) -> Vec<JoinHandle<()>> {
    brokers.iter().map(|b| tokio::spawn(run(b.clone(), fleet.clone(), clock.clone()))).collect()
}

fn options(b: &MqttBroker) -> Result<MqttOptions, String> {
    let mut options = MqttOptions::new(b.client_id.clone(), b.url.host.clone(), b.url.port);
    options.set_keep_alive(b.keep_alive);
    options.set_clean_session(true);
    // Larger packets than a payload may be are refused by the client itself.
    options.set_max_packet_size(MAX_PAYLOAD_BYTES + 1024, 64 * 1024);
    if let Some((user, password)) = &b.credentials {
        options.set_credentials(user.clone(), password.as_ref().map_or(String::new(), |p| p.0.clone()));
    }
    if b.url.tls {
        options.set_transport(crate::publish::tls_transport(&b.ca)?);
    }
    Ok(options)
}

async fn run(broker: MqttBroker, fleet: Arc<Mutex<Fleet>>, clock: Arc<dyn Clock>) {
    let options = match options(&broker) {
        Ok(o) => o,
        Err(e) => {
            tracing::error!("fleet: {}: cannot set up TLS ({e}); this broker is not read", broker.url.text);
            return;
        }
    };
    let (client, mut events) = AsyncClient::new(options, 16);
    let mut backoff = BACKOFF_FIRST;
    let link = |up: bool| {
        fleet.lock().expect("the fleet board").broker_link(&broker.url.text, &broker.topic_prefix, up, clock.now_us());
    };
    link(false);
    loop {
        match events.poll().await {
            Ok(Event::Incoming(Packet::SubAck(_))) => link(true),
            Ok(Event::Incoming(Packet::ConnAck(_))) => {
                backoff = BACKOFF_FIRST;
                tracing::info!("fleet: connected to {}, reading {}/…", broker.url.text, broker.topic_prefix);
                for filter in filters(&broker.topic_prefix) {
                    if let Err(e) = client.try_subscribe(filter, QoS::AtLeastOnce) {
                        tracing::warn!("fleet: {}: subscribe: {e}", broker.url.text);
                    }
                }
            }
            Ok(Event::Incoming(Packet::Publish(p))) => {
                let result = fleet.lock().expect("the fleet board").accept(
                    &broker.topic_prefix,
                    &p.topic,
                    &p.payload,
                    clock.now_us(),
                );
                match result {
                    Ok(()) => {}
                    Err(Ignored::Malformed(why)) => {
                        tracing::debug!("fleet: ignored a malformed payload on {}: {why}", p.topic.escape_debug());
                    }
                    Err(other) => tracing::debug!("fleet: ignored {} ({other:?})", p.topic.escape_debug()),
                }
            }
            Ok(_) => {}
            Err(e) => {
                link(false);
                tracing::warn!("fleet: {}: {e}; again in {} s", broker.url.text, backoff.as_secs());
                tokio::time::sleep(backoff).await;
                backoff = (backoff * 2).min(BACKOFF_LAST);
            }
        }
    }
}
