//! Alarms in the running daemon: the board of open alarms shared with the HTTP side, and the task in
//! [`task`] that feeds the pure engine (`oedolog_core::alarms`) and stores each transition.

pub mod task;

use std::collections::BTreeMap;
use std::sync::{Arc, RwLock};

use oedolog_core::alarms::Code;
use serde::Serialize;

/// An open (or recently closed) alarm as the API shows it.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct AlarmView {
    /// `alarms.id`.
    pub id: i64,
    /// The code name.
    pub code: &'static str,
    /// The frame's config id, for a frame alarm.
    pub frame: Option<String>,
    /// The bus id, for a bus alarm.
    pub bus: Option<String>,
    /// The outlet (an MQTT broker's `url client_id`), for a `publish-lag` alarm.
    pub outlet: Option<String>,
    /// What a person reads.
    pub message: String,
    /// Raised, UTC µs.
    #[serde(skip)]
    pub raised_us: i64,
    /// Raised, RFC 3339.
    pub raised_at: String,
    /// Acknowledged by whom, and when (RFC 3339).
    pub acknowledged_by: Option<String>,
    /// When it was acknowledged.
    pub acknowledged_at: Option<String>,
}

impl AlarmView {
    /// A just-raised alarm: nobody has acknowledged it yet. `place` is the stored `bus` column: a bus id,
    /// or for a `publish-lag` alarm the outlet's key (see [`place`]).
    pub fn raised(
        id: i64,
        code: Code,
        frame: Option<String>,
        place: Option<String>,
        message: String,
        raised_us: i64,
    ) -> Self {
        let (bus, outlet) = self::place(code, place);
        AlarmView {
            id,
            code: code.name(),
            frame,
            bus,
            outlet,
            message,
            raised_us,
            raised_at: crate::clock::rfc3339(raised_us),
            acknowledged_by: None,
            acknowledged_at: None,
        }
    }
}

/// (bus, outlet) of an alarm from its stored `bus` column: the column names the outlet of a
/// `publish-lag` alarm (an alarm about neither a frame nor a bus; no column of its own was needed).
pub fn place(code: Code, stored: Option<String>) -> (Option<String>, Option<String>) {
    if code == Code::PublishLag { (None, stored) } else { (stored, None) }
}

/// Counters for `/metrics`.
#[derive(Clone, Debug, Default, PartialEq, Serialize)]
pub struct AlarmCounts {
    /// Raised since the daemon started, by code.
    pub raised: BTreeMap<&'static str, u64>,
    /// Cleared since the daemon started, by code.
    pub cleared: BTreeMap<&'static str, u64>,
}

/// The open alarms, shared with the HTTP side (updated by the alarm task and by acknowledgements).
#[derive(Clone, Default)]
pub struct AlarmBoard {
    inner: Arc<RwLock<(Vec<AlarmView>, AlarmCounts)>>,
}

impl AlarmBoard {
    /// Every open alarm, oldest first.
    pub fn open(&self) -> Vec<AlarmView> {
        self.inner.read().unwrap_or_else(|e| e.into_inner()).0.clone()
    }

    /// The counters.
    pub fn counts(&self) -> AlarmCounts {
        self.inner.read().unwrap_or_else(|e| e.into_inner()).1.clone()
    }

    /// The open alarms about the lab as a whole (a bus, an outlet), not one frame.
    pub fn of_lab(&self) -> Vec<AlarmView> {
        self.open().into_iter().filter(|a| a.frame.is_none()).collect()
    }

    /// The open alarms of frame `id`.
    pub fn of_frame(&self, id: &str) -> Vec<AlarmView> {
        self.open().into_iter().filter(|a| a.frame.as_deref() == Some(id)).collect()
    }

    pub(crate) fn update(&self, f: impl FnOnce(&mut Vec<AlarmView>, &mut AlarmCounts)) {
        let mut inner = self.inner.write().unwrap_or_else(|e| e.into_inner());
        let (open, counts) = &mut *inner;
        f(open, counts);
    }
}
