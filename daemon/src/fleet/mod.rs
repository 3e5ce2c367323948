//! The fleet board: what every lab's daemon last said on the brokers, kept in memory, and the order in
//! which a person should look at the frames across labs.
//!
//! Everything here comes from the network and is untrusted: a topic must have the shape the publisher uses
//! (`PREFIX/LAB/status`, `PREFIX/LAB/FRAME/state`), a payload must parse as that topic's JSON, strings are
//! clipped, links must be `http(s)://`; anything else is ignored and counted, never stored. The board
//! reads only: nothing here publishes or commands a frame. Time comes in as `now_us`, never from a clock.

pub mod board;
pub mod subscribe;

#[cfg(test)]
mod tests;

use std::collections::BTreeMap;
use std::time::Duration;

use serde::{Deserialize, Serialize};

use crate::clock::rfc3339;

/// Payloads above this are ignored (a state with a few alarms is under 2 KB).
pub const MAX_PAYLOAD_BYTES: usize = 64 * 1024;
/// Labs and frames kept at most; further ones are ignored and counted, so a flood cannot exhaust memory.
pub const MAX_LABS: usize = 2_000;
/// See [`MAX_LABS`].
pub const MAX_FRAMES: usize = 50_000;
/// Longest text kept from a payload, in characters.
const MAX_TEXT: usize = 200;
/// Alarms kept per frame.
const MAX_ALARMS: usize = 20;

/// Why a message was not taken.
#[derive(Clone, Debug, PartialEq, Eq)]
pub enum Ignored {
    /// Not `PREFIX/LAB/status` or `PREFIX/LAB/FRAME/state` with plain levels.
    UnexpectedTopic,
    /// The payload is not that topic's JSON (what was wrong).
    Malformed(String),
    /// Already [`MAX_LABS`] labs or [`MAX_FRAMES`] frames.
    OverLimit,
}

/// Messages ignored since the start, by reason.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Serialize)]
pub struct IgnoredCounts {
    /// Topics of an unexpected shape.
    pub unexpected_topic: u64,
    /// Payloads that did not parse.
    pub malformed: u64,
    /// New labs or frames beyond the limits.
    pub over_limit: u64,
}

/// `PREFIX/LAB/status` as the publisher sends it (fields the board does not use are skipped).
#[derive(Deserialize)]
struct StatusPayload {
    status: String,
    #[serde(default)]
    dashboard: Option<String>,
}

/// `PREFIX/LAB/FRAME/state` as the publisher sends it.
#[derive(Deserialize)]
struct StatePayload {
    #[serde(default)]
    name: Option<String>,
    state: String,
    #[serde(default)]
    attention: Vec<String>,
    #[serde(default)]
    test: Option<TestPayload>,
    #[serde(default)]
    ready_eta: Option<String>,
    #[serde(default)]
    alarms: Vec<AlarmPayload>,
}

#[derive(Deserialize)]
struct TestPayload {
    #[serde(default)]
    specimen: Option<String>,
    #[serde(default)]
    load_step: Option<i64>,
    #[serde(default)]
    stress_kpa: Option<f64>,
}

#[derive(Deserialize)]
struct AlarmPayload {
    #[serde(default)]
    code: Option<String>,
    #[serde(default)]
    message: Option<String>,
    #[serde(default)]
    acknowledged_by: Option<String>,
}

/// What the board knows of one lab.
#[derive(Clone, Debug)]
struct Lab {
    prefix: String,
    lab: String,
    /// `online` or `offline` from the status topic; `None` before one came.
    status: Option<&'static str>,
    /// When `status` last changed, or the lab was first heard of.
    status_since_us: i64,
    dashboard: Option<String>,
    /// When a frame state of this lab last came.
    last_state_us: Option<i64>,
}

/// What the board knows of one frame.
#[derive(Clone, Debug)]
struct FrameEntry {
    name: Option<String>,
    state: String,
    attention: Vec<&'static str>,
    specimen: Option<String>,
    load_step: Option<i64>,
    stress_kpa: Option<f64>,
    ready_eta: Option<String>,
    open_alarms: Vec<String>,
    /// When `state` or `attention` last changed (as the board saw it).
    since_us: i64,
    received_us: i64,
}

/// The latest of every lab and frame heard on the brokers.
#[derive(Debug)]
pub struct Fleet {
    quiet_after_us: i64,
    /// Keyed by `PREFIX/LAB`.
    labs: BTreeMap<String, Lab>,
    /// Keyed by (`PREFIX/LAB`, frame).
    frames: BTreeMap<(String, String), FrameEntry>,
    ignored: IgnoredCounts,
    /// The board's own link to each broker, keyed by (url, prefix).
    brokers: BTreeMap<(String, String), (bool, i64)>,
    /// Messages and link changes taken so far: a view is current while this and the second of now stay.
    changes: u64,
}

