//! Configuration: the TOML file, checked once at the boundary and turned into a runtime value.
//!
//! Stage one ([`raw`]) is serde with `deny_unknown_fields`; stage two ([`Config::parse`]) checks every value
//! against what is allowed and collects *all* problems, each with its line, column and field, so a
//! technician can fix a file in one pass. Nothing invalid gets past this module: the rest of the daemon
//! trusts a [`Config`]. A commented sample lives in `daemon/oedolog.sample.toml`.

mod fleet;
mod publish;
mod raw;

use std::collections::{HashMap, HashSet};
use std::fmt;
use std::net::SocketAddr;
use std::ops::Range;
use std::path::PathBuf;
use std::time::Duration;

use oedolog_core::diagnostics::{field_at, line_column};
use oedolog_protocol::UnitId;
use oedolog_protocol::gauge::LengthUnit;
use oedolog_protocol::registers::RegisterMap;
use oedolog_protocol::rtu::silent_interval;
use toml::Spanned;

use crate::store::EventKind;

pub use fleet::FleetConfig;
pub use publish::{MqttBroker, MqttUrl, PublishConfig, Secret, check_topic_levels};
use raw::{RawBus, RawBusKind, RawCalibration, RawChannel, RawConfig, RawDeflection, RawFrame};

/// Baud rates a serial line may use.
pub const BAUD_RATES: [u32; 8] = [1200, 2400, 4800, 9600, 19_200, 38_400, 57_600, 115_200];
/// Default HTTP listen address: loopback only.
pub const DEFAULT_LISTEN: &str = "127.0.0.1:8321";

/// One problem in a configuration file.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct ConfigProblem {
    /// 1-based line (0 when the file as a whole is meant).
    pub line: usize,
    /// 1-based column.
    pub column: usize,
    /// The field, as a path: `frame[2].unit`, `bus "line-a".baud`.
    pub field: String,
    /// What is wrong and what is allowed.
    pub message: String,
}

impl fmt::Display for ConfigProblem {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "line {}, column {}: {}: {}", self.line, self.column, self.field, self.message)
    }
}

/// Every problem found in a file.
#[derive(Clone, Debug, PartialEq, Eq, thiserror::Error)]
pub struct ConfigError {
    /// In file order.
    pub problems: Vec<ConfigProblem>,
}

impl fmt::Display for ConfigError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        for (i, problem) in self.problems.iter().enumerate() {
            if i > 0 {
                writeln!(f)?;
            }
            write!(f, "{problem}")?;
        }
        Ok(())
    }
}

/// The checked configuration.
#[derive(Clone, Debug, PartialEq)]
pub struct Config {
    /// Where readings go (absent in a file meant only for the demo).
    pub store: Option<StoreConfig>,
    /// The HTTP server.
    pub http: HttpConfig,
    /// Logging.
    pub log: LogConfig,
    /// Buses, in file order.
    pub buses: Vec<Bus>,
    /// Frames, in file order.
    pub frames: Vec<Frame>,
    /// Notifications.
    pub notify: NotifyConfig,
    /// Brokers the store is published to (`[[publish.mqtt]]`).
    pub publish: PublishConfig,
    /// The fleet board's brokers (`[fleet]`; only in a file for `oedolog fleet`).
    pub fleet: Option<FleetConfig>,
    /// Alarm thresholds (`[alarms]`).
    pub alarms: oedolog_core::alarms::AlarmRules,
    /// The units the dashboard starts in (`[display]`); storage and the API stay SI.
    pub display: oedolog_core::units::DisplayUnits,
}

/// `[store]`
#[derive(Clone, Debug, PartialEq)]
pub struct StoreConfig {
    /// The SQLite file.
    pub path: PathBuf,
    /// Longest wait before readings are committed (the most a power cut can lose).
    pub flush: Duration,
    /// Period of WAL checkpoints.
    pub checkpoint: Duration,
}

/// `[http]`
#[derive(Clone, Debug, PartialEq)]
pub struct HttpConfig {
    /// Listen address.
    pub listen: SocketAddr,
    /// Users; when any is configured every request must name one.
    pub users: Vec<User>,
    /// `public_origins`: where a reverse proxy serves the daemon; requests from these origins and with
    /// their hosts in `Host` are accepted besides the listen address's own.
    pub public_origins: Vec<PublicOrigin>,
}

/// One of `[http] public_origins`: `scheme://host[:port]`, lower-cased, the port filled in from the scheme.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct PublicOrigin {
    /// `http` or `https`.
    pub scheme: String,
    /// Name or IP address; an IPv6 address keeps its brackets.
    pub host: String,
    /// Given or the scheme's default (80, 443).
    pub port: u16,
}

impl PublicOrigin {
    /// Parses an origin as a browser sends it in `Origin`: a scheme, a host, an optional port, no path.
    pub fn parse(text: &str) -> Result<PublicOrigin, String> {
        let lower = text.trim().to_ascii_lowercase();
        let (scheme, rest) = lower.split_once("://").ok_or("no scheme (allowed: http:// or https://)")?;
        let default_port = match scheme {
            "http" => 80,
            "https" => 443,
            other => return Err(format!("scheme `{other}` (allowed: http or https)")),
        };
        let authority = rest.strip_suffix('/').unwrap_or(rest);
        if authority.contains(['/', '?', '#', '@']) {
            return Err("has a path, query or user (allowed: scheme://host[:port] only)".into());
        }
        let (host, port) =
            split_host_port(authority).ok_or("no valid host (allowed: a name, an IPv4 address or [IPv6])")?;
        let port = match port {
            None => default_port,
            Some(p) => p.parse::<u16>().ok().filter(|&p| p > 0).ok_or(format!("port `{p}` (allowed: 1 to 65535)"))?,
        };
        Ok(PublicOrigin { scheme: scheme.into(), host: host.into(), port })
    }
}

impl fmt::Display for PublicOrigin {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "{}://{}", self.scheme, self.host)?;
        if (self.scheme == "http" && self.port != 80) || (self.scheme == "https" && self.port != 443) {
            write!(f, ":{}", self.port)?;
        }
        Ok(())
    }
}

/// `host[:port]` into a host (a name of letters, digits, `-`, `.`; or an IPv6 address in brackets) and
/// the port's text; `None` when the host is empty or malformed.
pub fn split_host_port(authority: &str) -> Option<(&str, Option<&str>)> {
    let (host, port) = if authority.starts_with('[') {
        let end = authority.find(']')?;
        let (host, rest) = authority.split_at(end + 1);
        host[1..end].parse::<std::net::Ipv6Addr>().ok()?;
        match rest {
            "" => (host, None),
            _ => (host, Some(rest.strip_prefix(':')?)),
        }
    } else {
        match authority.split_once(':') {
            Some((h, p)) => (h, Some(p)),
            None => (authority, None),
        }
    };
    let name_ok = host.starts_with('[')
        || (!host.is_empty() && host.bytes().all(|b| b.is_ascii_alphanumeric() || b == b'-' || b == b'.'));
    if !name_ok || port.is_some_and(|p| p.is_empty() || !p.bytes().all(|b| b.is_ascii_digit())) {
        return None;
    }
    Some((host, port))
}

/// What a user may do; each role may do all the one before it may (`viewer` < `operator` < `engineer`).
#[derive(Clone, Copy, Debug, PartialEq, Eq, PartialOrd, Ord, serde::Serialize)]
#[serde(rename_all = "lowercase")]
pub enum Role {
    /// Reads everything, changes nothing.
    Viewer,
    /// May start tests, arm load steps, add notes.
    Operator,
    /// May also adjust a reduction's constructions and approve a test.
    Engineer,
}

/// One `[[http.user]]`.
#[derive(Clone, PartialEq, Eq)]
pub struct User {
    /// Login name, written in the journal for the user's actions.
    pub name: String,
    /// What the user may do.
    pub role: Role,
    /// The secret (never printed: `Debug` hides it).
    pub token: String,
}

impl fmt::Debug for User {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.debug_struct("User").field("name", &self.name).field("role", &self.role).field("token", &"…").finish()
    }
}

/// Shortest token accepted: 16 characters (about 95 bits from a random base64 string).
pub const MIN_TOKEN_CHARS: usize = 16;

/// `[log]`
#[derive(Clone, Debug, PartialEq)]
pub struct LogConfig {
    /// Folder of the rotating log file, if any.
    pub dir: Option<PathBuf>,
    /// Files kept.
    pub keep: usize,
    /// tracing filter.
    pub level: String,
}

