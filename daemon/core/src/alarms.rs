//! Alarms: conditions that need a person, each raised once, acknowledged by a named operator, cleared
//! when the condition is gone.
//!
//! [`AlarmEngine`] is pure: it takes what acquisition and the watch know now ([`FrameInput`],
//! [`BusInput`]) and returns the transitions (raise or clear). The daemon's alarm task feeds it every few
//! seconds, stores each transition with its journal entry, and publishes the open alarms on its board for
//! the API, the dashboard and `/metrics`. Conditions:
//!
//! - `stale`: a frame with a running test had no valid reading for its stale time;
//! - `gauge-travel`: the displacement reading is within the margin of an end of the gauge's travel;
//! - `out-of-range`: values were refused (outside the channel's range, or not a number);
//! - `stuck`: every channel of a frame returned exactly the same value for the stuck time;
//! - `load-drift`: the load differs from the increment's expected force by more than ±0.5 % (the watch's
//!   load check);
//! - `temperature`: the temperature channel is outside the configured band;
//! - `bus-errors`: the share of failed requests on a bus over the window is above the threshold;
//! - `publish-lag`: an outlet (an MQTT broker) is further behind the store than its limit (the
//!   publisher keeps the hysteresis: raised past the limit, cleared under half of it).
//!
//! Each condition has a hysteresis so a value hovering at a limit does not raise and clear every poll.

use std::collections::{BTreeMap, VecDeque};
use std::ops::Range;

use std::time::Duration;

use serde::Serialize;

/// Thresholds (`[alarms]` in the configuration).
#[derive(Clone, Debug, PartialEq)]
pub struct AlarmRules {
    /// Without a valid reading this long a running frame is stale (`None`: the frame's own limit, ten
    /// steady poll periods and at least 30 s).
    pub stale_after: Option<Duration>,
    /// The travel margin as a share of the gauge's travel (0.02: 0.5 mm of a 25 mm gauge).
    pub travel_margin: f64,
    /// Every channel unchanged this long: stuck.
    pub stuck_after: Duration,
    /// Allowed temperature band, °C (only where a temperature channel exists).
    pub temperature_band_c: Range<f64>,
    /// Share of failed requests on a bus that raises `bus-errors`.
    pub bus_error_rate: f64,
    /// The window over which that share is taken.
    pub bus_window: Duration,
    /// Fewest requests in the window before a share is judged.
    pub(crate) bus_min_requests: u64,
    /// A refused value keeps `out-of-range` raised this long after the last one.
    pub(crate) refused_hold: Duration,
}

impl Default for AlarmRules {
    fn default() -> Self {
        AlarmRules {
            stale_after: None,
            travel_margin: 0.02,
            stuck_after: Duration::from_secs(1800),
            // 20 ± 4 °C: a usual laboratory band (common practice; the governing standard sets its own).
            temperature_band_c: 16.0..24.0,
            bus_error_rate: 0.2,
            bus_window: Duration::from_secs(300),
            bus_min_requests: 10,
            refused_hold: Duration::from_secs(60),
        }
    }
}

/// What an alarm is about.
#[derive(Clone, Debug, PartialEq, Eq, PartialOrd, Ord, Hash, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Subject {
    /// A frame, by config index.
    Frame(usize),
    /// A bus, by config id.
    Bus(String),
    /// An outlet the store is published to (an MQTT broker), by its key (`url client_id`).
    Outlet(String),
}

/// One kind of alarm.
#[derive(Clone, Copy, Debug, PartialEq, Eq, PartialOrd, Ord, Hash, Serialize)]
#[serde(rename_all = "kebab-case")]
pub enum Code {
    /// No valid reading for too long.
    Stale,
    /// Gauge near an end of its travel.
    GaugeTravel,
    /// Values refused.
    OutOfRange,
    /// Every channel frozen.
    Stuck,
    /// Load off the expected force.
    LoadDrift,
    /// Temperature outside the band.
    Temperature,
    /// Too many failed requests on a bus.
    BusErrors,
    /// Publishing to an outlet is too far behind the store.
    PublishLag,
}

impl Code {
    /// The name stored and shown (`stale`, `gauge-travel`, …).
    pub fn name(self) -> &'static str {
        match self {
            Code::Stale => "stale",
            Code::GaugeTravel => "gauge-travel",
            Code::OutOfRange => "out-of-range",
            Code::Stuck => "stuck",
            Code::LoadDrift => "load-drift",
            Code::Temperature => "temperature",
            Code::BusErrors => "bus-errors",
            Code::PublishLag => "publish-lag",
        }
    }

    /// Every code, for `/metrics`.
    pub const ALL: [Code; 8] = [
        Code::Stale,
        Code::GaugeTravel,
        Code::OutOfRange,
        Code::Stuck,
        Code::LoadDrift,
        Code::Temperature,
        Code::BusErrors,
        Code::PublishLag,
    ];

    /// The code of a stored name.
    pub fn from_name(name: &str) -> Option<Code> {
        Code::ALL.into_iter().find(|c| c.name() == name)
    }
}

