//! `[[publish.mqtt]]`: the MQTT brokers the store is published to, checked into [`MqttBroker`]s.
//!
//! Everything a broker needs is settled here, at `check-config`: the URL, topic levels without MQTT's
//! wildcards, a readable password file and a CA file that holds certificates. The publisher (`publish`)
//! never sees a raw value. Nothing here connects to a broker.

use std::collections::HashMap;
use std::fmt;
use std::path::PathBuf;
use std::time::Duration;

use rustls::pki_types::CertificateDer;
use rustls::pki_types::pem::PemObject;
use serde::Deserialize;
use toml::Spanned;

use super::{Checker, split_host_port, valid_id};

/// `[publish]`
#[derive(Debug, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub(crate) struct RawPublish {
    /// `[[publish.mqtt]]` tables.
    #[serde(default)]
    pub mqtt: Vec<Spanned<RawMqtt>>,
}

/// `[[publish.mqtt]]`: one broker the readings, states and journal are published to.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub(crate) struct RawMqtt {
    /// `mqtt://host[:port]` (default port 1883) or `mqtts://host[:port]` (TLS, default port 8883).
    pub url: Option<Spanned<String>>,
    /// The MQTT client identifier: 1–23 letters and digits (what every broker must accept).
    pub client_id: Option<Spanned<String>>,
    /// The first topic levels, e.g. `soil-labs` or `site/geotech` (no `+`, `#`, no leading `$`).
    pub topic_prefix: Option<Spanned<String>>,
    /// This lab's short name: one topic level (letters, digits, `-`, `_`).
    pub lab: Option<Spanned<String>>,
    /// User name for the broker (optional).
    pub username: Option<Spanned<String>>,
    /// A file holding the password (first line; needs `username`).
    pub password_file: Option<Spanned<String>>,
    /// PEM file of the certificate authorities trusted for `mqtts://` (required there, refused for `mqtt://`).
    pub ca_file: Option<Spanned<String>>,
    /// QoS of every publication: 0 or 1 (default 1).
    pub qos: Option<Spanned<i64>>,
    /// Publishing further behind the store than this raises the `publish-lag` alarm, s (10..=86400;
    /// default 300).
    pub lag_alarm_s: Option<Spanned<i64>>,
    /// MQTT keep-alive, s (5..=600; default 30).
    pub keep_alive_s: Option<Spanned<i64>>,
    /// Where this lab's own dashboard is reached from elsewhere (http:// or https://), for the fleet board.
    pub dashboard_url: Option<Spanned<String>>,
}

/// `[publish]`: where the store is published.
#[derive(Clone, Debug, Default, PartialEq)]
pub struct PublishConfig {
    /// `[[publish.mqtt]]`, in file order; each (url, client_id) once.
    pub mqtt: Vec<MqttBroker>,
}

/// A password read from its file: never printed.
#[derive(Clone, PartialEq, Eq)]
pub struct Secret(pub String);

impl fmt::Debug for Secret {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str("Secret(…)")
    }
}

/// A checked `mqtt://` or `mqtts://` broker address.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct MqttUrl {
    /// The URL as written.
    pub text: String,
    /// `mqtts://`.
    pub tls: bool,
    /// Host name or IP (IPv6 without brackets).
    pub host: String,
    /// TCP port.
    pub port: u16,
}

/// The ports IANA registered for MQTT, without and with TLS (MQTT 3.1.1 §4.2, MQTT 5.0 §4.2).
const MQTT_PORT: u16 = 1883;
const MQTTS_PORT: u16 = 8883;