/// A bus: one task polls every frame on it, one request at a time.
#[derive(Clone, Debug, PartialEq)]
pub struct Bus {
    /// Its id.
    pub id: String,
    /// What it is.
    pub kind: BusKind,
}

/// Bus kinds.
#[derive(Clone, Debug, PartialEq)]
pub enum BusKind {
    /// Modbus RTU on a serial line.
    Rtu(SerialLine),
    /// Modbus TCP.
    Tcp(TcpLink),
    /// A gauge printing one reading per line.
    LineGauge(LineGauge),
}

/// Serial settings and timing of an RTU line.
#[derive(Clone, Debug, PartialEq)]
pub struct SerialLine {
    /// Device path.
    pub device: String,
    /// Baud rate.
    pub baud: u32,
    /// Parity.
    pub parity: Parity,
    /// Stop bits, 1 or 2.
    pub stop_bits: u8,
    /// Reply deadline.
    pub timeout: Duration,
    /// Silence kept before each request.
    pub gap: Duration,
    /// Retries after a failed request.
    pub retries: u32,
}

/// Parity of a serial line.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Parity {
    /// No parity bit.
    None,
    /// Even parity.
    Even,
    /// Odd parity.
    Odd,
}

/// A Modbus TCP link.
#[derive(Clone, Debug, PartialEq)]
pub struct TcpLink {
    /// host:port.
    pub address: String,
    /// Reply deadline.
    pub timeout: Duration,
    /// Retries after a failed request.
    pub retries: u32,
}

/// A line-output gauge.
#[derive(Clone, Debug, PartialEq)]
pub struct LineGauge {
    /// Device path.
    pub device: String,
    /// Baud rate.
    pub baud: u32,
    /// Parity.
    pub parity: Parity,
    /// Bytes that ask for a reading; `None` for a gauge that prints on its own.
    pub request: Option<Vec<u8>>,
    /// Unit of readings without a suffix.
    pub unit: LengthUnit,
    /// How long to wait for a line before counting a timeout.
    pub timeout: Duration,
}

/// How a frame puts load on the specimen.
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum Loading {
    /// Weights on a hanger, through a lever: oedolog never commands its load.
    DeadWeight {
        /// Force on the specimen per unit of weight on the hanger.
        lever_ratio: f64,
    },
    /// Air pressure.
    Pneumatic,
    /// A motor or screw.
    Motor,
}

/// A loading frame.
#[derive(Clone, Debug, PartialEq)]
pub struct Frame {
    /// Short id.
    pub id: String,
    /// Name on screens.
    pub name: String,
    /// Index into [`Config::buses`].
    pub bus: usize,
    /// Modbus unit id (line gauges: 0, unused).
    pub unit: UnitId,
    /// Loading system.
    pub loading: Loading,
    /// Inside area of the specimen ring, mm².
    pub ring_area_mm2: f64,
    /// Displacement gauge, mm (compression positive).
    pub displacement: Channel,
    /// Load cell, kN.
    pub load: Option<Channel>,
    /// Temperature, °C.
    pub temperature: Option<Channel>,
    /// Apparatus deflection calibration.
    pub deflection: Option<DeflectionTable>,
    /// When to poll.
    pub poll: PollSchedule,
}

/// Poll periods of a frame.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct PollSchedule {
    /// Steady period.
    pub steady: Duration,
    /// Period just after a load change (the early readings of the log-time construction).
    pub fast: Duration,
    /// How long the fast period lasts.
    pub fast_window: Duration,
}

/// A measured channel of a frame.
#[derive(Clone, Debug, PartialEq)]
pub struct Channel {
    /// Where it lives in the device (`None` on a line gauge).
    pub register: Option<RegisterMap>,
    /// Raw → engineering unit.
    pub calibration: Calibration,
    /// Valid engineering values.
    pub range: Range<f64>,
}

/// Raw → engineering value.
#[derive(Clone, Debug, PartialEq)]
pub enum Calibration {
    /// value = gain × raw + offset.
    Linear {
        /// Gain.
        gain: f64,
        /// Offset.
        offset: f64,
    },
    /// value = c0 + c1·raw + c2·raw² + …
    Polynomial(Vec<f64>),
}

impl Calibration {
    /// The engineering value for a raw number.
    pub fn apply(&self, raw: f64) -> f64 {
        match self {
            Calibration::Linear { gain, offset } => gain * raw + offset,
            Calibration::Polynomial(c) => c.iter().rev().fold(0.0, |acc, &k| acc * raw + k),
        }
    }
}

/// Apparatus deflection (mm) against applied stress (kPa), per branch, stress strictly increasing.
#[derive(Clone, Debug, PartialEq)]
pub struct DeflectionTable {
    /// Measured while loading.
    pub loading: Vec<(f64, f64)>,
    /// Measured while unloading (may be empty).
    pub unloading: Vec<(f64, f64)>,
}

/// `[notify]`: receivers of journal events.
#[derive(Clone, Debug, Default, PartialEq)]
pub struct NotifyConfig {
    /// `[[notify.webhook]]`, in file order; their URLs are unique.
    pub webhooks: Vec<Webhook>,
}

/// One `[[notify.webhook]]`: a URL that gets a JSON POST for each subscribed journal event.
#[derive(Clone, Debug, PartialEq)]
pub struct Webhook {
    /// Where to post.
    pub url: WebhookUrl,
    /// What to post, without repeats.
    pub events: Vec<NotifyEvent>,
    /// Deadline of one request (connect to response head).
    pub timeout: Duration,
}

/// Default deadline of one webhook request, s.
pub const WEBHOOK_TIMEOUT_S: u64 = 10;

/// The names a webhook subscribes to. Each stands for one or more journal kinds; `notify-failed` is in
/// none of them, so a failed notification never causes another.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
pub enum NotifyEvent {
    /// End of primary found: the frame is ready for its next load.
    Ready,
    /// An alarm was raised, acknowledged or cleared.
    Alarm,
    /// The watch found the onset t0 of an increment.
    Onset,
    /// The next stress was entered.
    Armed,
    /// A test started, finished, or resumed after the daemon restarted.
    Test,
    /// A bus went down or came back.
    Bus,
    /// A gauge jump was proposed as a re-seat, or the proposal was answered.
    Reseat,
    /// The load cell left its expected force, came back, or changed with nothing armed.
    Load,
    /// Someone wrote a note.
    Note,
}

impl NotifyEvent {
    /// Every name, in the order the allowed values are listed.
    pub const ALL: [NotifyEvent; 9] = [
        NotifyEvent::Ready,
        NotifyEvent::Alarm,
        NotifyEvent::Onset,
        NotifyEvent::Armed,
        NotifyEvent::Test,
        NotifyEvent::Bus,
        NotifyEvent::Reseat,
        NotifyEvent::Load,
        NotifyEvent::Note,
    ];

