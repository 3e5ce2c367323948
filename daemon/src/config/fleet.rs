//! `[fleet]`: the brokers and topic prefixes `oedolog fleet` reads every lab's retained status and frame
//! states from, checked into a [`FleetConfig`]. A broker table is checked as `[[publish.mqtt]]` is (URL, client
//! id, prefix without wildcards, password and CA files), less the fields only a publisher has. Nothing here
//! connects to a broker.

use std::collections::HashMap;
use std::time::Duration;

use serde::Deserialize;
use toml::Spanned;

use super::Checker;
use super::publish::{BrokerUse, MqttBroker, RawMqtt, check_broker};

/// `[fleet]`
#[derive(Debug, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub(crate) struct RawFleet {
    /// `[[fleet.broker]]`: url, client_id, topic_prefix, optional username / password_file, ca_file for
    /// `mqtts://`, keep_alive_s.
    #[serde(default)]
    pub broker: Vec<Spanned<RawMqtt>>,
    /// A lab that sent no frame state for this long is shown as quiet, s (20..=86400; default 300).
    pub quiet_after_s: Option<Spanned<i64>>,
}

/// `[fleet]`, checked.
#[derive(Clone, Debug, PartialEq)]
pub struct FleetConfig {
    /// Brokers, in file order; each (url, client_id) once. Their `lab` is empty.
    pub brokers: Vec<MqttBroker>,
    /// No state for this long: the lab is quiet.
    pub quiet_after: Duration,
}

/// The default `quiet_after_s`: thirty of the publisher's 10 s state repeats (README, "Publishing to MQTT").
const QUIET_AFTER_S: u64 = 300;

/// `[fleet]` of a fleet file: at least one broker.
pub(super) fn check_fleet(c: &mut Checker<'_>, fleet: &Spanned<RawFleet>) -> FleetConfig {
    let raw = fleet.get_ref();
    if raw.broker.is_empty() {
        c.at(fleet.span(), "fleet.broker", "no [[fleet.broker]]: the board needs at least one broker to read");
    }
    let mut brokers = Vec::new();
    let mut seen: HashMap<(String, String), usize> = HashMap::new();
    for (i, table) in raw.broker.iter().enumerate() {
        let prefix = format!("fleet.broker[{i}]");
        let Some(b) = check_broker(c, table, &prefix, BrokerUse::Subscribe) else { continue };
        if let Some(first) = seen.insert((b.url.text.clone(), b.client_id.clone()), i) {
            let span = table.get_ref().client_id.as_ref().map_or(table.span(), |v| v.span());
            c.at(
                span,
                format!("{prefix}.client_id"),
                format!("the same url and client_id as fleet.broker[{first}] (a broker drops one of two clients with one id, MQTT 3.1.1 §3.1.4)"),
            );
        } else {
            brokers.push(b);
        }
    }
    let quiet_after = match &raw.quiet_after_s {
        None => Duration::from_secs(QUIET_AFTER_S),
        Some(v) => Duration::from_secs(
            c.int::<u64>(v, "fleet.quiet_after_s", 20..86_401, "allowed 20 to 86400 s: above the 10 s state repeat")
                .unwrap_or(QUIET_AFTER_S),
        ),
    };
    FleetConfig { brokers, quiet_after }
}