/// The board's own link to one broker: while it is down every lab under it only looks quiet.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct BrokerView {
    /// The broker's URL as configured.
    pub url: String,
    /// The prefix read there.
    pub prefix: String,
    /// Whether the board is connected and subscribed.
    pub connected: bool,
    /// Since when (RFC 3339 UTC).
    pub since: String,
    /// µs since 1970 UTC of `since`.
    pub since_us: i64,
}

/// A lab as the board shows it.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct LabView {
    /// The lab's topic level.
    pub lab: String,
    /// The topic prefix it was heard under.
    pub prefix: String,
    /// `online`, `offline` (its last will or a clean stop) or `quiet` (no state for `quiet_after_s`).
    pub status: &'static str,
    /// Since when it has had that status (RFC 3339 UTC).
    pub since: String,
    /// µs since 1970 UTC of `since`.
    pub since_us: i64,
    /// The lab's own dashboard, when its status gave one.
    pub dashboard: Option<String>,
    /// Frames heard of.
    pub frames: usize,
}

/// A frame as the board shows it, in the board's order.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct FrameView {
    /// The lab's topic level.
    pub lab: String,
    /// The topic prefix.
    pub prefix: String,
    /// The frame's id (its topic level).
    pub frame: String,
    /// Its name, if the lab gave one.
    pub name: Option<String>,
    /// The lab's state word for it (`idle`, `loading`, `ready`, `offline`, …).
    pub state: String,
    /// Why it wants a person, most urgent first (`ready`, `schedule-finished`, `alarm`, `offline`,
    /// `lab-offline`, `lab-quiet`); empty when nothing is asked.
    pub needs: Vec<&'static str>,
    /// 0 ready, 1 alarm, 2 offline (frame or lab), 3 the rest: the first key of the order.
    pub rank: u8,
    /// The lab's status.
    pub lab_status: &'static str,
    /// Specimen under test.
    pub specimen: Option<String>,
    /// Load step number.
    pub load_step: Option<i64>,
    /// Stress of the load step, kPa.
    pub stress_kpa: Option<f64>,
    /// When the lab expects the load step ready (its words, RFC 3339).
    pub ready_eta: Option<String>,
    /// Unacknowledged alarms (`code: message`).
    pub open_alarms: Vec<String>,
    /// Since when it has been in this state with these needs (the lab's own down time, where it is down).
    pub since: String,
    /// µs since 1970 UTC of `since`.
    pub since_us: i64,
    /// The lab's dashboard.
    pub dashboard: Option<String>,
}

/// The whole board at one instant.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct FleetView {
    /// When it was made (RFC 3339 UTC).
    pub at: String,
    /// µs since 1970 UTC of `at`.
    pub at_us: i64,
    /// `quiet_after_s` of the configuration.
    pub quiet_after_s: u64,
    /// Labs by prefix and name.
    pub labs: Vec<LabView>,
    /// Frames, who needs a person first.
    pub frames: Vec<FrameView>,
    /// Messages not taken.
    pub ignored: IgnoredCounts,
    /// The board's own link to each broker.
    pub brokers: Vec<BrokerView>,
}

/// A plain topic level: what the publisher's checked ids allow (letters, digits, `-`, `_`, up to 64).
fn plain_level(level: &str) -> bool {
    !level.is_empty() && level.len() <= 64 && level.bytes().all(|b| b.is_ascii_alphanumeric() || b == b'-' || b == b'_')
}

/// `text` without control characters, at most [`MAX_TEXT`] characters.
fn clip(text: &str) -> String {
    text.chars().filter(|c| !c.is_control()).take(MAX_TEXT).collect()
}

/// A link is kept only as `http://` or `https://` with no quote, space or angle bracket (never
/// `javascript:` or anything a page could be tricked by).
fn web_link(text: &str) -> Option<String> {
    let rest = text.strip_prefix("http://").or_else(|| text.strip_prefix("https://"))?;
    let clean = !rest.is_empty()
        && text.len() <= MAX_TEXT
        && !rest.starts_with('/')
        && !text
            .chars()
            .any(|c| c.is_whitespace() || c.is_control() || matches!(c, '"' | '\'' | '<' | '>' | '`' | '\\'));
    clean.then(|| text.to_string())
}

/// The attention words the publisher sends, as the board's own constants; others are dropped.
fn attention_word(word: &str) -> Option<&'static str> {
    ["ready", "schedule-finished", "alarm", "offline"].into_iter().find(|w| *w == word)
}

impl Fleet {
    /// An empty board; a lab with no state for `quiet_after` is quiet.
    pub fn new(quiet_after: Duration) -> Fleet {
        Fleet {
            quiet_after_us: i64::try_from(quiet_after.as_micros()).unwrap_or(i64::MAX),
            labs: BTreeMap::new(),
            frames: BTreeMap::new(),
            ignored: IgnoredCounts::default(),
            brokers: BTreeMap::new(),
            changes: 0,
        }
    }