    /// The name in the file and in the posted body's `event`.
    pub fn name(self) -> &'static str {
        match self {
            NotifyEvent::Ready => "ready",
            NotifyEvent::Alarm => "alarm",
            NotifyEvent::Onset => "onset",
            NotifyEvent::Armed => "armed",
            NotifyEvent::Test => "test",
            NotifyEvent::Bus => "bus",
            NotifyEvent::Reseat => "reseat",
            NotifyEvent::Load => "load",
            NotifyEvent::Note => "note",
        }
    }

    /// The journal kinds (`events.kind`) it stands for, derived from [`NotifyEvent::of_kind`].
    pub fn kinds(self) -> Vec<EventKind> {
        EventKind::ALL.iter().copied().filter(|&k| NotifyEvent::of_kind(k) == Some(self)).collect()
    }

    /// The event of a name in the file.
    pub fn from_name(name: &str) -> Option<NotifyEvent> {
        NotifyEvent::ALL.into_iter().find(|e| e.name() == name)
    }

    /// The event a journal kind belongs to, if any: every kind is placed here, so a new kind cannot be
    /// written without deciding whether (and under which name) a webhook may subscribe to it.
    pub fn of_kind(kind: EventKind) -> Option<NotifyEvent> {
        match kind {
            EventKind::Ready => Some(NotifyEvent::Ready),
            EventKind::AlarmRaised | EventKind::AlarmAcknowledged | EventKind::AlarmCleared => Some(NotifyEvent::Alarm),
            EventKind::Onset => Some(NotifyEvent::Onset),
            EventKind::Armed | EventKind::StepWithdrawn => Some(NotifyEvent::Armed),
            EventKind::TestStarted
            | EventKind::TestFinished
            | EventKind::TestResumed
            | EventKind::StepVoided
            | EventKind::StepRestored
            | EventKind::Revised
            | EventKind::RevisionWithdrawn
            | EventKind::Approved
            | EventKind::ApprovalWithdrawn => Some(NotifyEvent::Test),
            EventKind::BusDown | EventKind::BusUp => Some(NotifyEvent::Bus),
            EventKind::ReseatProposed | EventKind::ReseatResolved => Some(NotifyEvent::Reseat),
            EventKind::LoadOff | EventKind::LoadBack | EventKind::LoadChangeUnarmed => Some(NotifyEvent::Load),
            EventKind::Note => Some(NotifyEvent::Note),
            // A failed notification must never cause another.
            EventKind::NotifyFailed => None,
            EventKind::DaemonStart
            | EventKind::DaemonStop
            | EventKind::ClockStep
            | EventKind::ClockBehind
            | EventKind::ValueRefused
            | EventKind::ValueRecovered
            | EventKind::LoadReported
            | EventKind::PublishLag
            | EventKind::PublishCaughtUp => None,
        }
    }

    /// `ready, alarm, …` for messages.
    pub fn allowed() -> String {
        NotifyEvent::ALL.map(NotifyEvent::name).join(", ")
    }
}

/// A checked `http://host[:port][/path][?query]` URL. `Debug` and [`WebhookUrl::redacted`] leave the query
/// out: it may hold a receiver's secret.
#[derive(Clone, PartialEq, Eq)]
pub struct WebhookUrl {
    text: String,
    authority: String,
    host: String,
    port: u16,
    path_and_query: String,
}

impl fmt::Debug for WebhookUrl {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "WebhookUrl({})", self.redacted())
    }
}

impl WebhookUrl {
    /// Checks a URL; the error says what is wrong and never repeats the URL (it may hold a secret).
    pub fn parse(text: &str) -> Result<WebhookUrl, String> {
        const ALLOWED: &str = "allowed: http://host:port/path, e.g. http://127.0.0.1:8400/oedolog";
        let scheme_is = |scheme: &str| text.get(..scheme.len()).is_some_and(|s| s.eq_ignore_ascii_case(scheme));
        if scheme_is("https://") {
            return Err(format!(
                "https is not supported (this version has no TLS): point the webhook at a relay on this machine \
                 that forwards over TLS ({ALLOWED})"
            ));
        }
        if !scheme_is("http://") {
            return Err(format!("not an http:// URL ({ALLOWED})"));
        }
        if text.chars().any(|c| c.is_whitespace() || c.is_control()) {
            return Err(format!("spaces and control characters are not allowed; percent-encode them ({ALLOWED})"));
        }
        let rest = &text["http://".len()..];
        let (authority, path) = match rest.find(['/', '?', '#']) {
            Some(i) => (&rest[..i], &rest[i..]),
            None => (rest, ""),
        };
        if path.contains('#') {
            return Err(format!("a fragment (`#…`) is never sent to the receiver; leave it out ({ALLOWED})"));
        }
        if authority.contains('@') {
            return Err(format!(
                "user information (`user@`) is not supported; put a token in the path or query ({ALLOWED})"
            ));
        }
        let (host, port) = if let Some(inner) = authority.strip_prefix('[') {
            // An IPv6 literal: `[::1]:8400`.
            let (address, after) =
                inner.split_once(']').ok_or_else(|| format!("unclosed `[` in the host ({ALLOWED})"))?;
            if address.parse::<std::net::Ipv6Addr>().is_err() {
                return Err(format!("`[{address}]` is not an IPv6 address ({ALLOWED})"));
            }
            let port = match after {
                "" => None,
                _ => Some(after.strip_prefix(':').ok_or_else(|| format!("junk after `]` in the host ({ALLOWED})"))?),
            };
            (address, port)
        } else {
            match authority.rsplit_once(':') {
                Some((host, port)) => (host, Some(port)),
                None => (authority, None),
            }
        };
        let host_ok = authority.starts_with('[')
            || (!host.is_empty() && host.chars().all(|c| c.is_ascii_alphanumeric() || c == '.' || c == '-'));
        if !host_ok {
            return Err(format!("missing or malformed host ({ALLOWED})"));
        }
        let port = match port {
            None => 80,
            Some(p) => p
                .parse::<u16>()
                .ok()
                .filter(|&p| p > 0)
                .ok_or_else(|| format!("the port is not a number from 1 to 65535 ({ALLOWED})"))?,
        };
        let path_and_query = match path {
            "" => "/".to_string(),
            p if p.starts_with('?') => format!("/{p}"),
            p => p.to_string(),
        };
        Ok(WebhookUrl {
            text: text.to_string(),
            authority: authority.to_string(),
            host: host.to_string(),
            port,
            path_and_query,
        })
    }

    /// The URL as configured (with its query: do not log it).
    pub fn as_str(&self) -> &str {
        &self.text
    }

    /// The host to connect to (an IPv6 address without brackets).
    pub fn host(&self) -> &str {
        &self.host
    }

    /// The TCP port (80 when the URL names none).
    pub fn port(&self) -> u16 {
        self.port
    }

    /// `host:port` as written, for the `Host` header.
    pub fn authority(&self) -> &str {
        &self.authority
    }

    /// The request target: path and query.
    pub fn path_and_query(&self) -> &str {
        &self.path_and_query
    }

    /// `http://host:port/path` without the query, for logs and the journal.
    pub fn redacted(&self) -> String {
        let path = self.path_and_query.split('?').next().unwrap_or("/");
        format!("http://{}{path}", self.authority)
    }
}

/// What the file is for: `run` needs a store and frames; the demo takes only `[http]` and notifications.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Purpose {
    /// `oedolog run`.
    Run,
    /// `oedolog demo --config`.
    Demo,
    /// `oedolog fleet --config`: `[fleet]`, `[http]` and `[log]` only.
    Fleet,
}

impl Purpose {
    /// What `check-config` checks a file for: a fleet file when it has a `[fleet]` table, else `run`.
    pub fn of_text(source: &str) -> Purpose {
        match toml::from_str::<toml::Table>(source) {
            Ok(table) if table.contains_key("fleet") => Purpose::Fleet,
            _ => Purpose::Run,
        }
    }
}

struct Checker<'a> {
    source: &'a str,
    problems: Vec<ConfigProblem>,
}

impl Checker<'_> {
    fn at(&mut self, span: Range<usize>, field: impl Into<String>, message: impl Into<String>) {
        let (line, column) = line_column(self.source, span.start);
        self.problems.push(ConfigProblem { line, column, field: field.into(), message: message.into() });
    }

    fn int<T: TryFrom<i64>>(
        &mut self,
        value: &Spanned<i64>,
        field: &str,
        allowed: Range<i64>,
        what: &str,
    ) -> Option<T> {
        let v = *value.get_ref();
        if allowed.contains(&v) {
            T::try_from(v).ok()
        } else {
            self.at(value.span(), field, format!("{v} is not allowed ({what})"));
            None
        }
    }

    fn millis(&mut self, value: Option<&Spanned<i64>>, field: &str, default: u64, allowed: Range<i64>) -> Duration {
        match value {
            None => Duration::from_millis(default),
            Some(v) => {
                let what = format!("allowed {} to {} ms", allowed.start, allowed.end - 1);
                Duration::from_millis(self.int::<u64>(v, field, allowed, &what).unwrap_or(default))
            }
        }
    }

    fn within(
        &mut self,
        value: &Spanned<f64>,
        field: &str,
        range: std::ops::RangeInclusive<f64>,
        what: &str,
    ) -> Option<f64> {
        let v = *value.get_ref();
        if v.is_finite() && range.contains(&v) {
            Some(v)
        } else {
            self.at(value.span(), field, format!("{v} is not allowed ({what})"));
            None
        }
    }

    fn positive(&mut self, value: &Spanned<f64>, field: &str, what: &str) -> Option<f64> {
        let v = *value.get_ref();
        if v.is_finite() && v > 0.0 {
            Some(v)
        } else {
            self.at(value.span(), field, format!("{v} is not allowed ({what})"));
            None
        }
    }
}