/// What acquisition and the watch know of one frame now.
#[derive(Clone, Debug, Default)]
pub struct FrameInput {
    /// Config id (for messages).
    pub id: String,
    /// A test is running on it.
    pub testing: bool,
    /// The newest valid reading of any channel, UTC µs.
    pub last_reading_us: Option<i64>,
    /// Its stale time.
    pub stale_after: Duration,
    /// Latest displacement, mm.
    pub displacement_mm: Option<f64>,
    /// The gauge's travel, mm (the displacement channel's range).
    pub travel_mm: Option<Range<f64>>,
    /// Latest load, kN.
    pub load_kn: Option<f64>,
    /// Latest temperature, °C (`None` without a channel).
    pub temperature_c: Option<f64>,
    /// The watch's load check fails.
    pub load_off: bool,
    /// Values refused since the daemon started.
    pub refused_values: u64,
}

/// What acquisition knows of one bus now (counters since the daemon started).
#[derive(Clone, Debug, Default)]
pub struct BusInput {
    /// Config id.
    pub id: String,
    /// Requests sent.
    pub requests: u64,
    /// Requests that failed: timeouts, CRC or framing errors, exceptions.
    pub errors: u64,
}

/// What the publisher knows of one outlet now.
#[derive(Clone, Debug, Default)]
pub struct OutletInput {
    /// Its key (`url client_id`), the alarm's subject.
    pub id: String,
    /// What a person reads: the broker's URL and the lab name it publishes as.
    pub name: String,
    /// The publisher's own verdict, with its hysteresis: behind by more than the limit (and not yet back
    /// under half of it).
    pub behind: bool,
    /// How far behind the store, real seconds.
    pub lag_s: f64,
    /// The limit (`lag_alarm_s`), s.
    pub limit_s: f64,
}

/// A transition the engine decided.
#[derive(Clone, Debug, PartialEq)]
pub enum Transition {
    /// A condition began.
    Raise {
        /// About what.
        subject: Subject,
        /// Which.
        code: Code,
        /// What a person reads.
        message: String,
        /// Details.
        data: serde_json::Value,
    },
    /// A condition ended.
    Clear {
        /// About what.
        subject: Subject,
        /// Which.
        code: Code,
        /// What a person reads.
        message: String,
    },
}

/// The bits of the latest (displacement, load, temperature).
type ChannelBits = (Option<u64>, Option<u64>, Option<u64>);

/// Per-frame memory between evaluations.
#[derive(Clone, Debug, Default)]
struct FrameMemory {
    refused_seen: u64,
    last_refused_us: Option<i64>,
    /// (displacement, load, temperature) and since when unchanged.
    frozen: Option<(ChannelBits, i64)>,
}

/// The alarm conditions' state machine (see the module docs).
#[derive(Debug)]
pub struct AlarmEngine {
    rules: AlarmRules,
    open: BTreeMap<(Subject, Code), i64>,
    frames: Vec<FrameMemory>,
    /// Per bus: (at µs, requests, errors) samples over the window.
    buses: BTreeMap<String, VecDeque<(i64, u64, u64)>>,
    started_us: i64,
}

impl AlarmEngine {
    /// An engine with `rules`, started at `now_us` (the reference for "no reading yet"), that knows the
    /// alarms `open` from an earlier run (so they are not raised twice).
    pub fn new(rules: AlarmRules, now_us: i64, open: impl IntoIterator<Item = (Subject, Code)>) -> Self {
        AlarmEngine {
            rules,
            open: open.into_iter().map(|k| (k, now_us)).collect(),
            frames: Vec::new(),
            buses: BTreeMap::new(),
            started_us: now_us,
        }
    }

    /// Whether an alarm is open.
    #[cfg(test)]
    pub(crate) fn is_open(&self, subject: &Subject, code: Code) -> bool {
        self.open.contains_key(&(subject.clone(), code))
    }

    /// The transitions at `now_us`.
    pub fn evaluate(&mut self, now_us: i64, frames: &[FrameInput], buses: &[BusInput]) -> Vec<Transition> {
        let mut out = Vec::new();
        if self.frames.len() < frames.len() {
            self.frames.resize(frames.len(), FrameMemory::default());
        }
        for (index, frame) in frames.iter().enumerate() {
            self.frame(now_us, index, frame, &mut out);
        }
        for bus in buses {
            self.bus(now_us, bus, &mut out);
        }
        out
    }

