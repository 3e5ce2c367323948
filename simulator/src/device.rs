//! One simulated loading frame as a Modbus device, and the set of frames a simulator serves.
//!
//! A [`SimFrame`] joins the forward model (physics), the instruments (sensors) and the register map;
//! [`Simulation`] owns every frame, its schedule and faults, and answers requests. Transports live in
//! [`crate::server`]; nothing here does I/O or reads a clock — `at_s` comes from the caller.

use oedolog_protocol::registers::{WordOrder, encode_u32};
use oedolog_protocol::{ExceptionCode, Request, Response, UnitId};
use rand::rngs::SmallRng;
use rand::{Rng, SeedableRng};

use crate::faults::{FaultKind, FaultSetting, Faults};
use crate::physics::{FrameModel, IncrementTruth, ModelError};
use crate::scenario::{AutoSchedule, demo_frame};
use crate::sensors::{Gauge, LoadCell, TemperatureSensor};

/// Input registers 0–7 (FC 04), also mirrored read-only at holding registers 100–107 (FC 03).
pub const INPUT_BLOCK_LEN: u16 = 8;
/// Holding register 0: the averaging count, 1..=64.
pub const HOLDING_AVERAGING: u16 = 0;
/// Holding registers 1–8: a 16-byte ASCII frame tag.
pub const HOLDING_TAG: std::ops::Range<u16> = 1..9;
/// First holding register of the read-only mirror of the input block.
pub const HOLDING_MIRROR: u16 = 100;
/// Status bit 0: the gauge is at an end of its travel.
pub const STATUS_GAUGE_OUT_OF_TRAVEL: u16 = 1 << 0;
/// Status bit 1: the load cell is over its range.
pub const STATUS_LOAD_OVER_RANGE: u16 = 1 << 1;
/// Status bit 2: the load is changing (an increment's load going on).
pub const STATUS_LOAD_CHANGING: u16 = 1 << 2;
/// Displacement register unit: 0.1 µm per count.
pub const DISPLACEMENT_MM_PER_COUNT: f64 = 1e-4;
/// Load register unit: 0.1 N per count.
pub const LOAD_N_PER_COUNT: f64 = 0.1;
/// Temperature register unit: 0.01 °C per count.
pub const TEMPERATURE_C_PER_COUNT: f64 = 0.01;

/// One simulated frame: specimen physics, instruments, registers and faults.
#[derive(Debug)]
pub struct SimFrame {
    unit: UnitId,
    model: FrameModel,
    schedule: Option<AutoSchedule>,
    gauge: Gauge,
    load_cell: LoadCell,
    temperature: TemperatureSensor,
    averaging: u16,
    tag: [u16; 8],
    samples: u32,
    travel_pin_mm: Option<f64>,
    faults: Faults,
    rng: SmallRng,
    /// Loads the schedule applied that nobody has collected yet: (onset, stress).
    applied: Vec<(f64, f64)>,
    /// The schedule only says what comes next; loads go on by [`SimFrame::put_on_next_load`].
    following: bool,
}

/// The latest sample of a frame's instruments, in engineering units (what the registers hold).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Sample {
    /// Gauge reading, mm.
    pub displacement_mm: f64,
    /// Load, N.
    pub load_n: f64,
    /// Temperature, °C.
    pub temperature_c: f64,
    /// Status bits.
    pub status: u16,
    /// Samples taken so far.
    pub counter: u32,
}

fn clamp_i32(value: f64) -> i32 {
    value.round().clamp(f64::from(i32::MIN), f64::from(i32::MAX)) as i32
}

impl SimFrame {
    /// Frame `index` (unit id `index + 1`) of the demo scenario, gauge zeroed under seating at `at_s`;
    /// `automatic` gives it the automatic load schedule, else loads come only by [`SimFrame::apply_stress`].
    pub fn demo(index: usize, at_s: f64, automatic: bool, seed: u64) -> Result<SimFrame, ModelError> {
        let (model, schedule) = demo_frame(index, at_s)?;
        let unit = UnitId(u8::try_from(index + 1).unwrap_or(u8::MAX));
        let mut tag = [0u16; 8];
        let text = format!("{:<16}", model.specimen().id);
        for (word, pair) in tag.iter_mut().zip(text.as_bytes().chunks(2)) {
            *word = u16::from_be_bytes([pair[0], *pair.get(1).unwrap_or(&b' ')]);
        }
        let temperature = TemperatureSensor { seed: seed ^ (index as u64) << 8, ..TemperatureSensor::default() };
        Ok(SimFrame {
            unit,
            model,
            schedule: automatic.then_some(schedule),
            following: false,
            gauge: Gauge::standard(),
            load_cell: LoadCell::standard(),
            temperature,
            averaging: 4,
            tag,
            samples: 0,
            travel_pin_mm: None,
            faults: Faults::default(),
            rng: SmallRng::seed_from_u64(seed.wrapping_add(index as u64 * 0x9E37_79B9)),
            applied: Vec::new(),
        })
    }