fn parity(checker: &mut Checker<'_>, value: Option<&Spanned<String>>, field: &str, default: Parity) -> Parity {
    match value.map(|v| (v.get_ref().as_str(), v.span())) {
        None => default,
        Some(("none", _)) => Parity::None,
        Some(("even", _)) => Parity::Even,
        Some(("odd", _)) => Parity::Odd,
        Some((other, span)) => {
            checker.at(span, field, format!("`{other}` is not a parity (allowed: none, even, odd)"));
            default
        }
    }
}

/// Decodes `\r`, `\n`, `\t`, `\\` and `\xHH` in a line gauge's request string.
fn unescape(text: &str) -> Result<Vec<u8>, String> {
    let mut out = Vec::new();
    let mut chars = text.chars();
    while let Some(c) = chars.next() {
        if c != '\\' {
            let mut buf = [0u8; 4];
            out.extend_from_slice(c.encode_utf8(&mut buf).as_bytes());
            continue;
        }
        match chars.next() {
            Some('r') => out.push(b'\r'),
            Some('n') => out.push(b'\n'),
            Some('t') => out.push(b'\t'),
            Some('\\') => out.push(b'\\'),
            Some('x') => {
                let hex: String = chars.by_ref().take(2).collect();
                out.push(u8::from_str_radix(&hex, 16).map_err(|_| format!("`\\x{hex}` is not two hex digits"))?);
            }
            other => {
                return Err(format!("unknown escape `\\{}` (allowed: \\r \\n \\t \\\\ \\xHH)", other.unwrap_or(' ')));
            }
        }
    }
    Ok(out)
}

/// Oedometer rings of 20 to 200 mm (common practice: 50–75 mm rings are usual; the API's specimen
/// diameter takes the same range).
const RING_DIAMETER_MM: std::ops::RangeInclusive<f64> = 20.0..=200.0;
/// Their areas, mm²: π·10² to π·100² (computed).
const RING_AREA_MM2: std::ops::RangeInclusive<f64> = 314.0..=31_416.0;

fn valid_id(id: &str) -> bool {
    !id.is_empty() && id.len() <= 32 && id.chars().all(|c| c.is_ascii_alphanumeric() || c == '-' || c == '_')
}

impl Config {
    /// Parses and checks a configuration file's text.
    pub fn parse(source: &str, purpose: Purpose) -> Result<Config, ConfigError> {
        let raw: RawConfig = toml::from_str(source).map_err(|error| {
            let (line, column) = error.span().map_or((0, 0), |span| line_column(source, span.start));
            let field = error.span().map_or_else(|| "file".into(), |span| field_at(source, span.start));
            ConfigError { problems: vec![ConfigProblem { line, column, field, message: error.message().to_string() }] }
        })?;
        let mut checker = Checker { source, problems: Vec::new() };
        let config = check(&mut checker, raw, purpose);
        if checker.problems.is_empty() {
            Ok(config)
        } else {
            checker.problems.sort_by_key(|p| (p.line, p.column));
            Err(ConfigError { problems: checker.problems })
        }
    }

    /// Reads and checks a configuration file.
    pub fn load(path: &std::path::Path, purpose: Purpose) -> Result<Config, ConfigError> {
        let source = std::fs::read_to_string(path).map_err(|error| ConfigError {
            problems: vec![ConfigProblem {
                line: 0,
                column: 0,
                field: path.display().to_string(),
                message: format!("cannot read the file: {error}"),
            }],
        })?;
        Config::parse(&source, purpose)
    }

    /// A one-paragraph summary for `check-config`.
    pub fn summary(&self) -> String {
        let mut out = String::new();
        if let Some(store) = &self.store {
            out += &format!("store: {} (commit at least every {} ms)\n", store.path.display(), store.flush.as_millis());
        }
        out += &format!("http: {}\n", self.http.listen);
        for (i, bus) in self.buses.iter().enumerate() {
            let frames: Vec<&str> = self.frames.iter().filter(|f| f.bus == i).map(|f| f.id.as_str()).collect();
            let what = match &bus.kind {
                BusKind::Rtu(s) => format!("modbus-rtu {} {} baud", s.device, s.baud),
                BusKind::Tcp(t) => format!("modbus-tcp {}", t.address),
                BusKind::LineGauge(g) => format!("line-gauge {} {} baud", g.device, g.baud),
            };
            out += &format!("bus {}: {what}; frames: {}\n", bus.id, frames.join(", "));
        }
        for hook in &self.notify.webhooks {
            let events: Vec<&str> = hook.events.iter().map(|e| e.name()).collect();
            out += &format!("webhook {}: {}\n", hook.url.redacted(), events.join(", "));
        }
        for b in &self.publish.mqtt {
            out += &format!("mqtt {} as {}: topics {}/…, QoS {}\n", b.url.text, b.client_id, b.lab_topic(), b.qos);
        }
        if let Some(fleet) = &self.fleet {
            for b in &fleet.brokers {
                out += &format!(
                    "fleet broker {} as {}: reads {}/+/status and {}/+/+/state\n",
                    b.url.text, b.client_id, b.topic_prefix, b.topic_prefix
                );
            }
            out += &format!("a lab is quiet after {} s without a state", fleet.quiet_after.as_secs());
            return out;
        }
        out += &format!("{} frame(s), {} bus(es)", self.frames.len(), self.buses.len());
        out
    }
}

/// `[display]`: each unit one of its list, SI where not given.
fn check_display(c: &mut Checker<'_>, raw: &raw::RawDisplay) -> oedolog_core::units::DisplayUnits {
    use oedolog_core::units::{
        CV_UNITS, DisplayUnit, DisplayUnits, K_UNITS, LENGTH_UNITS, STRESS_UNITS, find_unit, names,
    };
    let mut one = |value: &Option<Spanned<String>>, field: &str, units: &[DisplayUnit]| match value {
        None => units[0],
        Some(v) => find_unit(units, v.get_ref()).unwrap_or_else(|| {
            c.at(v.span(), field, format!("`{}` is not allowed (allowed: {})", v.get_ref(), names(units)));
            units[0]
        }),
    };
    DisplayUnits {
        stress: one(&raw.stress, "display.stress", &STRESS_UNITS),
        length: one(&raw.length, "display.length", &LENGTH_UNITS),
        cv: one(&raw.cv, "display.cv", &CV_UNITS),
        k: one(&raw.k, "display.k", &K_UNITS),
    }
}