    /// How many messages and link changes the board has taken (what a cached view is keyed by).
    pub fn changes(&self) -> u64 {
        self.changes
    }

    /// Records the board's link to the broker at `url` (read under `prefix`) going up or down at `now_us`.
    pub fn broker_link(&mut self, url: &str, prefix: &str, connected: bool, now_us: i64) {
        self.changes += 1;
        let entry = self.brokers.entry((url.to_string(), prefix.to_string())).or_insert((connected, now_us));
        if entry.0 != connected {
            *entry = (connected, now_us);
        }
    }

    /// Messages ignored so far.
    pub fn ignored(&self) -> IgnoredCounts {
        self.ignored
    }

    /// Takes one message received under `prefix` at `now_us`, or ignores and counts it. An empty payload
    /// removes what the topic held (how a retained message is cleared, MQTT 3.1.1 §3.3.1.3).
    pub fn accept(&mut self, prefix: &str, topic: &str, payload: &[u8], now_us: i64) -> Result<(), Ignored> {
        self.changes += 1;
        let result = self.take(prefix, topic, payload, now_us);
        match &result {
            Ok(()) => {}
            Err(Ignored::UnexpectedTopic) => self.ignored.unexpected_topic += 1,
            Err(Ignored::Malformed(_)) => self.ignored.malformed += 1,
            Err(Ignored::OverLimit) => self.ignored.over_limit += 1,
        }
        result
    }

    fn take(&mut self, prefix: &str, topic: &str, payload: &[u8], now_us: i64) -> Result<(), Ignored> {
        let rest = topic.strip_prefix(prefix).and_then(|r| r.strip_prefix('/')).ok_or(Ignored::UnexpectedTopic)?;
        let levels: Vec<&str> = rest.split('/').collect();
        let (lab, frame) = match levels.as_slice() {
            [lab, "status"] if plain_level(lab) => (*lab, None),
            [lab, frame, "state"] if plain_level(lab) && plain_level(frame) => (*lab, Some(*frame)),
            _ => return Err(Ignored::UnexpectedTopic),
        };
        if payload.len() > MAX_PAYLOAD_BYTES {
            return Err(Ignored::Malformed(format!("{} bytes (allowed up to {MAX_PAYLOAD_BYTES})", payload.len())));
        }
        let key = format!("{prefix}/{lab}");
        if payload.is_empty() {
            match frame {
                None => {
                    if let Some(l) = self.labs.get_mut(&key) {
                        l.status = None;
                        l.dashboard = None;
                    }
                }
                Some(f) => {
                    self.frames.remove(&(key, f.to_string()));
                }
            }
            return Ok(());
        }
        match frame {
            None => {
                let p: StatusPayload =
                    serde_json::from_slice(payload).map_err(|e| Ignored::Malformed(e.to_string()))?;
                let status = match p.status.as_str() {
                    "online" => "online",
                    "offline" => "offline",
                    other => {
                        return Err(Ignored::Malformed(format!("status `{}` (allowed online, offline)", clip(other))));
                    }
                };
                let l = self.lab(prefix, lab, now_us)?;
                if l.status != Some(status) {
                    l.status = Some(status);
                    l.status_since_us = now_us;
                }
                l.dashboard = p.dashboard.as_deref().and_then(web_link);
                Ok(())
            }
            Some(f) => {
                let p: StatePayload = serde_json::from_slice(payload).map_err(|e| Ignored::Malformed(e.to_string()))?;
                if p.state.is_empty() || !plain_level(&p.state) {
                    return Err(Ignored::Malformed(format!("state `{}` is not a state word", clip(&p.state))));
                }
                let fkey = (key, f.to_string());
                if !self.frames.contains_key(&fkey) && self.frames.len() >= MAX_FRAMES {
                    return Err(Ignored::OverLimit);
                }
                self.lab(prefix, lab, now_us)?.last_state_us = Some(now_us);
                let mut attention: Vec<&'static str> = p.attention.iter().filter_map(|w| attention_word(w)).collect();
                attention.dedup();
                let open_alarms = p
                    .alarms
                    .iter()
                    .filter(|a| a.acknowledged_by.is_none())
                    .take(MAX_ALARMS)
                    .map(|a| {
                        let code = a.code.as_deref().map(clip).unwrap_or_default();
                        let message = a.message.as_deref().map(clip).unwrap_or_default();
                        if message.is_empty() { code } else { format!("{code}: {message}") }
                    })
                    .collect();
                let test = p.test.as_ref();
                let since_us = match self.frames.get(&fkey) {
                    Some(old) if old.state == p.state && old.attention == attention => old.since_us,
                    _ => now_us,
                };
                self.frames.insert(
                    fkey,
                    FrameEntry {
                        name: p.name.as_deref().map(clip),
                        state: p.state,
                        attention,
                        specimen: test.and_then(|t| t.specimen.as_deref()).map(clip),
                        load_step: test.and_then(|t| t.load_step),
                        stress_kpa: test.and_then(|t| t.stress_kpa).filter(|s| s.is_finite()),
                        ready_eta: p.ready_eta.as_deref().map(clip),
                        open_alarms,
                        since_us,
                        received_us: now_us,
                    },
                );
                Ok(())
            }
        }
    }

