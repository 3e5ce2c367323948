//! Acquisition: one task per bus polls its frames, decodes and checks every value, and hands valid
//! readings to the store; faults become counters and events. A failing bus never disturbs another.
//!
//! Nothing below this module touches a port; nothing here knows SQL or HTTP beyond the store's
//! [`Writer`] and the shared [`Live`] view.

pub mod backoff;
pub mod gauge;
pub mod link;
pub mod modbus;

use std::sync::{Arc, RwLock};
use std::time::Duration;

use oedolog_protocol::UnitId;
use oedolog_protocol::registers::RegisterMap;
use oedolog_protocol::{Request, registers::RegisterTable};
use serde::Serialize;

use crate::clock::Clock;
use crate::config::{BusKind, Calibration, Channel, Config, Frame, PollSchedule};
use crate::store::{ChannelKind, Event, EventKind, Reading, ReadingSet, Writer};

/// Shortest real wait between two polls of one frame on a fast (demo) clock.
pub const MIN_REAL_POLL: Duration = Duration::from_millis(20);
/// Refused-value events for one channel are repeated at most this often (clock time) while it stays bad.
pub const REFUSED_EVENT_EVERY_US: i64 = 600_000_000;

/// Per-device counters (the dashboard and `/metrics` show them).
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Serialize)]
pub struct Counters {
    /// Requests sent (each attempt counts).
    pub requests: u64,
    /// Requests with no reply by the deadline.
    pub timeouts: u64,
    /// Replies whose CRC failed (RTU) or whose MBAP header was out of step (TCP).
    pub crc_errors: u64,
    /// Exception replies.
    pub exceptions: u64,
    /// Replies refused for breaking the protocol (short, wrong unit, bad echo).
    pub bad_frames: u64,
    /// Values decoded but refused (not finite or outside the channel's range).
    pub refused_values: u64,
    /// Valid readings handed to the store.
    pub readings: u64,
}

/// The latest state of one frame as acquisition sees it.
#[derive(Clone, Debug, Default, Serialize)]
pub struct LiveFrame {
    /// Config id.
    pub id: String,
    /// Name.
    pub name: String,
    /// Store key.
    #[serde(skip)]
    pub key: i64,
    /// Latest valid displacement, mm, and when.
    pub displacement: Option<(i64, f64)>,
    /// Latest valid load, kN, and when.
    pub load: Option<(i64, f64)>,
    /// Latest valid temperature, °C, and when.
    pub temperature: Option<(i64, f64)>,
    /// Whether its bus link is up.
    pub bus_up: bool,
    /// Counters.
    pub counters: Counters,
}

impl LiveFrame {
    /// The newest valid reading of any channel, µs.
    pub fn last_reading_us(&self) -> Option<i64> {
        [self.displacement, self.load, self.temperature].into_iter().flatten().map(|(at, _)| at).max()
    }
}

/// What every acquisition task shares with the rest of the daemon.
#[derive(Clone)]
pub struct Live {
    frames: Arc<RwLock<Vec<LiveFrame>>>,
}

impl Live {
    /// One entry per configured frame, in config order.
    pub fn new(frames: Vec<LiveFrame>) -> Self {
        Live { frames: Arc::new(RwLock::new(frames)) }
    }

    /// A copy of every frame's state.
    pub fn snapshot(&self) -> Vec<LiveFrame> {
        self.frames.read().unwrap_or_else(|e| e.into_inner()).clone()
    }

    /// Changes frame `index`.
    pub fn update(&self, index: usize, f: impl FnOnce(&mut LiveFrame)) {
        if let Some(frame) = self.frames.write().unwrap_or_else(|e| e.into_inner()).get_mut(index) {
            f(frame);
        }
    }
}

/// Where a bus task sends what it learns.
#[derive(Clone)]
pub struct Sinks {
    /// The store's writer.
    pub writer: Writer,
    /// The live view.
    pub live: Live,
    /// The clock readings are stamped with.
    pub clock: Arc<dyn Clock>,
    /// Where valid readings also go for the live watch.
    pub tap: Option<std::sync::mpsc::Sender<Reading>>,
}

impl Sinks {
    /// Journals an event (a stopped writer is logged, never fatal to acquisition).
    pub fn event(&self, frame_key: Option<i64>, kind: EventKind, message: String) {
        tracing::info!(kind = kind.name(), "{message}");
        let event = Event { at_us: self.clock.now_us(), frame_key, kind, message, actor: None, data: None };
        if let Err(error) = self.writer.event(event) {
            tracing::error!("event not stored: {error}");
        }
    }
}