    /// The frame's unit id.
    pub fn unit(&self) -> UnitId {
        self.unit
    }

    /// The forward model (the truth a test compares with).
    pub fn model(&self) -> &FrameModel {
        &self.model
    }

    /// The frame's faults.
    pub fn faults(&self) -> &Faults {
        &self.faults
    }

    /// Applies the schedule's steps due up to `at_s`, each at its own due time (so the truth's onset
    /// does not depend on when the simulator was asked). Every poll advances the schedule too; the loads
    /// applied wait in [`SimFrame::take_applied`] until collected.
    pub fn advance(&mut self, at_s: f64) {
        let applied = &mut self.applied;
        let Some(schedule) = self.schedule.as_mut().filter(|_| !self.following) else { return };
        while let Some(due_s) = schedule.due_at_s(&self.model) {
            if due_s > at_s {
                break;
            }
            let Some(stress_kpa) = schedule.next_action(&self.model, due_s) else { break };
            if self.model.apply_stress(stress_kpa, due_s).is_ok() {
                applied.push((due_s, stress_kpa));
            }
        }
    }

    /// The automatic schedule's next load: (when it is due on the simulated timeline, stress), so a demo's
    /// stand-in technician can enter it before putting it on.
    pub fn next_load(&self) -> Option<(f64, f64)> {
        let schedule = self.schedule.as_ref()?;
        let due_s = schedule.due_at_s(&self.model)?;
        Some((due_s, *schedule.steps_kpa().get(schedule.next_step())?))
    }

    /// Stops the schedule from moving on by itself: from now on its steps go on only when someone calls
    /// [`SimFrame::put_on_next_load`] (the demo's technician does when the daemon says `ready`).
    pub fn follow(&mut self) {
        self.following = true;
    }

    /// The next step of the schedule, without giving it: (the first step's due time, for the first load
    /// only, else `None`; stress). `None` once the schedule has no step left (or there is no schedule).
    pub fn upcoming_load(&self) -> Option<(Option<f64>, f64)> {
        let schedule = self.schedule.as_ref()?;
        let stress_kpa = *schedule.steps_kpa().get(schedule.next_step())?;
        Some(((schedule.next_step() == 0).then_some(schedule.start_at_s()), stress_kpa))
    }

    /// Puts the schedule's next step on now, at `at_s`; returns its stress, `Ok(None)` when the schedule
    /// has ended.
    pub fn put_on_next_load(&mut self, at_s: f64) -> Result<Option<f64>, ModelError> {
        let Some(stress_kpa) = self.schedule.as_mut().and_then(AutoSchedule::take_next) else { return Ok(None) };
        self.model.apply_stress(stress_kpa, at_s)?;
        self.applied.push((at_s, stress_kpa));
        Ok(Some(stress_kpa))
    }

    /// The loads the schedule applied since the last call: (onset on the simulated timeline, stress).
    pub fn take_applied(&mut self) -> Vec<(f64, f64)> {
        std::mem::take(&mut self.applied)
    }

    /// A load change on command (the test's stand-in for the technician); it happens at `at_s`.
    pub fn apply_stress(&mut self, stress_kpa: f64, at_s: f64) -> Result<(), ModelError> {
        self.model.apply_stress(stress_kpa, at_s)
    }

    /// The technician re-seats the gauge: from now on the reading is `reading_after_mm`. Returns the jump.
    pub fn reseat_gauge(&mut self, reading_after_mm: f64, at_s: f64) -> Result<f64, String> {
        self.travel_pin_mm = None;
        self.faults.travel = false;
        self.gauge.reseat(self.model.displacement_mm(at_s), reading_after_mm).map_err(|e| e.to_string())
    }