    /// Raises or clears `code` on `subject` when `condition` (is it on? `None`: cannot tell, or inside the
    /// hysteresis) differs from its state.
    fn set(
        &mut self,
        now_us: i64,
        subject: &Subject,
        code: Code,
        condition: Option<bool>,
        raise: impl FnOnce() -> (String, serde_json::Value),
        clear: impl FnOnce() -> String,
    ) -> Option<Transition> {
        let key = (subject.clone(), code);
        let open = self.open.contains_key(&key);
        match condition {
            Some(true) if !open => {
                let (message, data) = raise();
                self.open.insert(key, now_us);
                Some(Transition::Raise { subject: subject.clone(), code, message, data })
            }
            Some(false) if open => {
                self.open.remove(&key);
                Some(Transition::Clear { subject: subject.clone(), code, message: clear() })
            }
            // Inside the hysteresis band, or nothing to judge by: as it was.
            _ => None,
        }
    }

    fn frame(&mut self, now_us: i64, index: usize, f: &FrameInput, out: &mut Vec<Transition>) {
        let subject = Subject::Frame(index);
        let rules = self.rules.clone();
        let id = f.id.clone();

        // Stale: only while a test runs (an idle frame without a gauge is not news). The daemon's start
        // counts as a reading, so a restart gives acquisition its stale time before judging.
        let stale_after = rules.stale_after.unwrap_or(f.stale_after).as_micros() as i64;
        let newest = f.last_reading_us.unwrap_or(self.started_us).max(self.started_us);
        let age_us = now_us - newest;
        let stale = if f.testing { Some(age_us > stale_after) } else { Some(false) };
        out.extend(self.set(
            now_us,
            &subject,
            Code::Stale,
            stale,
            || {
                (
                    format!(
                        "frame {id}: no valid reading for {:.0} s (limit {:.0} s)",
                        age_us as f64 / 1e6,
                        stale_after as f64 / 1e6
                    ),
                    serde_json::json!({"age_s": age_us as f64 / 1e6, "limit_s": stale_after as f64 / 1e6}),
                )
            },
            || format!("frame {}: readings again", f.id),
        ));

        // Gauge travel: within the margin of an end raises, out past twice the margin clears.
        if let (Some(d), Some(travel)) = (f.displacement_mm, f.travel_mm.clone()) {
            let margin = rules.travel_margin * (travel.end - travel.start);
            let room = (d - travel.start).min(travel.end - d);
            let condition = if room <= margin {
                Some(true)
            } else if room > 2.0 * margin {
                Some(false)
            } else {
                None
            };
            let end = if d - travel.start < travel.end - d { "start" } else { "end" };
            out.extend(self.set(
                now_us,
                &subject,
                Code::GaugeTravel,
                condition,
                || {
                    (
                        format!(
                            "frame {id}: gauge reads {d:.3} mm, {room:.3} mm from the {end} of its travel {:.1}…{:.1} mm: re-set it at the next load change",
                            travel.start, travel.end
                        ),
                        serde_json::json!({"displacement_mm": d, "travel_mm": [travel.start, travel.end], "room_mm": room}),
                    )
                },
                || format!("frame {}: gauge clear of the ends of its travel", f.id),
            ));
        }

        // Out of range: any value refused since the last look; clears after the hold with none.
        let memory = &mut self.frames[index];
        let newly_refused = f.refused_values.saturating_sub(memory.refused_seen);
        memory.refused_seen = f.refused_values;
        if newly_refused > 0 {
            memory.last_refused_us = Some(now_us);
        }
        let hold = rules.refused_hold.as_micros() as i64;
        let refused = Some(memory.last_refused_us.is_some_and(|at| now_us - at < hold));
        out.extend(self.set(
            now_us,
            &subject,
            Code::OutOfRange,
            refused,
            || {
                (
                    format!("frame {id}: {newly_refused} value(s) outside the channel's range refused (not stored)"),
                    serde_json::json!({"refused": newly_refused, "refused_total": f.refused_values}),
                )
            },
            || format!("frame {}: no value refused for {:.0} s", f.id, hold as f64 / 1e6),
        ));

        // Stuck: every channel returns exactly the same value (bit for bit) for the stuck time.
        let values =
            (f.displacement_mm.map(f64::to_bits), f.load_kn.map(f64::to_bits), f.temperature_c.map(f64::to_bits));
        let memory = &mut self.frames[index];
        let since = match memory.frozen {
            Some((v, since)) if v == values => since,
            _ => {
                memory.frozen = Some((values, now_us));
                now_us
            }
        };
        let has_values = values.0.is_some() || values.1.is_some();
        let stuck_after = rules.stuck_after.as_micros() as i64;
        let stuck = Some(has_values && f.testing && now_us - since >= stuck_after);
        out.extend(self.set(
            now_us,
            &subject,
            Code::Stuck,
            stuck,
            || {
                (
                    format!(
                        "frame {id}: every channel has returned exactly the same value for {:.0} min: a frozen transmitter or a stuck plunger?",
                        (now_us - since) as f64 / 6e7
                    ),
                    serde_json::json!({"since_s": (now_us - since) as f64 / 1e6}),
                )
            },
            || format!("frame {}: values changing again", f.id),
        ));

        // Load drift: the watch's ±0.5 % check (which has its own persistence) while a test runs.
        out.extend(self.set(
            now_us,
            &subject,
            Code::LoadDrift,
            Some(f.testing && f.load_off),
            || {
                (
                    format!(
                        "frame {id}: load {} kN is off the increment's expected force by more than ±0.5 %",
                        f.load_kn.map_or("—".into(), |l| format!("{l:.4}"))
                    ),
                    serde_json::json!({"load_kn": f.load_kn}),
                )
            },
            || format!("frame {}: load back within ±0.5 %", f.id),
        ));

        // Temperature: outside the band raises; back inside by a tenth of the band clears.
        if let Some(t) = f.temperature_c {
            let band = rules.temperature_band_c.clone();
            let inset = 0.1 * (band.end - band.start);
            let condition = if t < band.start || t > band.end {
                Some(true)
            } else if t >= band.start + inset && t <= band.end - inset {
                Some(false)
            } else {
                None
            };
            out.extend(self.set(
                now_us,
                &subject,
                Code::Temperature,
                condition,
                || {
                    (
                        format!("frame {id}: temperature {t:.2} °C outside {:.1}…{:.1} °C", band.start, band.end),
                        serde_json::json!({"temperature_c": t, "band_c": [band.start, band.end]}),
                    )
                },
                || format!("frame {}: temperature back in its band", f.id),
            ));
        }
    }