    fn lab(&mut self, prefix: &str, lab: &str, now_us: i64) -> Result<&mut Lab, Ignored> {
        let key = format!("{prefix}/{lab}");
        if !self.labs.contains_key(&key) && self.labs.len() >= MAX_LABS {
            return Err(Ignored::OverLimit);
        }
        Ok(self.labs.entry(key).or_insert_with(|| Lab {
            prefix: prefix.to_string(),
            lab: lab.to_string(),
            status: None,
            status_since_us: now_us,
            dashboard: None,
            last_state_us: None,
        }))
    }

    /// A lab's status at `now_us` and since when: its last will (or clean stop) says `offline`; no state
    /// (or, before any state, no status) for `quiet_after` makes it `quiet`.
    fn lab_status(&self, l: &Lab, now_us: i64) -> (&'static str, i64) {
        if l.status == Some("offline") {
            return ("offline", l.status_since_us);
        }
        let heard = l.last_state_us.unwrap_or(l.status_since_us);
        if now_us.saturating_sub(heard) >= self.quiet_after_us {
            ("quiet", heard)
        } else {
            ("online", l.status_since_us)
        }
    }

    /// The board at `now_us`: labs by name, frames who-needs-a-person-first (ready, alarm, offline, the
    /// rest), each group longest-waiting first.
    pub fn view(&self, now_us: i64) -> FleetView {
        let labs: Vec<LabView> = self
            .labs
            .iter()
            .map(|(key, l)| {
                let (status, since_us) = self.lab_status(l, now_us);
                LabView {
                    lab: l.lab.clone(),
                    prefix: l.prefix.clone(),
                    status,
                    since: rfc3339(since_us),
                    since_us,
                    dashboard: l.dashboard.clone(),
                    frames: self
                        .frames
                        .range((key.clone(), String::new())..)
                        .take_while(|((k, _), _)| k == key)
                        .count(),
                }
            })
            .collect();
        let mut frames: Vec<FrameView> = self
            .frames
            .iter()
            .filter_map(|((key, frame), f)| {
                let l = self.labs.get(key)?;
                let (lab_status, lab_since) = self.lab_status(l, now_us);
                let mut needs = f.attention.clone();
                let mut since_us = f.since_us;
                match lab_status {
                    "offline" => needs.push("lab-offline"),
                    "quiet" => needs.push("lab-quiet"),
                    _ => {}
                }
                let rank = if lab_status != "online" {
                    // What the lab said last is stale: the lab itself is the first thing to see to.
                    since_us = lab_since.min(f.received_us);
                    2
                } else if needs.iter().any(|n| matches!(*n, "ready" | "schedule-finished")) {
                    0
                } else if needs.contains(&"alarm") {
                    1
                } else if needs.contains(&"offline") {
                    2
                } else {
                    3
                };
                Some(FrameView {
                    lab: l.lab.clone(),
                    prefix: l.prefix.clone(),
                    frame: frame.clone(),
                    name: f.name.clone(),
                    state: f.state.clone(),
                    needs,
                    rank,
                    lab_status,
                    specimen: f.specimen.clone(),
                    load_step: f.load_step,
                    stress_kpa: f.stress_kpa,
                    ready_eta: f.ready_eta.clone(),
                    open_alarms: f.open_alarms.clone(),
                    since: rfc3339(since_us),
                    since_us,
                    dashboard: l.dashboard.clone(),
                })
            })
            .collect();
        frames.sort_by(|a, b| {
            (a.rank, a.since_us, &a.prefix, &a.lab, &a.frame).cmp(&(b.rank, b.since_us, &b.prefix, &b.lab, &b.frame))
        });
        FleetView {
            at: rfc3339(now_us),
            at_us: now_us,
            quiet_after_s: u64::try_from(self.quiet_after_us / 1_000_000).unwrap_or(0),
            labs,
            frames,
            ignored: self.ignored,
            brokers: self
                .brokers
                .iter()
                .map(|((url, prefix), (connected, since))| BrokerView {
                    url: url.clone(),
                    prefix: prefix.clone(),
                    connected: *connected,
                    since: rfc3339(*since),
                    since_us: *since,
                })
                .collect(),
        }
    }
}