    /// Sets one fault.
    pub fn set_fault(&mut self, setting: FaultSetting) {
        self.faults.set(setting);
        match setting.kind {
            FaultKind::Stuck => {
                self.gauge.set_stuck(self.faults.stuck);
                self.load_cell.set_stuck(self.faults.stuck);
            }
            FaultKind::Travel if !self.faults.travel => self.travel_pin_mm = None,
            _ => {}
        }
    }

    /// Sets how late a delayed reply comes and how long a disconnect lasts.
    pub fn set_fault_timing(&mut self, delay_ms: u64, disconnect_s: f64) {
        self.faults.delay_ms = delay_ms;
        self.faults.disconnect_s = disconnect_s;
    }

    /// A uniform draw in [0, 1) from the frame's own generator (for fault decisions and noise bytes).
    pub fn uniform(&mut self) -> f64 {
        self.rng.random::<f64>()
    }

    /// Random bytes from the frame's generator.
    pub fn noise_bytes(&mut self, n: usize) -> Vec<u8> {
        (0..n).map(|_| self.rng.random::<u8>()).collect()
    }

    /// Takes one sample of every instrument at `at_s`.
    pub fn sample(&mut self, at_s: f64) -> Sample {
        self.advance(at_s);
        let gauge = self.gauge.read(self.model.displacement_mm(at_s), &mut self.rng);
        let load = self.load_cell.read(self.model.load_n(at_s), &mut self.rng);
        let mut displacement_mm = gauge.reading_mm;
        let mut status = 0;
        if self.faults.travel {
            let pin = *self.travel_pin_mm.get_or_insert(displacement_mm);
            displacement_mm = pin;
            status |= STATUS_GAUGE_OUT_OF_TRAVEL;
        }
        if gauge.out_of_travel {
            status |= STATUS_GAUGE_OUT_OF_TRAVEL;
        }
        if load.over_range {
            status |= STATUS_LOAD_OVER_RANGE;
        }
        if (self.model.stress_kpa(at_s) - self.model.target_stress_kpa()).abs() > 1e-9 {
            status |= STATUS_LOAD_CHANGING;
        }
        self.samples = self.samples.wrapping_add(1);
        Sample {
            displacement_mm,
            load_n: load.load_n,
            temperature_c: self.temperature.read_c(at_s),
            status,
            counter: self.samples,
        }
    }

    /// The input block 0–7 for a sample, as the register map in the README describes.
    pub fn input_block(sample: &Sample) -> [u16; INPUT_BLOCK_LEN as usize] {
        let displacement =
            encode_u32(clamp_i32(sample.displacement_mm / DISPLACEMENT_MM_PER_COUNT) as u32, WordOrder::HighFirst);
        let load = encode_u32(clamp_i32(sample.load_n / LOAD_N_PER_COUNT) as u32, WordOrder::HighFirst);
        let temperature = (sample.temperature_c / TEMPERATURE_C_PER_COUNT).round().clamp(-32768.0, 32767.0) as i16;
        let counter = encode_u32(sample.counter, WordOrder::HighFirst);
        [displacement[0], displacement[1], load[0], load[1], temperature as u16, sample.status, counter[0], counter[1]]
    }

    /// Answers one request at `at_s`: the response, or the exception a real device would give.
    pub fn handle(&mut self, request: &Request, at_s: f64) -> Result<Response, ExceptionCode> {
        let inside = |address: u16, quantity: u16, start: u16, len: u16| {
            address >= start && u32::from(address) + u32::from(quantity) <= u32::from(start) + u32::from(len)
        };
        match request {
            Request::ReadInputRegisters { address, quantity } => {
                if !inside(*address, *quantity, 0, INPUT_BLOCK_LEN) {
                    return Err(ExceptionCode::IllegalDataAddress);
                }
                let block = Self::input_block(&self.sample(at_s));
                Ok(Response::ReadInputRegisters(block[usize::from(*address)..][..usize::from(*quantity)].to_vec()))
            }
            Request::ReadHoldingRegisters { address, quantity } => {
                if inside(*address, *quantity, HOLDING_MIRROR, INPUT_BLOCK_LEN) {
                    let block = Self::input_block(&self.sample(at_s));
                    let from = usize::from(address - HOLDING_MIRROR);
                    return Ok(Response::ReadHoldingRegisters(block[from..][..usize::from(*quantity)].to_vec()));
                }
                if !inside(*address, *quantity, 0, HOLDING_TAG.end) {
                    return Err(ExceptionCode::IllegalDataAddress);
                }
                let image: Vec<u16> = std::iter::once(self.averaging).chain(self.tag).collect();
                Ok(Response::ReadHoldingRegisters(image[usize::from(*address)..][..usize::from(*quantity)].to_vec()))
            }
            Request::WriteSingleRegister { address, value } => {
                self.write(*address, &[*value])?;
                Ok(Response::WriteSingleRegister { address: *address, value: *value })
            }
            Request::WriteMultipleRegisters { address, values } => {
                self.write(*address, values)?;
                Ok(Response::WriteMultipleRegisters { address: *address, quantity: values.len() as u16 })
            }
        }
    }