fn check(c: &mut Checker<'_>, raw: RawConfig, purpose: Purpose) -> Config {
    let store = match (raw.store, purpose) {
        (Some(s), _) => {
            if s.path.get_ref().trim().is_empty() {
                c.at(s.path.span(), "store.path", "must not be empty");
            }
            let flush = c.millis(s.flush_ms.as_ref(), "store.flush_ms", 500, 50..1001);
            let checkpoint = match &s.checkpoint_s {
                None => Duration::from_secs(300),
                Some(v) => Duration::from_secs(
                    c.int::<u64>(v, "store.checkpoint_s", 10..86_401, "allowed 10 to 86400 s").unwrap_or(300),
                ),
            };
            Some(StoreConfig { path: PathBuf::from(s.path.into_inner()), flush, checkpoint })
        }
        (None, Purpose::Run) => {
            c.problems.push(ConfigProblem {
                line: 1,
                column: 1,
                field: "store".into(),
                message: "missing table [store] with `path` (the SQLite file); `oedolog run` needs it".into(),
            });
            None
        }
        (None, Purpose::Demo | Purpose::Fleet) => None,
    };
    if purpose == Purpose::Fleet && store.is_some() {
        c.problems.push(ConfigProblem {
            line: 1,
            column: 1,
            field: "store".into(),
            message: "a fleet file has no [store]: the board keeps only the latest states, in memory".into(),
        });
    }

    let listen = match &raw.http.listen {
        None => DEFAULT_LISTEN.parse().expect("constant"),
        Some(v) => v.get_ref().parse::<SocketAddr>().unwrap_or_else(|_| {
            c.at(
                v.span(),
                "http.listen",
                format!("`{}` is not an address (allowed: IP:PORT, e.g. 127.0.0.1:8321)", v.get_ref()),
            );
            DEFAULT_LISTEN.parse().expect("constant")
        }),
    };
    let users = check_users(c, &raw.http);
    let mut public_origins = Vec::new();
    for (i, origin) in raw.http.public_origins.iter().enumerate() {
        match PublicOrigin::parse(origin.get_ref()) {
            Ok(o) => public_origins.push(o),
            Err(why) => c.at(
                origin.span(),
                format!("http.public_origins[{i}]"),
                format!(
                    "`{}` is not an origin: {why} (allowed: scheme://host[:port], e.g. https://lab.example.org)",
                    origin.get_ref()
                ),
            ),
        }
    }

    let log = LogConfig {
        dir: raw.log.dir.map(|d| PathBuf::from(d.into_inner())),
        keep: raw
            .log
            .keep
            .as_ref()
            .and_then(|k| c.int::<usize>(k, "log.keep", 1..1001, "allowed 1 to 1000 files"))
            .unwrap_or(14),
        level: raw.log.level.map_or_else(|| "info".to_string(), |l| l.into_inner()),
    };

    let mut buses = Vec::new();
    let mut bus_index = HashMap::new();
    for (i, b) in raw.buses.into_iter().enumerate() {
        let id = b.id.get_ref().clone();
        let field = |name: &str| format!("bus[{i}].{name}");
        if !valid_id(&id) {
            c.at(b.id.span(), field("id"), format!("`{id}` is not an id (allowed: 1–32 letters, digits, `-`, `_`)"));
        }
        if bus_index.insert(id.clone(), i).is_some() {
            c.at(b.id.span(), field("id"), format!("bus id `{id}` is used twice"));
        }
        if let Some(kind) = check_bus(c, &b, i) {
            buses.push(Bus { id, kind });
        } else {
            // Keep indices aligned with the file so frames can still be checked against their bus.
            buses.push(Bus {
                id,
                kind: BusKind::Tcp(TcpLink { address: String::new(), timeout: Duration::from_secs(1), retries: 0 }),
            });
        }
    }

    let mut frames = Vec::new();
    let mut poll_spans = Vec::new();
    let mut frame_ids = HashSet::new();
    let mut units = HashMap::new();
    for (i, f) in raw.frames.into_iter().enumerate() {
        let spans = (i, f.poll_ms.as_ref().map(|v| v.span()), f.fast_poll_ms.as_ref().map(|v| v.span()));
        if let Some(frame) = check_frame(c, f, i, &bus_index, &buses, &mut frame_ids, &mut units) {
            frames.push(frame);
            poll_spans.push(spans);
        }
    }
    check_fast_polls(c, &buses, &frames, &poll_spans);
    if purpose == Purpose::Run && frames.is_empty() && c.problems.is_empty() {
        c.problems.push(ConfigProblem {
            line: 1,
            column: 1,
            field: "frame".into(),
            message: "no [[frame]] tables: `oedolog run` needs at least one frame".into(),
        });
    }
    // Line gauges carry exactly one frame.
    for (i, bus) in buses.iter().enumerate() {
        if matches!(bus.kind, BusKind::LineGauge(_)) && frames.iter().filter(|f| f.bus == i).count() > 1 {
            c.problems.push(ConfigProblem {
                line: 1,
                column: 1,
                field: format!("bus[{i}]"),
                message: format!("line-gauge bus `{}` carries more than one frame (allowed: one)", bus.id),
            });
        }
    }
    let fleet = match (&raw.fleet, purpose) {
        (Some(f), Purpose::Fleet) => Some(fleet::check_fleet(c, f)),
        (None, Purpose::Fleet) => {
            c.problems.push(ConfigProblem {
                line: 1,
                column: 1,
                field: "fleet".into(),
                message: "missing table [fleet] with [[fleet.broker]]: `oedolog fleet` needs it".into(),
            });
            None
        }
        (Some(f), _) => {
            c.at(
                f.span(),
                "fleet",
                "[fleet] is for `oedolog fleet` only (a lab's file publishes with [[publish.mqtt]])",
            );
            None
        }
        (None, _) => None,
    };
    if purpose == Purpose::Fleet {
        for (present, field) in
            [(!frames.is_empty(), "frame"), (!buses.is_empty(), "bus"), (!raw.publish.mqtt.is_empty(), "publish.mqtt")]
        {
            if present {
                c.problems.push(ConfigProblem {
                    line: 1,
                    column: 1,
                    field: field.into(),
                    message: format!("a fleet file has no [[{field}]]: the board reads brokers and commands nothing"),
                });
            }
        }
    }
    let notify = check_notify(c, &raw.notify);
    let publish = publish::check_publish(c, &raw.publish);
    let alarms = check_alarms(c, &raw.alarms);
    let display = check_display(c, &raw.display);
    Config {
        store,
        http: HttpConfig { listen, users, public_origins },
        log,
        buses,
        frames,
        notify,
        publish,
        fleet,
        alarms,
        display,
    }
}

/// `[alarms]`: each threshold within a range that still makes sense; defaults for the rest.
fn check_alarms(c: &mut Checker<'_>, raw: &raw::RawAlarms) -> oedolog_core::alarms::AlarmRules {
    let mut rules = oedolog_core::alarms::AlarmRules::default();
    if let Some(v) = &raw.stale_after_s {
        rules.stale_after =
            c.int::<u64>(v, "alarms.stale_after_s", 10..604_801, "allowed 10 to 604800 s").map(Duration::from_secs);
    }
    if let Some(v) = &raw.travel_margin {
        let m = *v.get_ref();
        if m.is_finite() && (0.0..0.5).contains(&m) {
            rules.travel_margin = m;
        } else {
            c.at(
                v.span(),
                "alarms.travel_margin",
                format!("{m} is not allowed (a share of the travel from 0 to below 0.5)"),
            );
        }
    }
    if let Some(v) = &raw.stuck_after_s
        && let Some(s) = c.int::<u64>(v, "alarms.stuck_after_s", 60..604_801, "allowed 60 to 604800 s")
    {
        rules.stuck_after = Duration::from_secs(s);
    }
    if let Some(v) = &raw.temperature_band_c {
        match v.get_ref().as_slice() {
            [low, high] if low.is_finite() && high.is_finite() && low < high => rules.temperature_band_c = *low..*high,
            _ => c.at(v.span(), "alarms.temperature_band_c", "allowed [low, high] in °C with low < high, both finite"),
        }
    }
    if let Some(v) = &raw.bus_error_rate {
        let r = *v.get_ref();
        if r.is_finite() && r > 0.0 && r < 1.0 {
            rules.bus_error_rate = r;
        } else {
            c.at(v.span(), "alarms.bus_error_rate", format!("{r} is not allowed (a share above 0 and below 1)"));
        }
    }
    if let Some(v) = &raw.bus_window_s
        && let Some(s) = c.int::<u64>(v, "alarms.bus_window_s", 10..86_401, "allowed 10 to 86400 s")
    {
        rules.bus_window = Duration::from_secs(s);
    }
    rules
}

/// `[[notify.webhook]]`: an http:// URL used once, a non-empty list of known events, a sane deadline.
fn check_notify(c: &mut Checker<'_>, notify: &raw::RawNotify) -> NotifyConfig {
    let mut webhooks = Vec::new();
    let mut urls: HashMap<String, usize> = HashMap::new();
    for (i, hook) in notify.webhooks.iter().enumerate() {
        let field = |name: &str| format!("notify.webhook[{i}].{name}");
        let before = c.problems.len();
        let url = match &hook.get_ref().url {
            None => {
                c.at(hook.span(), field("url"), "missing `url` (allowed: http://host:port/path)");
                None
            }
            Some(text) => match WebhookUrl::parse(text.get_ref()) {
                Err(message) => {
                    c.at(text.span(), field("url"), message);
                    None
                }
                Ok(url) => {
                    if let Some(first) = urls.insert(url.as_str().to_string(), i) {
                        c.at(
                            text.span(),
                            field("url"),
                            format!("the same url as notify.webhook[{first}] (allowed: each url once; list all its events there)"),
                        );
                    }
                    Some(url)
                }
            },
        };
        let allowed = NotifyEvent::allowed();
        let mut events = Vec::new();
        match &hook.get_ref().events {
            None => c.at(hook.span(), field("events"), format!("missing `events` (allowed: a list of {allowed})")),
            Some(list) if list.get_ref().is_empty() => {
                c.at(list.span(), field("events"), format!("the list is empty (allowed: one or more of {allowed})"))
            }
            Some(list) => {
                for name in list.get_ref() {
                    match NotifyEvent::from_name(name.get_ref()) {
                        None => c.at(
                            name.span(),
                            field("events"),
                            format!("`{}` is not an event (allowed: {allowed})", name.get_ref()),
                        ),
                        Some(event) if events.contains(&event) => {
                            c.at(name.span(), field("events"), format!("`{}` is listed twice", name.get_ref()))
                        }
                        Some(event) => events.push(event),
                    }
                }
            }
        }
        let timeout = match &hook.get_ref().timeout_s {
            None => Duration::from_secs(WEBHOOK_TIMEOUT_S),
            Some(v) => Duration::from_secs(
                c.int::<u64>(v, &field("timeout_s"), 1..61, "allowed 1 to 60 s").unwrap_or(WEBHOOK_TIMEOUT_S),
            ),
        };
        if c.problems.len() == before
            && let Some(url) = url
        {
            webhooks.push(Webhook { url, events, timeout });
        }
    }
    NotifyConfig { webhooks }
}

