//! The configuration file as written: serde structures that mirror the TOML, nothing checked beyond types.
//!
//! Every table refuses unknown fields. Values that need checks beyond their type are `Spanned`, so the
//! validation in [`super::validate`] can point at their line and column. Nothing outside `config` sees these.

use oedolog_protocol::registers::RegisterMap;
use serde::Deserialize;
use toml::Spanned;

/// The whole file.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub(crate) struct RawConfig {
    /// Where readings are stored.
    pub store: Option<RawStore>,
    /// The HTTP server.
    #[serde(default)]
    pub http: RawHttp,
    /// Logging.
    #[serde(default)]
    pub log: RawLog,
    /// Serial lines and TCP links.
    #[serde(default, rename = "bus")]
    pub buses: Vec<RawBus>,
    /// Loading frames.
    #[serde(default, rename = "frame")]
    pub frames: Vec<RawFrame>,
    /// Notifications.
    #[serde(default)]
    pub notify: RawNotify,
    /// Publishing to MQTT brokers.
    #[serde(default)]
    pub publish: super::publish::RawPublish,
    /// The fleet board's brokers (`oedolog fleet` only).
    pub fleet: Option<toml::Spanned<super::fleet::RawFleet>>,
    /// Alarm thresholds.
    #[serde(default)]
    pub alarms: RawAlarms,
    /// The units results are shown in.
    #[serde(default)]
    pub display: RawDisplay,
}

/// `[display]`: each key one unit name.
#[derive(Debug, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub(crate) struct RawDisplay {
    /// `kPa`, `tsf` or `psf`.
    pub stress: Option<Spanned<String>>,
    /// `mm` or `in`.
    pub length: Option<Spanned<String>>,
    /// `mm2/min`, `m2/year` or `ft2/day`.
    pub cv: Option<Spanned<String>>,
    /// `m/s` or `cm/s`.
    pub k: Option<Spanned<String>>,
}

/// `[store]`
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub(crate) struct RawStore {
    /// SQLite file.
    pub path: Spanned<String>,
    /// Longest wait before a batch of readings is committed, ms (50..=1000; default 500).
    pub flush_ms: Option<Spanned<i64>>,
    /// Period of WAL checkpoints, s (default 300).
    pub checkpoint_s: Option<Spanned<i64>>,
}

/// `[http]`
#[derive(Debug, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub(crate) struct RawHttp {
    /// Listen address (default 127.0.0.1:8321).
    pub listen: Option<Spanned<String>>,
    /// Origins a reverse proxy serves the dashboard under (`https://lab.example.org`); their hosts are
    /// also accepted in `Host`.
    #[serde(default)]
    pub public_origins: Vec<Spanned<String>>,
    /// People and scripts allowed in; with none, only a loopback address may be used.
    #[serde(default, rename = "user")]
    pub users: Vec<Spanned<RawUser>>,
}

/// `[[http.user]]`: one person or script.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub(crate) struct RawUser {
    /// Login name (HTTP Basic) and the name written in the journal.
    pub name: Spanned<String>,
    /// `viewer` (reads everything, changes nothing) or `operator` (may act).
    pub role: Spanned<String>,
    /// Secret: the Basic password or the Bearer token; at least 16 characters.
    pub token: Spanned<String>,
}

/// `[log]`
#[derive(Debug, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub(crate) struct RawLog {
    /// Folder for a daily-rotated log file (optional; stderr always).
    pub dir: Option<Spanned<String>>,
    /// Log files kept (default 14).
    pub keep: Option<Spanned<i64>>,
    /// Filter, e.g. `info` or `oedolog=debug` (default `info`).
    pub level: Option<Spanned<String>>,
}

/// `[[bus]]`: one serial line or TCP link, polled by one task.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub(crate) struct RawBus {
    /// Name frames refer to.
    pub id: Spanned<String>,
    /// `modbus-rtu`, `modbus-tcp` or `line-gauge`.
    pub kind: Spanned<RawBusKind>,
    /// Serial device path (RTU, line gauge).
    pub device: Option<Spanned<String>>,
    /// Baud rate (RTU, line gauge).
    pub baud: Option<Spanned<i64>>,
    /// `none`, `even` or `odd` (RTU default even; line gauge default none).
    pub parity: Option<Spanned<String>>,
    /// 1 or 2 (default 1).
    pub stop_bits: Option<Spanned<i64>>,
    /// host:port (TCP).
    pub address: Option<Spanned<String>>,
    /// Reply deadline, ms.
    pub timeout_ms: Option<Spanned<i64>>,
    /// Silence kept between frames on the line, ms (RTU; default t3.5 of the baud rate).
    pub gap_ms: Option<Spanned<f64>>,
    /// Retries after a failed request (default 2).
    pub retries: Option<Spanned<i64>>,
    /// Bytes sent to ask a line gauge for a reading (optional; escapes \r \n \t \\ \xHH).
    pub request: Option<Spanned<String>>,
    /// Unit of a line gauge's readings without a suffix: `mm` or `in` (default mm).
    pub line_unit: Option<Spanned<String>>,
}