    fn write(&mut self, address: u16, values: &[u16]) -> Result<(), ExceptionCode> {
        let end = u32::from(address) + values.len() as u32;
        if end > u32::from(HOLDING_TAG.end) {
            return Err(ExceptionCode::IllegalDataAddress);
        }
        if address == HOLDING_AVERAGING && !(1..=crate::sensors::MAX_AVERAGING).contains(&values[0]) {
            return Err(ExceptionCode::IllegalDataValue);
        }
        for (offset, &value) in values.iter().enumerate() {
            match address + offset as u16 {
                HOLDING_AVERAGING => {
                    self.averaging = value;
                    // Checked above; the sensors accept 1..=64.
                    let _ = self.gauge.set_averaging(value);
                    let _ = self.load_cell.set_averaging(value);
                }
                register => self.tag[usize::from(register - HOLDING_TAG.start)] = value,
            }
        }
        Ok(())
    }
}

/// A simulator's frames, units 1..=N.
#[derive(Debug)]
pub struct Simulation {
    frames: Vec<SimFrame>,
}

/// What the simulator does with one request: the reply to send, and how (faults).
#[derive(Clone, Debug, PartialEq)]
pub enum Outcome {
    /// The unit is not served here: say nothing (RTU) or answer a gateway exception (TCP).
    UnknownUnit,
    /// Answer with this response or exception, spoiled by this fault if any.
    Answer {
        /// The response or the exception code.
        reply: Result<Response, ExceptionCode>,
        /// The wire fault that strikes this reply.
        fault: Option<FaultKind>,
        /// For [`FaultKind::Delay`]: real milliseconds; for [`FaultKind::Disconnect`] on RTU: silence, ms.
        fault_ms: u64,
        /// Bytes to put before the reply for [`FaultKind::Noise`].
        noise: Vec<u8>,
    },
}

impl Simulation {
    /// `frames` demo frames created at `at_s`.
    pub fn demo(frames: usize, at_s: f64, automatic: bool, seed: u64) -> Result<Simulation, ModelError> {
        let frames = (0..frames).map(|i| SimFrame::demo(i, at_s, automatic, seed)).collect::<Result<_, _>>()?;
        Ok(Simulation { frames })
    }

    /// Every frame.
    pub fn frames(&self) -> &[SimFrame] {
        &self.frames
    }

    /// The frame with this unit id.
    pub fn frame_mut(&mut self, unit: UnitId) -> Option<&mut SimFrame> {
        self.frames.iter_mut().find(|f| f.unit == unit)
    }

    /// The frame with this unit id.
    pub fn frame(&self, unit: UnitId) -> Option<&SimFrame> {
        self.frames.iter().find(|f| f.unit == unit)
    }

    /// Advances every frame's schedule to `at_s`; returns (unit, onset, stress) of each load applied.
    pub fn advance(&mut self, at_s: f64) -> Vec<(UnitId, f64, f64)> {
        let mut applied = Vec::new();
        for frame in &mut self.frames {
            frame.advance(at_s);
            for (onset_s, stress_kpa) in frame.take_applied() {
                applied.push((frame.unit, onset_s, stress_kpa));
            }
        }
        applied
    }