impl MqttUrl {
    /// Parses `mqtt://host[:port]` or `mqtts://host[:port]`; the error says what is allowed.
    pub fn parse(text: &str) -> Result<MqttUrl, String> {
        let (tls, rest) = if let Some(rest) = text.strip_prefix("mqtts://") {
            (true, rest)
        } else if let Some(rest) = text.strip_prefix("mqtt://") {
            (false, rest)
        } else {
            return Err(format!("`{text}` is not an MQTT URL (allowed: mqtt://host[:port] or mqtts://host[:port])"));
        };
        let authority = rest.strip_suffix('/').unwrap_or(rest);
        if authority.contains(['/', '?', '#']) {
            return Err(format!("`{text}` has a path or query (allowed: mqtt://host[:port] only)"));
        }
        if authority.contains('@') {
            return Err(format!(
                "`{text}` holds credentials (allowed: mqtt://host[:port]; put them in username and password_file)"
            ));
        }
        let (host, port) = split_host_port(authority)
            .ok_or_else(|| format!("`{text}` has no valid host and port (allowed: mqtt://host[:port])"))?;
        let host = host.trim_start_matches('[').trim_end_matches(']');
        if host.is_empty() || host.contains(char::is_whitespace) {
            return Err(format!("`{text}` has no host"));
        }
        let port = match port {
            None => {
                if tls {
                    MQTTS_PORT
                } else {
                    MQTT_PORT
                }
            }
            Some(p) => match p.parse::<u16>() {
                Ok(n) if n > 0 => n,
                _ => return Err(format!("`{p}` is not a port (allowed: 1 to 65535)")),
            },
        };
        Ok(MqttUrl { text: text.to_string(), tls, host: host.to_string(), port })
    }
}

/// One checked `[[publish.mqtt]]`.
#[derive(Clone, Debug, PartialEq)]
pub struct MqttBroker {
    /// The broker.
    pub url: MqttUrl,
    /// MQTT client identifier.
    pub client_id: String,
    /// Topic levels before the lab, without a trailing `/`.
    pub topic_prefix: String,
    /// The lab's topic level (empty for a `[[fleet.broker]]`, which reads every lab).
    pub lab: String,
    /// User name and password, if the broker wants them.
    pub credentials: Option<(String, Option<Secret>)>,
    /// Trusted certificate authorities (`mqtts://` only).
    pub ca: Vec<CertificateDer<'static>>,
    /// 0 or 1.
    pub qos: u8,
    /// Lag behind the store that raises the `publish-lag` alarm.
    pub lag_alarm: Duration,
    /// MQTT keep-alive.
    pub keep_alive: Duration,
    /// This lab's dashboard, as reached from elsewhere.
    pub dashboard_url: Option<String>,
}

impl MqttBroker {
    /// The key of this broker's cursors in the store: the URL and the client id, as configured.
    pub fn cursor_key(&self) -> String {
        format!("{} {}", self.url.text, self.client_id)
    }

    /// `PREFIX/LAB`, the topic every publication of this lab starts with.
    pub fn lab_topic(&self) -> String {
        format!("{}/{}", self.topic_prefix, self.lab)
    }
}

/// Checks a topic filter's levels for publishing: MQTT 3.1.1 §4.7.1 (no `+` or `#` in a topic name),
/// §4.7.2 (a topic starting with `$` is the broker's), §1.5.3 (no U+0000); and no empty level, which some
/// brokers' ACLs and most consumers trip over (common practice).
pub fn check_topic_levels(text: &str) -> Result<(), String> {
    if text.is_empty() {
        return Err("must not be empty".into());
    }
    if text.contains(['+', '#']) {
        return Err(format!(
            "`{text}` holds an MQTT wildcard (+ or #): a prefix names one place (the fleet board adds its own `+`)"
        ));
    }
    if text.starts_with('$') {
        return Err(format!("`{text}` starts with `$`: such topics belong to the broker (MQTT 3.1.1 §4.7.2)"));
    }
    if text.contains('\0') || text.chars().any(char::is_control) {
        return Err(format!("`{}` holds a control character", text.escape_debug()));
    }
    if text.split('/').any(str::is_empty) {
        return Err(format!("`{text}` has an empty level (a leading, trailing or doubled `/`)"));
    }
    if text.len() > 200 {
        return Err(format!("{} bytes is too long (allowed: up to 200)", text.len()));
    }
    Ok(())
}

fn read_file(path: &str) -> Result<Vec<u8>, String> {
    std::fs::read(PathBuf::from(path)).map_err(|e| format!("cannot read `{path}`: {e}"))
}