    /// The transitions of the outlets at `now_us`.
    pub fn evaluate_outlets(&mut self, now_us: i64, outlets: &[OutletInput]) -> Vec<Transition> {
        let mut out = Vec::new();
        for o in outlets {
            out.extend(self.set(
                now_us,
                &Subject::Outlet(o.id.clone()),
                Code::PublishLag,
                Some(o.behind),
                || {
                    (
                        format!(
                            "publishing to {} fell behind the store by more than its limit of {:.0} s ({:.1} s when raised): every reading is kept and goes out when the broker takes it",
                            o.name, o.limit_s, o.lag_s
                        ),
                        serde_json::json!({"lag_s": o.lag_s, "limit_s": o.limit_s}),
                    )
                },
                || format!("publishing to {} caught up", o.name),
            ));
        }
        out
    }

    fn bus(&mut self, now_us: i64, bus: &BusInput, out: &mut Vec<Transition>) {
        let window = self.rules.bus_window.as_micros() as i64;
        let samples = self.buses.entry(bus.id.clone()).or_default();
        samples.push_back((now_us, bus.requests, bus.errors));
        while samples.len() > 2 && samples.get(1).is_some_and(|s| now_us - s.0 >= window) {
            samples.pop_front();
        }
        let Some(&(_, r0, e0)) = samples.front() else { return };
        let (requests, errors) = (bus.requests.saturating_sub(r0), bus.errors.saturating_sub(e0));
        let threshold = self.rules.bus_error_rate;
        let condition = if requests < self.rules.bus_min_requests {
            None
        } else {
            let rate = errors as f64 / requests as f64;
            if rate > threshold {
                Some(true)
            } else if rate <= threshold / 2.0 {
                Some(false)
            } else {
                None
            }
        };
        let id = bus.id.clone();
        let minutes = window as f64 / 6e7;
        out.extend(self.set(
            now_us,
            &Subject::Bus(bus.id.clone()),
            Code::BusErrors,
            condition,
            || {
                (
                    format!(
                        "bus {id}: {errors} of {requests} requests failed in the last {minutes:.0} min ({:.0} %, limit {:.0} %): check the cable, termination and power",
                        100.0 * errors as f64 / requests.max(1) as f64,
                        100.0 * threshold
                    ),
                    serde_json::json!({"requests": requests, "errors": errors, "rate": errors as f64 / requests.max(1) as f64}),
                )
            },
            || format!("bus {}: failures back under {:.0} %", bus.id, 50.0 * threshold),
        ));
    }
}

#[cfg(test)]
mod tests;