    /// Answers a request to `unit` at `at_s`, drawing the frame's faults.
    pub fn handle(&mut self, unit: UnitId, request: &Request, at_s: f64) -> Outcome {
        let Some(frame) = self.frame_mut(unit) else { return Outcome::UnknownUnit };
        let u = frame.uniform();
        let fault = frame.faults.draw(u);
        let reply = if fault == Some(FaultKind::Exception) {
            Err(ExceptionCode::ServerDeviceFailure)
        } else {
            frame.handle(request, at_s)
        };
        let fault_ms = match fault {
            Some(FaultKind::Delay) => frame.faults.delay_ms,
            Some(FaultKind::Disconnect) => (frame.faults.disconnect_s * 1000.0) as u64,
            _ => 0,
        };
        let noise = if fault == Some(FaultKind::Noise) {
            let n = 1 + (frame.uniform() * 12.0) as usize;
            frame.noise_bytes(n)
        } else {
            Vec::new()
        };
        Outcome::Answer { reply, fault, fault_ms, noise }
    }

    /// Executes a broadcast write (unit 0) on every frame; never answered.
    pub fn broadcast(&mut self, request: &Request, at_s: f64) {
        if matches!(request, Request::WriteSingleRegister { .. } | Request::WriteMultipleRegisters { .. }) {
            for frame in &mut self.frames {
                let _ = frame.handle(request, at_s);
            }
        }
    }

    /// Sets a fault on one unit or (None) every unit.
    pub fn set_fault(&mut self, unit: Option<UnitId>, setting: FaultSetting) -> Result<(), String> {
        let mut found = false;
        for frame in self.frames.iter_mut().filter(|f| unit.is_none_or(|u| f.unit == u)) {
            frame.set_fault(setting);
            found = true;
        }
        if found { Ok(()) } else { Err(format!("no frame with unit id {}", unit.map_or(0, |u| u.0))) }
    }