/// `[[http.user]]`: names unique, roles known, tokens long enough; and without users, loopback only.
fn check_users(c: &mut Checker<'_>, http: &raw::RawHttp) -> Vec<User> {
    let mut users = Vec::new();
    let mut names = HashSet::new();
    let mut tokens: HashMap<String, String> = HashMap::new();
    for (i, u) in http.users.iter().enumerate() {
        let u = u.get_ref();
        let field = |name: &str| format!("http.user[{i}].{name}");
        let name = u.name.get_ref().trim().to_string();
        if name.is_empty() || name.len() > 64 || name.contains(':') || name.chars().any(char::is_control) {
            c.at(
                u.name.span(),
                field("name"),
                "allowed: 1–64 characters, no `:` (HTTP Basic separates name and token with it)",
            );
        } else if !names.insert(name.clone()) {
            c.at(u.name.span(), field("name"), format!("user `{name}` is configured twice (allowed: unique names)"));
        }
        let role = match u.role.get_ref().as_str() {
            "viewer" => Some(Role::Viewer),
            "operator" => Some(Role::Operator),
            "engineer" => Some(Role::Engineer),
            other => {
                c.at(
                    u.role.span(),
                    field("role"),
                    format!("`{other}` is not allowed (allowed: viewer, operator, engineer)"),
                );
                None
            }
        };
        let token = u.token.get_ref();
        // The token itself is never echoed.
        if token.chars().count() < MIN_TOKEN_CHARS || !token.chars().all(|ch| ch.is_ascii_graphic()) {
            c.at(
                u.token.span(),
                field("token"),
                format!(
                    "too short, or has spaces or characters outside ASCII, which an Authorization header cannot carry (allowed: at least {MIN_TOKEN_CHARS} printable ASCII characters, no spaces)"
                ),
            );
        } else if let Some(first) = tokens.get(token).cloned().or_else(|| {
            tokens.insert(token.clone(), name.clone());
            None
        }) {
            c.at(
                u.token.span(),
                field("token"),
                format!("the same token as user `{first}`: it would sign in as whoever is listed first (allowed: a token of its own for each user)"),
            );
        }
        if let Some(role) = role {
            users.push(User { name, role, token: token.clone() });
        }
    }
    if http.users.is_empty()
        && let Some(listen) = &http.listen
        && let Ok(addr) = listen.get_ref().parse::<SocketAddr>()
        && !addr.ip().is_loopback()
    {
        c.at(
            listen.span(),
            "http.listen",
            format!(
                "{addr} is not a loopback address and no [[http.user]] is configured (allowed: a loopback address such as 127.0.0.1:8321, or add [[http.user]] tables with name, role and token)"
            ),
        );
    }
    users
}

fn check_bus(c: &mut Checker<'_>, b: &RawBus, i: usize) -> Option<BusKind> {
    let field = |name: &str| format!("bus[{i}].{name}");
    let kind = *b.kind.get_ref();
    let kind_name = match kind {
        RawBusKind::ModbusRtu => "modbus-rtu",
        RawBusKind::ModbusTcp => "modbus-tcp",
        RawBusKind::LineGauge => "line-gauge",
    };
    // Fields that do not belong to this kind are refused rather than ignored.
    let foreign: [(&str, Option<Range<usize>>, bool); 7] = [
        ("device", b.device.as_ref().map(|v| v.span()), kind != RawBusKind::ModbusTcp),
        ("baud", b.baud.as_ref().map(|v| v.span()), kind != RawBusKind::ModbusTcp),
        ("address", b.address.as_ref().map(|v| v.span()), kind == RawBusKind::ModbusTcp),
        ("gap_ms", b.gap_ms.as_ref().map(|v| v.span()), kind == RawBusKind::ModbusRtu),
        ("stop_bits", b.stop_bits.as_ref().map(|v| v.span()), kind == RawBusKind::ModbusRtu),
        ("request", b.request.as_ref().map(|v| v.span()), kind == RawBusKind::LineGauge),
        ("line_unit", b.line_unit.as_ref().map(|v| v.span()), kind == RawBusKind::LineGauge),
    ];
    for (name, span, allowed) in foreign {
        if let (Some(span), false) = (span, allowed) {
            c.at(span, field(name), format!("not a setting of a {kind_name} bus"));
        }
    }
    let mut device = || match &b.device {
        Some(d) if !d.get_ref().trim().is_empty() => Some(d.get_ref().clone()),
        Some(d) => {
            c.at(d.span(), field("device"), "must not be empty");
            None
        }
        None => {
            c.at(b.kind.span(), field("device"), format!("a {kind_name} bus needs `device` (the serial port path)"));
            None
        }
    };
    let device = if kind == RawBusKind::ModbusTcp { Some(String::new()) } else { device() };
    let baud = match &b.baud {
        None => 19_200,
        Some(v) => {
            let ok = u32::try_from(*v.get_ref()).ok().filter(|b| BAUD_RATES.contains(b));
            ok.unwrap_or_else(|| {
                let list: Vec<String> = BAUD_RATES.iter().map(u32::to_string).collect();
                c.at(v.span(), field("baud"), format!("{} is not allowed (allowed: {})", v.get_ref(), list.join(", ")));
                19_200
            })
        }
    };
    let retries = b
        .retries
        .as_ref()
        .map_or(Some(2), |r| c.int::<u32>(r, &field("retries"), 0..11, "allowed 0 to 10"))
        .unwrap_or(2);
    match kind {
        RawBusKind::ModbusRtu => {
            let parity = parity(c, b.parity.as_ref(), &field("parity"), Parity::Even);
            let stop_bits = b
                .stop_bits
                .as_ref()
                .map_or(Some(1), |s| c.int::<u8>(s, &field("stop_bits"), 1..3, "allowed 1 or 2"))
                .unwrap_or(1);
            let timeout = c.millis(b.timeout_ms.as_ref(), &field("timeout_ms"), 500, 10..60_001);
            let gap = match &b.gap_ms {
                None => silent_interval(baud),
                Some(g) => match c.positive(g, &field("gap_ms"), "allowed a positive number of ms, at most 1000") {
                    Some(ms) if ms <= 1000.0 => Duration::from_secs_f64(ms / 1000.0),
                    Some(ms) => {
                        c.at(g.span(), field("gap_ms"), format!("{ms} is not allowed (at most 1000 ms)"));
                        silent_interval(baud)
                    }
                    None => silent_interval(baud),
                },
            };
            Some(BusKind::Rtu(SerialLine { device: device?, baud, parity, stop_bits, timeout, gap, retries }))
        }
        RawBusKind::ModbusTcp => {
            let timeout = c.millis(b.timeout_ms.as_ref(), &field("timeout_ms"), 1000, 10..60_001);
            let Some(address) = &b.address else {
                c.at(
                    b.kind.span(),
                    field("address"),
                    "a modbus-tcp bus needs `address` (host:port, e.g. 192.168.1.20:502)",
                );
                return None;
            };
            let text = address.get_ref();
            let port_ok = text
                .rsplit_once(':')
                .is_some_and(|(host, port)| !host.is_empty() && port.parse::<u16>().is_ok_and(|p| p > 0));
            if !port_ok {
                c.at(address.span(), field("address"), format!("`{text}` is not host:port (e.g. 192.168.1.20:502)"));
                return None;
            }
            Some(BusKind::Tcp(TcpLink { address: text.clone(), timeout, retries }))
        }
        RawBusKind::LineGauge => {
            let parity = parity(c, b.parity.as_ref(), &field("parity"), Parity::None);
            let timeout = c.millis(b.timeout_ms.as_ref(), &field("timeout_ms"), 2000, 10..60_001);
            let request = match &b.request {
                None => None,
                Some(r) => match unescape(r.get_ref()) {
                    Ok(bytes) if !bytes.is_empty() => Some(bytes),
                    Ok(_) => {
                        c.at(
                            r.span(),
                            field("request"),
                            "must not be empty (leave it out for a gauge that prints on its own)",
                        );
                        None
                    }
                    Err(message) => {
                        c.at(r.span(), field("request"), message);
                        None
                    }
                },
            };
            let unit = match b.line_unit.as_ref().map(|u| (u.get_ref().as_str(), u.span())) {
                None | Some(("mm", _)) => LengthUnit::Mm,
                Some(("in", _)) => LengthUnit::In,
                Some((other, span)) => {
                    c.at(span, field("line_unit"), format!("`{other}` is not allowed (allowed: mm, in)"));
                    LengthUnit::Mm
                }
            };
            Some(BusKind::LineGauge(LineGauge { device: device?, baud, parity, request, unit, timeout }))
        }
    }
}