/// `[[publish.mqtt]]`: each table whole, each (url, client_id) once.
pub(super) fn check_publish(c: &mut Checker<'_>, publish: &RawPublish) -> PublishConfig {
    let mut out = Vec::new();
    let mut seen: HashMap<(String, String), usize> = HashMap::new();
    for (i, table) in publish.mqtt.iter().enumerate() {
        if let Some(broker) = check_broker(c, table, &format!("publish.mqtt[{i}]"), BrokerUse::Publish) {
            if let Some(first) = seen.insert((broker.url.text.clone(), broker.client_id.clone()), i) {
                let span = table.get_ref().client_id.as_ref().map_or(table.span(), |v| v.span());
                c.at(
                    span,
                    format!("publish.mqtt[{i}].client_id"),
                    format!("the same url and client_id as publish.mqtt[{first}] (a broker drops one of two clients with one id, MQTT 3.1.1 §3.1.4)"),
                );
            } else {
                out.push(broker);
            }
        }
    }
    PublishConfig { mqtt: out }
}

/// What a broker table is for: publishing this lab, or the fleet board subscribing to many.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub(super) enum BrokerUse {
    /// `[[publish.mqtt]]`: needs `lab`; may set `qos`, `lag_alarm_s`, `dashboard_url`.
    Publish,
    /// `[[fleet.broker]]`: subscribes under `topic_prefix`; the publishing-only fields are refused.
    Subscribe,
}