    /// The truth of the running increment of `unit`.
    pub fn truth(&self, unit: UnitId) -> Option<IncrementTruth> {
        self.frame(unit)?.model.current_increment()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_following_frame_waits_for_its_technician_and_then_takes_the_schedule_in_order() {
        let mut frame = SimFrame::demo(0, 0.0, true, 3).unwrap();
        frame.follow();
        let (first_due, first) = frame.upcoming_load().unwrap();
        let first_due = first_due.expect("the first step has a due time");
        frame.advance(first_due + 86_400.0);
        assert!(frame.take_applied().is_empty(), "nothing goes on by itself");
        assert!(frame.model().current_increment().is_none());
        assert_eq!(frame.put_on_next_load(first_due + 100.0).unwrap(), Some(first));
        let truth = frame.model().current_increment().unwrap();
        assert_eq!((truth.onset_s, truth.to_kpa), (first_due + 100.0, first));
        let (due, second) = frame.upcoming_load().unwrap();
        assert_eq!(due, None, "only the first step has a due time");
        assert!(second != first);
        assert_eq!(frame.put_on_next_load(first_due + 5000.0).unwrap(), Some(second));
        assert_eq!(frame.take_applied(), vec![(first_due + 100.0, first), (first_due + 5000.0, second)]);
    }
    use oedolog_protocol::registers::{ValueType, decode_raw};

    fn sim() -> Simulation {
        Simulation::demo(3, 0.0, false, 7).unwrap()
    }

    #[test]
    fn input_block_holds_displacement_and_load_in_the_documented_units() {
        let mut sim = sim();
        let Outcome::Answer { reply: Ok(Response::ReadInputRegisters(words)), .. } =
            sim.handle(UnitId(1), &Request::ReadInputRegisters { address: 0, quantity: 8 }, 10.0)
        else {
            panic!("no reply")
        };
        let frame = sim.frame(UnitId(1)).unwrap();
        let displacement_mm = decode_raw(ValueType::I32, WordOrder::HighFirst, &words[0..2]).unwrap() * 1e-4;
        let load_n = decode_raw(ValueType::I32, WordOrder::HighFirst, &words[2..4]).unwrap() * 0.1;
        // Under seating only: the gauge reads its offset (1 mm, sensors.rs) within noise; load = σ·A.
        assert!((displacement_mm - (frame.model().displacement_mm(10.0) + 1.0)).abs() < 0.01, "{displacement_mm}");
        let expected_n = frame.model().load_n(10.0);
        assert!(expected_n > 0.0);
        assert!((load_n - expected_n).abs() < 3.0, "{load_n} vs {expected_n}");
        let temperature_c = f64::from(words[4] as i16) * 0.01;
        assert!((18.0..22.0).contains(&temperature_c));
        assert_eq!(decode_raw(ValueType::U32, WordOrder::HighFirst, &words[6..8]).unwrap(), 1.0);
    }

    #[test]
    fn unknown_addresses_and_values_get_the_spec_exceptions() {
        let mut frame = SimFrame::demo(0, 0.0, false, 1).unwrap();
        assert_eq!(
            frame.handle(&Request::ReadInputRegisters { address: 7, quantity: 2 }, 0.0),
            Err(ExceptionCode::IllegalDataAddress),
            "registers 7–8 run past the input block"
        );
        assert_eq!(
            frame.handle(&Request::ReadHoldingRegisters { address: 9, quantity: 1 }, 0.0),
            Err(ExceptionCode::IllegalDataAddress)
        );
        assert_eq!(
            frame.handle(&Request::WriteSingleRegister { address: 0, value: 0 }, 0.0),
            Err(ExceptionCode::IllegalDataValue)
        );
        assert_eq!(
            frame.handle(&Request::WriteSingleRegister { address: 100, value: 1 }, 0.0),
            Err(ExceptionCode::IllegalDataAddress),
            "the mirror is read-only"
        );
        assert!(frame.handle(&Request::ReadHoldingRegisters { address: 100, quantity: 8 }, 0.0).is_ok());
    }

    #[test]
    fn holding_registers_store_what_is_written() {
        let mut frame = SimFrame::demo(1, 0.0, false, 1).unwrap();
        frame.handle(&Request::WriteSingleRegister { address: 0, value: 16 }, 0.0).unwrap();
        frame.handle(&Request::WriteMultipleRegisters { address: 1, values: vec![0x4142, 0x4344] }, 0.0).unwrap();
        let read = frame.handle(&Request::ReadHoldingRegisters { address: 0, quantity: 3 }, 0.0);
        assert_eq!(read, Ok(Response::ReadHoldingRegisters(vec![16, 0x4142, 0x4344])));
    }

    #[test]
    fn automatic_schedule_applies_loads_at_their_due_time() {
        let mut frame = SimFrame::demo(0, 0.0, true, 1).unwrap();
        frame.sample(350.0);
        frame.advance(400.0);
        assert_eq!(frame.take_applied(), vec![(300.0, 12.5)], "frame 0 sits 300 s under seating (scenario.rs)");
        assert_eq!(frame.take_applied(), vec![], "collected once");
        assert_eq!(frame.model().current_increment().unwrap().onset_s, 300.0);
    }

    #[test]
    fn stuck_fault_freezes_the_readings_and_travel_fault_sets_the_status_bit() {
        let mut frame = SimFrame::demo(0, 0.0, false, 1).unwrap();
        frame.apply_stress(50.0, 1.0).unwrap();
        let before = frame.sample(10.0);
        frame.set_fault(FaultSetting { kind: FaultKind::Stuck, value: 1.0 });
        let frozen = frame.sample(10.0);
        let later = frame.sample(5000.0);
        assert_eq!(frozen.displacement_mm, later.displacement_mm);
        assert!(later.displacement_mm - before.displacement_mm < 0.01);
        frame.set_fault(FaultSetting { kind: FaultKind::Stuck, value: 0.0 });
        assert!(frame.sample(5000.0).displacement_mm > before.displacement_mm + 0.05, "compression resumes");
        frame.set_fault(FaultSetting { kind: FaultKind::Travel, value: 1.0 });
        let pinned = frame.sample(6000.0);
        assert_eq!(pinned.status & STATUS_GAUGE_OUT_OF_TRAVEL, STATUS_GAUGE_OUT_OF_TRAVEL);
        assert_eq!(frame.sample(90_000.0).displacement_mm, pinned.displacement_mm);
        frame.reseat_gauge(1.0, 90_000.0).unwrap();
        let reseated = frame.sample(90_000.0);
        assert!((reseated.displacement_mm - 1.0).abs() < 0.01);
        assert_eq!(reseated.status & STATUS_GAUGE_OUT_OF_TRAVEL, 0);
    }

    #[test]
    fn unknown_unit_is_not_served() {
        let mut sim = sim();
        assert_eq!(
            sim.handle(UnitId(9), &Request::ReadInputRegisters { address: 0, quantity: 1 }, 0.0),
            Outcome::UnknownUnit
        );
    }
}