#[allow(clippy::too_many_arguments)]
/// Periods of 10 ms and more are always allowed (a bus that cannot keep up polls as fast as it can).
/// Shorter ones are refused on a line gauge, and on a serial line when one round of its units cannot fit:
/// per unit an 8-byte request, a reply of 5 bytes + 2 per register, and two t3.5 silences (Modbus over
/// Serial Line V1.02 §2.5.1 and §2.5.1.1) — a lower bound, so nothing the line can carry is refused.
fn check_fast_polls(c: &mut Checker<'_>, buses: &[Bus], frames: &[Frame], spans: &[PollSpans]) {
    const ALWAYS_ALLOWED: Duration = Duration::from_millis(10);
    for (frame, (i, steady_span, fast_span)) in frames.iter().zip(spans) {
        let bus = &buses[frame.bus];
        let shortest = match &bus.kind {
            BusKind::Tcp(_) => continue,
            BusKind::LineGauge(_) => ALWAYS_ALLOWED,
            BusKind::Rtu(line) => {
                let on_line = frames.iter().filter(|f| f.bus == frame.bus);
                let bits = 1.0 + 8.0 + if line.parity == Parity::None { 0.0 } else { 1.0 } + f64::from(line.stop_bits);
                let char_s = bits / f64::from(line.baud.max(1));
                let t3_5_s = if line.baud > 19_200 { 1.75e-3 } else { 3.5 * char_s };
                let round_s: f64 = on_line
                    .map(|f| {
                        let registers: u16 = [Some(&f.displacement), f.load.as_ref(), f.temperature.as_ref()]
                            .into_iter()
                            .flatten()
                            .filter_map(|ch| ch.register.as_ref().map(RegisterMap::quantity))
                            .sum();
                        (8.0 + 5.0 + 2.0 * f64::from(registers)) * char_s + 2.0 * t3_5_s
                    })
                    .sum();
                Duration::from_secs_f64(round_s)
            }
        };
        let allowed_ms = shortest.min(ALWAYS_ALLOWED).as_secs_f64() * 1e3;
        for (name, period, span) in
            [("poll_ms", frame.poll.steady, steady_span.clone()), ("fast_poll_ms", frame.poll.fast, fast_span.clone())]
        {
            // A default is not refused on its own: poll_ms defaults to 1 s, fast_poll_ms follows poll_ms.
            let Some(span) = span else { continue };
            if period >= ALWAYS_ALLOWED || period >= shortest {
                continue;
            }
            let why = match &bus.kind {
                BusKind::Rtu(line) => {
                    let n = frames.iter().filter(|f| f.bus == frame.bus).count();
                    format!(
                        "is shorter than bus `{}` can poll its {n} unit(s) at {} baud ({:.2} ms a round at the least)",
                        bus.id,
                        line.baud,
                        shortest.as_secs_f64() * 1e3
                    )
                }
                _ => format!("is too short for line-gauge bus `{}`", bus.id),
            };
            let message =
                format!("{} ms {why} (allowed: {} to 3600000 ms here)", period.as_millis(), allowed_ms.ceil() as u64);
            c.at(span, format!("frame[{i}].{name}"), message);
        }
    }
}

/// A frame's index in the file and where its `poll_ms` and `fast_poll_ms` are.
type PollSpans = (usize, Option<Range<usize>>, Option<Range<usize>>);