/// One broker table, checked; `None` when it has a problem (each recorded with `prefix.field`).
pub(super) fn check_broker(
    c: &mut Checker<'_>,
    table: &Spanned<RawMqtt>,
    prefix: &str,
    purpose: BrokerUse,
) -> Option<MqttBroker> {
    {
        let field = |name: &str| format!("{prefix}.{name}");
        let raw = table.get_ref();
        let before = c.problems.len();
        if purpose == BrokerUse::Subscribe {
            let publishing_only = [
                ("lab", raw.lab.as_ref().map(|v| v.span())),
                ("qos", raw.qos.as_ref().map(|v| v.span())),
                ("lag_alarm_s", raw.lag_alarm_s.as_ref().map(|v| v.span())),
                ("dashboard_url", raw.dashboard_url.as_ref().map(|v| v.span())),
            ];
            for (name, span) in publishing_only {
                if let Some(span) = span {
                    c.at(
                        span,
                        field(name),
                        "only for [[publish.mqtt]]: the fleet board reads every lab under topic_prefix",
                    );
                }
            }
        }
        let url = match &raw.url {
            None => {
                c.at(table.span(), field("url"), "missing `url` (allowed: mqtt://host[:port] or mqtts://host[:port])");
                None
            }
            Some(v) => MqttUrl::parse(v.get_ref()).map_err(|m| c.at(v.span(), field("url"), m)).ok(),
        };
        let client_id = match &raw.client_id {
            None => {
                c.at(table.span(), field("client_id"), "missing `client_id` (allowed: 1–23 letters and digits)");
                String::new()
            }
            // MQTT 3.1.1 §3.1.3.1: a server must accept 1–23 bytes of 0-9a-zA-Z; others it may refuse.
            Some(v) => {
                let id = v.get_ref();
                if id.is_empty() || id.len() > 23 || !id.chars().all(|ch| ch.is_ascii_alphanumeric()) {
                    c.at(
                        v.span(),
                        field("client_id"),
                        format!("`{id}` is not a client id every broker accepts (allowed: 1–23 letters and digits, MQTT 3.1.1 §3.1.3.1)"),
                    );
                }
                id.clone()
            }
        };
        let topic_prefix = match &raw.topic_prefix {
            None => {
                c.at(table.span(), field("topic_prefix"), "missing `topic_prefix` (e.g. `soil-labs`)");
                String::new()
            }
            Some(v) => {
                if let Err(m) = check_topic_levels(v.get_ref()) {
                    c.at(v.span(), field("topic_prefix"), m);
                }
                v.get_ref().clone()
            }
        };
        let lab = match &raw.lab {
            None if purpose == BrokerUse::Subscribe => String::new(),
            None => {
                c.at(table.span(), field("lab"), "missing `lab` (allowed: 1–32 letters, digits, `-`, `_`)");
                String::new()
            }
            Some(v) => {
                if !valid_id(v.get_ref()) {
                    c.at(
                        v.span(),
                        field("lab"),
                        format!("`{}` is not a lab name (allowed: 1–32 letters, digits, `-`, `_`)", v.get_ref()),
                    );
                }
                v.get_ref().clone()
            }
        };
        let password = raw.password_file.as_ref().and_then(|v| match read_file(v.get_ref()) {
            Err(m) => {
                c.at(v.span(), field("password_file"), m);
                None
            }
            Ok(bytes) => match String::from_utf8(bytes) {
                Err(_) => {
                    c.at(v.span(), field("password_file"), format!("`{}` is not UTF-8 text", v.get_ref()));
                    None
                }
                Ok(text) => {
                    let first = text.lines().next().unwrap_or("").to_string();
                    if first.is_empty() {
                        c.at(v.span(), field("password_file"), format!("`{}` is empty", v.get_ref()));
                    }
                    Some(Secret(first))
                }
            },
        });
        let credentials = match (&raw.username, password) {
            (Some(user), password) => {
                if user.get_ref().is_empty() {
                    c.at(user.span(), field("username"), "must not be empty");
                }
                Some((user.get_ref().clone(), password))
            }
            (None, Some(_)) => {
                let span = raw.password_file.as_ref().map_or(table.span(), |v| v.span());
                c.at(span, field("password_file"), "a password needs `username` too (MQTT 3.1.1 §3.1.2.9)");
                None
            }
            (None, None) => None,
        };
        let tls = url.as_ref().is_some_and(|u| u.tls);
        let ca = match (&raw.ca_file, tls) {
            (None, true) => {
                let span = raw.url.as_ref().map_or(table.span(), |v| v.span());
                c.at(span, field("ca_file"), "mqtts:// needs `ca_file`: the PEM file of the authorities to trust");
                Vec::new()
            }
            (Some(v), false) => {
                c.at(v.span(), field("ca_file"), "only for mqtts:// (this url has no TLS)");
                Vec::new()
            }
            (None, false) => Vec::new(),
            (Some(v), true) => match read_file(v.get_ref()) {
                Err(m) => {
                    c.at(v.span(), field("ca_file"), m);
                    Vec::new()
                }
                Ok(bytes) => {
                    let certs: Result<Vec<_>, _> = CertificateDer::pem_slice_iter(&bytes).collect();
                    match certs {
                        Ok(certs) if !certs.is_empty() => certs,
                        Ok(_) => {
                            c.at(v.span(), field("ca_file"), format!("`{}` holds no PEM certificate", v.get_ref()));
                            Vec::new()
                        }
                        Err(e) => {
                            c.at(v.span(), field("ca_file"), format!("`{}` is not PEM: {e}", v.get_ref()));
                            Vec::new()
                        }
                    }
                }
            },
        };
        let qos = match &raw.qos {
            None => 1,
            // QoS 2's exactly-once is not needed: every payload carries a sequence number to drop repeats.
            Some(v) => c.int::<u8>(v, &field("qos"), 0..2, "allowed 0 or 1").unwrap_or(1),
        };
        let lag_alarm = match &raw.lag_alarm_s {
            None => Duration::from_secs(300),
            Some(v) => Duration::from_secs(
                c.int::<u64>(v, &field("lag_alarm_s"), 10..86_401, "allowed 10 to 86400 s").unwrap_or(300),
            ),
        };
        let keep_alive = match &raw.keep_alive_s {
            None => Duration::from_secs(30),
            Some(v) => {
                Duration::from_secs(c.int::<u64>(v, &field("keep_alive_s"), 5..601, "allowed 5 to 600 s").unwrap_or(30))
            }
        };
        let dashboard_url = raw.dashboard_url.as_ref().and_then(|v| {
            let text = v.get_ref();
            let rest = text.strip_prefix("http://").or_else(|| text.strip_prefix("https://"));
            match rest {
                Some(r) if !r.is_empty() && !r.starts_with('/') && !r.contains(char::is_whitespace) => {
                    Some(text.clone())
                }
                _ => {
                    c.at(
                        v.span(),
                        field("dashboard_url"),
                        format!("`{text}` is not a web address (allowed: http://host[:port][/path] or https://…)"),
                    );
                    None
                }
            }
        });
        if c.problems.len() == before
            && let Some(url) = url
        {
            return Some(MqttBroker {
                url,
                client_id,
                topic_prefix,
                lab,
                credentials,
                ca,
                qos,
                lag_alarm,
                keep_alive,
                dashboard_url,
            });
        }
        None
    }
}