/// One channel of a frame, ready to be read from a block of registers.
#[derive(Clone, Debug)]
pub struct ChannelPlan {
    /// Which channel.
    pub kind: ChannelKind,
    /// Its register map (None on a line gauge).
    pub register: Option<RegisterMap>,
    /// Raw → value.
    pub calibration: Calibration,
    /// Valid values.
    pub range: std::ops::Range<f64>,
}

/// A read request covering one or more channels, and where each channel's words sit in the reply.
#[derive(Clone, Debug)]
pub struct ReadPlan {
    /// The request.
    pub request: Request,
    /// (channel index in [`PolledFrame::channels`], first word in the reply).
    pub parts: Vec<(usize, usize)>,
}

/// A frame as its bus task polls it.
#[derive(Clone, Debug)]
pub struct PolledFrame {
    /// Index in the config and in [`Live`].
    pub index: usize,
    /// Config id.
    pub id: String,
    /// Store key.
    pub key: i64,
    /// Modbus unit.
    pub unit: UnitId,
    /// Channels.
    pub channels: Vec<ChannelPlan>,
    /// Requests that read them (shared: a poll walks them while the frame takes readings).
    pub reads: Arc<[ReadPlan]>,
    /// Poll periods.
    pub poll: PollSchedule,
    /// Fast polling lasts until this clock instant, µs.
    pub fast_until_us: i64,
    /// The last valid load, kN, for spotting a load change.
    pub last_load_kn: Option<f64>,
    /// Per channel: since when values have been refused (clock µs), and when the last event was.
    pub refused: Vec<Option<(i64, i64, u64)>>,
}

fn channel_plan(kind: ChannelKind, channel: &Channel) -> ChannelPlan {
    ChannelPlan {
        kind,
        register: channel.register.clone(),
        calibration: channel.calibration.clone(),
        range: channel.range.clone(),
    }
}

/// Groups channels into as few reads as possible: same table, one block of at most 125 registers.
pub fn plan_reads(channels: &[ChannelPlan]) -> Vec<ReadPlan> {
    let mut order: Vec<usize> = (0..channels.len()).filter(|&i| channels[i].register.is_some()).collect();
    let map = |i: usize| channels[i].register.as_ref().expect("filtered");
    order.sort_by_key(|&i| (map(i).table == RegisterTable::Input, map(i).address));
    // (table, first address, end address, (channel, its address))
    type Block = (RegisterTable, u16, u16, Vec<(usize, u16)>);
    let mut plans: Vec<Block> = Vec::new();
    for i in order {
        let m = map(i);
        let end = m.address + m.quantity();
        match plans.last_mut() {
            Some((table, start, stop, parts))
                if *table == m.table && u32::from(end.max(*stop)) - u32::from(*start) <= 125 =>
            {
                *stop = (*stop).max(end);
                parts.push((i, m.address));
            }
            _ => plans.push((m.table, m.address, end, vec![(i, m.address)])),
        }
    }
    plans
        .into_iter()
        .map(|(table, start, stop, parts)| {
            let quantity = stop - start;
            let request = match table {
                RegisterTable::Holding => Request::ReadHoldingRegisters { address: start, quantity },
                RegisterTable::Input => Request::ReadInputRegisters { address: start, quantity },
            };
            ReadPlan { request, parts: parts.into_iter().map(|(i, a)| (i, usize::from(a - start))).collect() }
        })
        .collect()
}

impl PolledFrame {
    /// Builds the poll plan of config frame `index` with store key `key`.
    pub fn new(index: usize, frame: &Frame, key: i64) -> Self {
        let mut channels = vec![channel_plan(ChannelKind::Displacement, &frame.displacement)];
        if let Some(load) = &frame.load {
            channels.push(channel_plan(ChannelKind::Load, load));
        }
        if let Some(t) = &frame.temperature {
            channels.push(channel_plan(ChannelKind::Temperature, t));
        }
        let reads = plan_reads(&channels).into();
        let refused = vec![None; channels.len()];
        PolledFrame {
            index,
            id: frame.id.clone(),
            key,
            unit: frame.unit,
            channels,
            reads,
            poll: frame.poll,
            fast_until_us: i64::MIN,
            last_load_kn: None,
            refused,
        }
    }

    /// The clock period until the next poll.
    pub fn period(&self, now_us: i64) -> Duration {
        if now_us < self.fast_until_us { self.poll.fast } else { self.poll.steady }
    }