fn check_frame(
    c: &mut Checker<'_>,
    f: RawFrame,
    i: usize,
    bus_index: &HashMap<String, usize>,
    buses: &[Bus],
    frame_ids: &mut HashSet<String>,
    units: &mut HashMap<(usize, u8), String>,
) -> Option<Frame> {
    let field = |name: &str| format!("frame[{i}].{name}");
    let id = f.id.get_ref().clone();
    let before = c.problems.len();
    if !valid_id(&id) {
        c.at(f.id.span(), field("id"), format!("`{id}` is not an id (allowed: 1–32 letters, digits, `-`, `_`)"));
    }
    if !frame_ids.insert(id.clone()) {
        c.at(f.id.span(), field("id"), format!("frame id `{id}` is used twice"));
    }
    let bus = bus_index.get(f.bus.get_ref()).copied();
    if bus.is_none() {
        let known: Vec<&str> = buses.iter().map(|b| b.id.as_str()).collect();
        let known = if known.is_empty() { "none defined".to_string() } else { known.join(", ") };
        c.at(f.bus.span(), field("bus"), format!("no bus `{}` (buses: {known})", f.bus.get_ref()));
    }
    let bus_kind = bus.map(|b| &buses[b].kind);
    let line_gauge = matches!(bus_kind, Some(BusKind::LineGauge(_)));
    let unit = match (&f.unit, bus_kind) {
        (Some(u), Some(BusKind::LineGauge(_))) => {
            c.at(u.span(), field("unit"), "a frame on a line-gauge bus has no unit id");
            None
        }
        (Some(u), Some(BusKind::Rtu(_))) => c.int::<u8>(u, &field("unit"), 1..248, "allowed 1 to 247 on a serial line"),
        (Some(u), _) => c.int::<u8>(u, &field("unit"), 0..256, "allowed 0 to 255 on Modbus TCP"),
        (None, Some(BusKind::LineGauge(_))) => Some(0),
        (None, _) => {
            c.at(f.id.span(), field("unit"), "missing `unit` (the frame's Modbus unit id)");
            None
        }
    };
    if let (Some(bus), Some(unit)) = (bus, unit)
        && !line_gauge
        && let Some(other) = units.insert((bus, unit), id.clone())
    {
        let span = f.unit.as_ref().map_or(f.id.span(), |u| u.span());
        c.at(span, field("unit"), format!("unit {unit} on bus `{}` is already frame `{other}`", f.bus.get_ref()));
    }
    let loading = match f.loading.as_ref().map(|l| (l.get_ref().as_str(), l.span())) {
        None | Some(("dead-weight", _)) => {
            let lever_ratio = f
                .lever_ratio
                .as_ref()
                .map_or(Some(1.0), |r| c.positive(r, &field("lever_ratio"), "allowed a positive ratio, e.g. 10"));
            Loading::DeadWeight { lever_ratio: lever_ratio.unwrap_or(1.0) }
        }
        Some((kind, span)) => {
            if let Some(r) = &f.lever_ratio {
                c.at(
                    r.span(),
                    field("lever_ratio"),
                    format!("only dead-weight frames have a lever ratio (loading is `{kind}`)"),
                );
            }
            match kind {
                "pneumatic" => Loading::Pneumatic,
                "motor" => Loading::Motor,
                other => {
                    c.at(
                        span,
                        field("loading"),
                        format!("`{other}` is not allowed (allowed: dead-weight, pneumatic, motor)"),
                    );
                    Loading::DeadWeight { lever_ratio: 1.0 }
                }
            }
        }
    };
    let ring_area_mm2 = match (&f.ring_area_mm2, &f.ring_diameter_mm) {
        (Some(a), None) => c.within(
            a,
            &field("ring_area_mm2"),
            RING_AREA_MM2,
            "allowed 314 to 31416 mm² (rings of 20 to 200 mm), e.g. 3167 for a 63.5 mm ring",
        ),
        (None, Some(d)) => c
            .within(d, &field("ring_diameter_mm"), RING_DIAMETER_MM, "allowed 20 to 200 mm, e.g. 63.5")
            .map(|d| std::f64::consts::PI * d * d / 4.0),
        (Some(a), Some(_)) => {
            c.at(a.span(), field("ring_area_mm2"), "give ring_area_mm2 or ring_diameter_mm, not both");
            None
        }
        (None, None) => {
            c.at(f.id.span(), field("ring_area_mm2"), "missing the ring size: `ring_area_mm2` or `ring_diameter_mm`");
            None
        }
    };
    // Below 10 ms only where the bus can carry it: see `check_fast_polls`.
    let steady = c.millis(f.poll_ms.as_ref(), &field("poll_ms"), 1000, 1..3_600_001);
    let fast =
        c.millis(f.fast_poll_ms.as_ref(), &field("fast_poll_ms"), 200.min(steady.as_millis() as u64), 1..3_600_001);
    if fast > steady {
        let span = f.fast_poll_ms.as_ref().map_or(f.id.span(), |v| v.span());
        c.at(
            span,
            field("fast_poll_ms"),
            format!(
                "{} ms is slower than poll_ms {} ms (allowed: fast_poll_ms ≤ poll_ms)",
                fast.as_millis(),
                steady.as_millis()
            ),
        );
    }
    let fast_window = match &f.fast_window_s {
        None => Duration::from_secs(600),
        Some(v) => Duration::from_secs(
            c.int::<u64>(v, &field("fast_window_s"), 0..86_401, "allowed 0 to 86400 s").unwrap_or(600),
        ),
    };
    let channel_spans =
        [Some(f.displacement.span()), f.load.as_ref().map(|l| l.span()), f.temperature.as_ref().map(|t| t.span())];
    let displacement = check_channel(c, f.displacement, &field("displacement"), line_gauge, (-1.0, 100.0), (0.0, 1.0));
    let load = match f.load {
        Some(l) => {
            if line_gauge {
                c.at(l.span(), field("load"), "a line-gauge bus reads only the displacement");
                None
            } else {
                check_channel(c, l, &field("load"), false, (-0.5, 100.0), (0.0, 1e-4))
            }
        }
        None if !line_gauge => {
            c.at(f.id.span(), field("load"), "missing [frame.load] (the load cell)");
            None
        }
        None => None,
    };
    let temperature = f.temperature.and_then(|t| {
        if line_gauge {
            c.at(t.span(), field("temperature"), "a line-gauge bus reads only the displacement");
            None
        } else {
            check_channel(c, t, &field("temperature"), false, (-20.0, 80.0), (0.0, 0.01))
        }
    });
    let deflection = f.deflection.and_then(|d| check_deflection(c, d, &field("deflection")));
    // Two channels reading the same register would each take the other's value for theirs.
    let maps = [
        ("displacement", displacement.as_ref().and_then(|ch| ch.register.as_ref())),
        ("load", load.as_ref().and_then(|ch| ch.register.as_ref())),
        ("temperature", temperature.as_ref().and_then(|ch| ch.register.as_ref())),
    ];
    for (j, (name, map)) in maps.iter().enumerate() {
        let Some(map) = map else { continue };
        let words =
            |m: &RegisterMap| (u32::from(m.address), u32::from(m.address) + u32::from(m.value_type.words()) - 1);
        let (first, last) = words(map);
        for (other, other_map) in maps[..j].iter() {
            let Some(other_map) = other_map.filter(|o| o.table == map.table) else { continue };
            let (o_first, o_last) = words(other_map);
            if first <= o_last && o_first <= last {
                let table = match map.table {
                    oedolog_protocol::registers::RegisterTable::Holding => "holding",
                    oedolog_protocol::registers::RegisterTable::Input => "input",
                };
                let span = channel_spans[j].clone().unwrap_or(f.id.span());
                c.at(
                    span,
                    field(&format!("{name}.register")),
                    format!(
                        "{table} registers {first}–{last} overlap the {other}'s {o_first}–{o_last} on this frame (allowed: registers of its own for each channel)"
                    ),
                );
            }
        }
    }
    if c.problems.len() > before {
        return None;
    }
    Some(Frame {
        name: f.name.unwrap_or_else(|| id.clone()),
        id,
        bus: bus?,
        unit: UnitId(unit?),
        loading,
        ring_area_mm2: ring_area_mm2?,
        displacement: displacement?,
        load,
        temperature,
        deflection,
        poll: PollSchedule { steady, fast, fast_window },
    })
}

fn check_channel(
    c: &mut Checker<'_>,
    channel: Spanned<RawChannel>,
    field: &str,
    line_gauge: bool,
    default_range: (f64, f64),
    default_linear: (f64, f64),
) -> Option<Channel> {
    let span = channel.span();
    let channel = channel.into_inner();
    let register = match (channel.register, line_gauge) {
        (Some(_), true) => {
            c.at(span.clone(), format!("{field}.register"), "a line gauge has no registers");
            None
        }
        (Some(map), false) => match map.validate() {
            Ok(()) => Some(map),
            Err(error) => {
                c.at(span.clone(), format!("{field}.register"), error.to_string());
                None
            }
        },
        (None, false) => {
            c.at(span.clone(), format!("{field}.register"), "missing `register` (table, address, type)");
            None
        }
        (None, true) => None,
    };
    let calibration = match channel.calibration {
        None if line_gauge => Calibration::Linear { gain: 1.0, offset: 0.0 },
        None => Calibration::Linear { gain: default_linear.1.max(f64::MIN_POSITIVE), offset: default_linear.0 },
        Some(RawCalibration { polynomial: Some(p), gain: None, offset: None }) => {
            if p.is_empty() || p.len() > 6 || p.iter().any(|k| !k.is_finite()) || p.iter().skip(1).all(|k| *k == 0.0) {
                c.at(
                    span.clone(),
                    format!("{field}.calibration.polynomial"),
                    "allowed 2 to 6 finite coefficients [c0, c1, …], not all of c1… zero",
                );
            }
            Calibration::Polynomial(p)
        }
        Some(RawCalibration { polynomial: None, gain, offset }) => {
            let gain = gain.unwrap_or(1.0);
            let offset = offset.unwrap_or(0.0);
            if !gain.is_finite() || gain == 0.0 || !offset.is_finite() {
                c.at(
                    span.clone(),
                    format!("{field}.calibration"),
                    format!("gain {gain}, offset {offset}: allowed a finite non-zero gain and a finite offset"),
                );
            }
            Calibration::Linear { gain, offset }
        }
        Some(_) => {
            c.at(span.clone(), format!("{field}.calibration"), "give `gain`/`offset` or `polynomial`, not both");
            Calibration::Linear { gain: 1.0, offset: 0.0 }
        }
    };
    let range = match channel.range {
        None => default_range.0..default_range.1,
        Some(r) => match r.get_ref().as_slice() {
            [min, max] if min.is_finite() && max.is_finite() && min < max => *min..*max,
            _ => {
                c.at(r.span(), format!("{field}.range"), "allowed [min, max] with min < max, both finite");
                default_range.0..default_range.1
            }
        },
    };
    Some(Channel { register, calibration, range })
}

fn check_branch(c: &mut Checker<'_>, points: &Spanned<Vec<Vec<f64>>>, field: &str) -> Vec<(f64, f64)> {
    let mut out = Vec::new();
    for point in points.get_ref() {
        match point.as_slice() {
            [stress, deflection] if stress.is_finite() && deflection.is_finite() && *stress >= 0.0 => {
                out.push((*stress, *deflection))
            }
            _ => {
                c.at(points.span(), field, "allowed pairs [stress_kpa ≥ 0, deflection_mm]");
                return Vec::new();
            }
        }
    }
    if out.windows(2).any(|w| w[1].0 <= w[0].0) {
        c.at(points.span(), field, "stresses must increase strictly from one pair to the next");
    }
    if out.len() < 2 {
        c.at(points.span(), field, "allowed at least two pairs [stress_kpa, deflection_mm]");
    }
    out
}

fn check_deflection(c: &mut Checker<'_>, d: RawDeflection, field: &str) -> Option<DeflectionTable> {
    let loading = check_branch(c, &d.loading, &format!("{field}.loading"));
    let unloading = d.unloading.as_ref().map(|u| check_branch(c, u, &format!("{field}.unloading"))).unwrap_or_default();
    Some(DeflectionTable { loading, unloading })
}

#[cfg(test)]
mod tests;