/// The bus kinds.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub(crate) enum RawBusKind {
    ModbusRtu,
    ModbusTcp,
    LineGauge,
}

/// `[[frame]]`
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub(crate) struct RawFrame {
    /// Short id (letters, digits, `-`, `_`).
    pub id: Spanned<String>,
    /// Name on screens (default: the id).
    pub name: Option<String>,
    /// The bus it is on.
    pub bus: Spanned<String>,
    /// Modbus unit id (not for line gauges).
    pub unit: Option<Spanned<i64>>,
    /// `dead-weight` (default), `pneumatic` or `motor`.
    pub loading: Option<Spanned<String>>,
    /// Lever ratio of a dead-weight frame (force on the specimen per weight on the hanger; 1 for direct).
    pub lever_ratio: Option<Spanned<f64>>,
    /// Inside area of the specimen ring, mm².
    pub ring_area_mm2: Option<Spanned<f64>>,
    /// Inside diameter of the ring, mm (instead of the area).
    pub ring_diameter_mm: Option<Spanned<f64>>,
    /// Steady poll period, ms (default 1000).
    pub poll_ms: Option<Spanned<i64>>,
    /// Poll period just after a load change, ms (default 200).
    pub fast_poll_ms: Option<Spanned<i64>>,
    /// How long the fast period lasts after a load change, s (default 600).
    pub fast_window_s: Option<Spanned<i64>>,
    /// The displacement gauge.
    pub displacement: Spanned<RawChannel>,
    /// The load cell (optional on a line-gauge bus).
    pub load: Option<Spanned<RawChannel>>,
    /// A temperature sensor (optional).
    pub temperature: Option<Spanned<RawChannel>>,
    /// The apparatus-deflection calibration.
    pub deflection: Option<RawDeflection>,
}

/// A measured channel.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub(crate) struct RawChannel {
    /// Where the value is in the device (not for a line gauge).
    pub register: Option<RegisterMap>,
    /// Counts → engineering unit.
    pub calibration: Option<RawCalibration>,
    /// Valid engineering values, [min, max]; others are refused and raise an event.
    pub range: Option<Spanned<Vec<f64>>>,
}

/// `calibration = { gain = …, offset = … }` or `{ polynomial = [c0, c1, …] }`.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub(crate) struct RawCalibration {
    pub gain: Option<f64>,
    pub offset: Option<f64>,
    pub polynomial: Option<Vec<f64>>,
}

/// `[frame.deflection]`: deflection of the apparatus alone vs applied stress, per branch.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub(crate) struct RawDeflection {
    /// [[stress_kpa, deflection_mm], …] measured while loading.
    pub loading: Spanned<Vec<Vec<f64>>>,
    /// The same while unloading (optional).
    pub unloading: Option<Spanned<Vec<Vec<f64>>>>,
}

/// `[notify]`: where journal events are posted.
#[derive(Debug, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub(crate) struct RawNotify {
    /// `[[notify.webhook]]` tables.
    #[serde(default, rename = "webhook")]
    pub webhooks: Vec<Spanned<RawWebhook>>,
}

/// `[[notify.webhook]]`: one receiver of JSON POSTs.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub(crate) struct RawWebhook {
    /// `http://host:port/path` (no TLS in this version: point `https` receivers at a local relay).
    pub url: Option<Spanned<String>>,
    /// Which events are posted, e.g. `["ready", "alarm"]` (names: `config::NotifyEvent`).
    pub events: Option<Spanned<Vec<Spanned<String>>>>,
    /// Deadline of one request, s (1..=60; default 10).
    pub timeout_s: Option<Spanned<i64>>,
}

/// `[alarms]`: thresholds of the alarm conditions (every key optional).
#[derive(Debug, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub(crate) struct RawAlarms {
    /// No valid reading this long on a running frame: stale, s (default: ten steady polls, ≥ 30 s).
    pub stale_after_s: Option<Spanned<i64>>,
    /// Margin at each end of the gauge's travel as a share of it (default 0.02).
    pub travel_margin: Option<Spanned<f64>>,
    /// Every channel unchanged this long: stuck, s (default 1800).
    pub stuck_after_s: Option<Spanned<i64>>,
    /// `[low, high]` °C (default [16, 24]).
    pub temperature_band_c: Option<Spanned<Vec<f64>>>,
    /// Share of failed requests on a bus that raises `bus-errors` (default 0.2).
    pub bus_error_rate: Option<Spanned<f64>>,
    /// The window of that share, s (default 300).
    pub bus_window_s: Option<Spanned<i64>>,
}