    /// Checks a raw value of channel `ci` and, when valid, stores it; refused values raise events
    /// (when a channel turns bad, then at most every [`REFUSED_EVENT_EVERY_US`], and when it recovers).
    pub fn accept(&mut self, ci: usize, raw: f64, at_us: i64, sinks: &Sinks) {
        if let Some(reading) = self.check(ci, raw, at_us, sinks) {
            let mut set = ReadingSet::default();
            let _ = set.push(reading);
            self.store(set, &Counters::default(), sinks);
        }
    }

    /// Hands the valid readings of one reply to the store and the live watch, and counts them with the
    /// exchange's `counters` in the live view: one message to the writer, one update of the view.
    pub fn store(&self, set: ReadingSet, counters: &Counters, sinks: &Sinks) {
        let stored = !set.is_empty() && {
            match sinks.writer.readings(set) {
                Ok(()) => true,
                Err(error) => {
                    tracing::error!("readings not stored: {error}");
                    false
                }
            }
        };
        if stored && let Some(tap) = &sinks.tap {
            for &r in set.iter() {
                let _ = tap.send(r);
            }
        }
        sinks.live.update(self.index, |f| {
            let t = &mut f.counters;
            t.requests += counters.requests;
            t.timeouts += counters.timeouts;
            t.crc_errors += counters.crc_errors;
            t.exceptions += counters.exceptions;
            t.bad_frames += counters.bad_frames;
            t.refused_values += counters.refused_values;
            if stored {
                for r in set.iter() {
                    t.readings += 1;
                    let slot = match r.channel {
                        ChannelKind::Displacement => &mut f.displacement,
                        ChannelKind::Load => &mut f.load,
                        ChannelKind::Temperature => &mut f.temperature,
                    };
                    *slot = Some((r.at_us, r.value));
                }
            }
        });
    }

    /// Checks a raw value of channel `ci`: the reading when valid (a load change opens the fast poll
    /// window); refused values are counted and journalled as [`PolledFrame::accept`] says.
    pub fn check(&mut self, ci: usize, raw: f64, at_us: i64, sinks: &Sinks) -> Option<Reading> {
        let plan = &self.channels[ci];
        let value = plan.calibration.apply(raw);
        let kind = plan.kind;
        if !(value.is_finite() && plan.range.contains(&value)) {
            sinks.live.update(self.index, |f| f.counters.refused_values += 1);
            let (lo, hi) = (plan.range.start, plan.range.end);
            match &mut self.refused[ci] {
                None => {
                    self.refused[ci] = Some((at_us, at_us, 1));
                    sinks.event(
                        Some(self.key),
                        EventKind::ValueRefused,
                        format!(
                            "frame {}: {} value {value} (raw {raw}) outside {lo} … {hi}; not stored",
                            self.id,
                            kind.name()
                        ),
                    );
                }
                Some((_, last_event, count)) => {
                    *count += 1;
                    if at_us - *last_event >= REFUSED_EVENT_EVERY_US {
                        *last_event = at_us;
                        sinks.event(
                            Some(self.key),
                            EventKind::ValueRefused,
                            format!(
                                "frame {}: {} still refused ({count} values so far; latest {value})",
                                self.id,
                                kind.name()
                            ),
                        );
                    }
                }
            }
            return None;
        }
        if let Some((since, _, count)) = self.refused[ci].take() {
            let minutes = (at_us - since) as f64 / 60e6;
            sinks.event(
                Some(self.key),
                EventKind::ValueRecovered,
                format!(
                    "frame {}: {} valid again after {count} refused values over {minutes:.1} min",
                    self.id,
                    kind.name()
                ),
            );
        }
        if kind == ChannelKind::Load {
            // A load change starts the fast poll window, for the early readings of the increment.
            if let Some(last) = self.last_load_kn
                && (value - last).abs() > (0.01 * last.abs()).max(0.005)
            {
                self.fast_until_us = at_us + self.poll.fast_window.as_micros() as i64;
            }
            self.last_load_kn = Some(value);
        }
        Some(Reading { frame_key: self.key, channel: kind, at_us, raw, value })
    }
}

/// Runs a Modbus bus on a thread of its own (`name`), with a single-threaded runtime: an RTU line's
/// silences end with a thread sleep (tokio's 1 ms timer is too coarse for t3.5), a TCP link reads and writes
/// with blocking calls ([`link::BlockingTcp`]); neither may hold up another task. Returns a task on the
/// caller's runtime that stands for it: aborting or dropping that task stops the bus at its next wait.
fn spawn_bus_thread(
    name: &str,
    bus: impl std::future::Future<Output = ()> + Send + 'static,
) -> tokio::task::JoinHandle<()> {
    let (stop_tx, stop_rx) = tokio::sync::oneshot::channel::<()>();
    std::thread::Builder::new()
        .name(name.into())
        .spawn(move || {
            let runtime =
                tokio::runtime::Builder::new_current_thread().enable_all().build().expect("a runtime for a bus thread");
            runtime.block_on(async move {
                tokio::select! {
                    () = bus => {}
                    _ = stop_rx => {}
                }
            });
        })
        .expect("spawn a bus thread");
    tokio::spawn(async move {
        let _stop_when_dropped = stop_tx;
        std::future::pending::<()>().await
    })
}

/// Starts one task per bus of `config`; `keys[i]` is the store key of config frame `i`.
pub fn spawn_buses(config: &Config, keys: &[i64], sinks: &Sinks) -> Vec<tokio::task::JoinHandle<()>> {
    let mut tasks = Vec::new();
    for (bi, bus) in config.buses.iter().enumerate() {
        let frames: Vec<PolledFrame> = config
            .frames
            .iter()
            .enumerate()
            .filter(|(_, f)| f.bus == bi)
            .map(|(i, f)| PolledFrame::new(i, f, keys[i]))
            .collect();
        if frames.is_empty() {
            continue;
        }
        let sinks = sinks.clone();
        let id = bus.id.clone();
        let task = match &bus.kind {
            BusKind::Rtu(line) => {
                let connector = link::SerialConnector::for_line(line);
                let settings =
                    modbus::LinkSettings { timeout: line.timeout, retries: line.retries, gap: line.gap, rtu: true };
                spawn_bus_thread("oedolog-rtu", modbus::run_bus(id, connector, settings, frames, sinks))
            }
            BusKind::Tcp(tcp) => {
                let connector = link::BlockingTcpConnector { address: tcp.address.clone(), timeout: tcp.timeout };
                let settings = modbus::LinkSettings {
                    timeout: tcp.timeout,
                    retries: tcp.retries,
                    gap: Duration::ZERO,
                    rtu: false,
                };
                spawn_bus_thread("oedolog-tcp", modbus::run_bus(id, connector, settings, frames, sinks))
            }
            BusKind::LineGauge(g) => {
                let connector =
                    link::SerialConnector { device: g.device.clone(), baud: g.baud, parity: g.parity, stop_bits: 1 };
                let frame = frames.into_iter().next().expect("checked non-empty");
                tokio::spawn(gauge::run_bus(id, connector, g.clone(), frame, sinks))
            }
        };
        tasks.push(task);
    }
    tasks
}

#[cfg(test)]
mod tests {
    use super::*;
    use oedolog_protocol::registers::{ValueType, WordOrder};

    fn ch(kind: ChannelKind, table: RegisterTable, address: u16, value_type: ValueType) -> ChannelPlan {
        ChannelPlan {
            kind,
            register: Some(RegisterMap {
                table,
                address,
                value_type,
                word_order: WordOrder::HighFirst,
                scale: 1.0,
                offset: 0.0,
            }),
            calibration: Calibration::Linear { gain: 1.0, offset: 0.0 },
            range: 0.0..1.0,
        }
    }

    #[test]
    fn adjacent_channels_share_one_read() {
        let channels = vec![
            ch(ChannelKind::Displacement, RegisterTable::Input, 0, ValueType::I32),
            ch(ChannelKind::Load, RegisterTable::Input, 2, ValueType::I32),
            ch(ChannelKind::Temperature, RegisterTable::Input, 4, ValueType::I16),
        ];
        let plans = plan_reads(&channels);
        assert_eq!(plans.len(), 1);
        assert_eq!(plans[0].request, Request::ReadInputRegisters { address: 0, quantity: 5 });
        assert_eq!(plans[0].parts, vec![(0, 0), (1, 2), (2, 4)]);
    }

    #[test]
    fn other_tables_and_far_addresses_get_their_own_reads() {
        let channels = vec![
            ch(ChannelKind::Displacement, RegisterTable::Holding, 10, ValueType::F32),
            ch(ChannelKind::Load, RegisterTable::Input, 0, ValueType::I32),
            ch(ChannelKind::Temperature, RegisterTable::Input, 300, ValueType::I16),
        ];
        let plans = plan_reads(&channels);
        assert_eq!(plans.len(), 3);
        assert_eq!(plans[0].request, Request::ReadHoldingRegisters { address: 10, quantity: 2 });
        assert_eq!(plans[1].request, Request::ReadInputRegisters { address: 0, quantity: 2 });
        assert_eq!(plans[2].request, Request::ReadInputRegisters { address: 300, quantity: 1 });
    }
}
