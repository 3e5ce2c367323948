//! Seeds a database for the HTTP load benchmark (`tests/bench/http-load.sh`): 32 frames F1..F32, one
//! running test each with six increments, about 7 million readings, written through the daemon's own
//! store (migrations, `frame_key`, the writer thread). Demo data only: it must never touch an existing file.
//!
//! Run: `cargo run --release -p oedolog --example seed_db -- PATH` (PATH must not exist yet).

use std::f64::consts::PI;
use std::path::PathBuf;
use std::time::{Duration, Instant, SystemTime, UNIX_EPOCH};

use oedolog::store::lab_book::{self, ImportedIncrement, ImportedTest};
use oedolog::store::{self, ChannelKind, Event, EventKind, Reading, TestState, Writer, WriterPolicy};
use oedolog_core::watch::OnsetSource;

const FRAMES: i64 = 32;
/// Target stresses of the six increments, kPa (a doubling ladder, common practice).
const STRESS_KPA: [f64; 6] = [25.0, 50.0, 100.0, 200.0, 400.0, 800.0];
/// Primary settlement of each increment, mm, for a 19 mm soft clay specimen (demo values).
const PRIMARY_MM: [f64; 6] = [0.08, 0.15, 0.30, 0.45, 0.60, 0.70];
const SEATING_KPA: f64 = 5.0;
const HEIGHT_MM: f64 = 19.0;
const DIAMETER_MM: f64 = 63.5;
const SEATING_S: i64 = 3_600;
/// Finished increments last a day; the running sixth has been on for three days less the frame's stagger.
const INCREMENT_S: i64 = 86_400;
const RUNNING_S: i64 = 3 * 86_400;
/// Poll spacing: 1 s for the first ten minutes after a load step, then 10 s.
const FAST_S: i64 = 600;
const STEADY_S: i64 = 10;

/// Small deterministic noise source (xorshift64*), so every run seeds the same values.
struct Noise(u64);

impl Noise {
    /// Uniform in [-1, 1).
    fn next(&mut self) -> f64 {
        self.0 ^= self.0 >> 12;
        self.0 ^= self.0 << 25;
        self.0 ^= self.0 >> 27;
        let bits = self.0.wrapping_mul(0x2545_f491_4f6c_dd1d) >> 11;
        bits as f64 / (1u64 << 52) as f64 - 1.0
    }
}

/// Terzaghi's average degree of consolidation U(Tv), with the usual two-branch approximation
/// (U = √(4Tv/π) below U = 0.6, else 1 − 8/π² · e^(−π²Tv/4); common practice).
fn degree_of_consolidation(tv: f64) -> f64 {
    if tv < 0.2827 { (4.0 * tv / PI).sqrt() } else { 1.0 - 8.0 / (PI * PI) * (-PI * PI * tv / 4.0).exp() }
}

/// Settlement within an increment, mm, `t_s` after the load step: immediate part, primary, then a
/// secondary line in log t past the end of primary (t at Tv = 1).
fn increment_settlement_mm(primary_mm: f64, t90_s: f64, t_s: f64) -> f64 {
    let tv = 0.848 * t_s / t90_s;
    let end_of_primary_s = t90_s / 0.848;
    let secondary = if t_s > end_of_primary_s { 0.06 * primary_mm * (t_s / end_of_primary_s).log10() } else { 0.0 };
    primary_mm * (0.05 + 0.95 * degree_of_consolidation(tv)) + secondary
}

/// Poll instants of a span, s after its start: dense after a load step, then steady.
fn poll_offsets_s(span_s: i64, fast: bool) -> impl Iterator<Item = i64> {
    let dense = if fast { FAST_S } else { 0 };
    (0..dense.min(span_s)).chain((dense..span_s).step_by(STEADY_S as usize))
}

struct Seeder {
    writer: Writer,
    noise: Noise,
    written: u64,
}

impl Seeder {
    /// One poll: three readings, raw counts as a register map would deliver them.
    fn poll(&mut self, key: i64, at_us: i64, displacement_mm: f64, load_kn: f64) -> Result<(), store::StoreError> {
        let d = displacement_mm + 0.0008 * self.noise.next();
        let l = load_kn + 0.0005 * self.noise.next();
        let day = 2.0 * PI * (at_us as f64 / 8.64e10);
        let c = 20.0 + 0.4 * day.sin() + 0.02 * self.noise.next();
        for (channel, value, gain) in
            [(ChannelKind::Displacement, d, 1e-4), (ChannelKind::Load, l, 1e-4), (ChannelKind::Temperature, c, 1e-2)]
        {
            let raw = (value / gain).round();
            self.writer.reading(Reading { frame_key: key, channel, at_us, raw, value: raw * gain })?;
        }
        self.written += 3;
        // Keep the queue short: the writer commits ~300 k readings/s, the loop makes them faster.
        while self.writer.backlog() > 200_000 {
            std::thread::sleep(Duration::from_millis(2));
        }
        Ok(())
    }
}

fn event(at_us: i64, key: i64, kind: EventKind, message: String) -> Event {
    Event { at_us, frame_key: Some(key), kind, message, actor: None, data: None }
}

fn main() -> Result<(), Box<dyn std::error::Error>> {
    let path: PathBuf =
        std::env::args_os().nth(1).ok_or("usage: seed_db PATH (a file that does not exist yet)")?.into();
    if path.exists() {
        return Err(format!("{} exists already; seed_db only writes a new file", path.display()).into());
    }
    let started = Instant::now();
    let now_us = SystemTime::now().duration_since(UNIX_EPOCH)?.as_micros() as i64;
    let conn = store::open(&path)?;
    let mut keys = Vec::new();
    for f in 1..=FRAMES {
        keys.push(store::frame_key(&conn, &format!("F{f}"), &format!("Frame {f}"), now_us)?);
    }
    let policy =
        WriterPolicy { flush: Duration::from_millis(1000), max_batch: 50_000, checkpoint: Duration::from_secs(5) };
    let thread = Writer::spawn(conn, policy, |_| {});
    let mut seeder = Seeder { writer: thread.writer(), noise: Noise(0x0ed0_1095_eed5_0001), written: 0 };
    let area_m2 = PI / 4.0 * (DIAMETER_MM * 1e-3).powi(2);
    let mut running_polls = Vec::new();

    for (f, &key) in (1..=FRAMES).zip(&keys) {
        // Frames started a few minutes apart, as a lab sets them up one after another.
        let stagger_s = f * 7 * 60;
        let running_s = RUNNING_S - stagger_s;
        let test_start_us = now_us - (SEATING_S + 5 * INCREMENT_S + running_s) * 1_000_000;
        let first_onset_us = test_start_us + SEATING_S * 1_000_000;
        let onset_us = move |seq: usize| first_onset_us + (seq as i64 - 1) * INCREMENT_S * 1_000_000;
        // Specimen-to-specimen spread (demo values): ±20 % in settlement, t90 from 8 to 24 min.
        let spread = 0.8 + 0.4 * ((f * 37) % 32) as f64 / 31.0;
        let t90_s = 480.0 + 960.0 * ((f * 13) % 32) as f64 / 31.0;
        let ready = f % 4 != 0;
        let state = if ready { TestState::Ready } else { TestState::Primary };
        let specimen = format!("BH{}-U{} {:.1} m", 1 + (f - 1) / 4, 1 + (f - 1) % 4, 2.0 + 0.5 * (f % 9) as f64);
        let increments = (1..=6usize)
            .map(|seq| {
                let onset = onset_us(seq);
                ImportedIncrement {
                    seq: seq as i64,
                    stress_kpa: STRESS_KPA[seq - 1],
                    from_kpa: if seq == 1 { SEATING_KPA } else { STRESS_KPA[seq - 2] },
                    armed_us: onset - 90_000_000,
                    reported_us: onset + 20_000_000,
                    onset_us: onset,
                    onset_source: OnsetSource::LoadStep,
                    ready_us: (seq < 6 || ready).then_some(onset + (1.5 * t90_s / 0.848) as i64 * 1_000_000),
                    ended_us: (seq < 6).then(|| onset_us(seq + 1)),
                }
            })
            .collect();
        let test_id = lab_book::import_test(
            &seeder.writer,
            ImportedTest {
                frame_key: key,
                specimen,
                description: "soft grey silty clay (benchmark seed)".into(),
                height_mm: HEIGHT_MM,
                diameter_mm: DIAMETER_MM,
                dry_mass_g: Some(88.0 + (f % 5) as f64),
                specific_gravity: Some(2.70),
                initial_water_content: Some(0.38 + 0.01 * (f % 7) as f64),
                sigma_v0_kpa: Some(40.0 + 10.0 * (f % 6) as f64),
                state,
                started_us: test_start_us,
                seating_kpa: SEATING_KPA,
                increments,
            },
        )?;
        seeder.writer.event(event(
            test_start_us,
            key,
            EventKind::TestStarted,
            format!("test {test_id} started (benchmark seed)"),
        ))?;

        // Seating: the gauge sits at its zero under the seating stress.
        let zero_mm = 1.5 + 0.05 * (f % 10) as f64;
        for t in poll_offsets_s(SEATING_S, false) {
            seeder.poll(key, test_start_us + t * 1_000_000, zero_mm, SEATING_KPA * area_m2)?;
        }
        let mut before_mm = zero_mm;
        for seq in 1..=6usize {
            let span_s = if seq < 6 { INCREMENT_S } else { running_s };
            let primary_mm = PRIMARY_MM[seq - 1] * spread;
            let load_kn = STRESS_KPA[seq - 1] * area_m2;
            let onset = onset_us(seq);
            let mut polls = 0;
            for t in poll_offsets_s(span_s, true) {
                let d = before_mm + increment_settlement_mm(primary_mm, t90_s, t as f64);
                seeder.poll(key, onset + t * 1_000_000, d, load_kn)?;
                polls += 1;
            }
            seeder.writer.event(event(
                onset,
                key,
                EventKind::Onset,
                format!("increment {seq}: onset (benchmark seed)"),
            ))?;
            before_mm += increment_settlement_mm(primary_mm, t90_s, span_s as f64);
            if seq == 6 {
                running_polls.push((f, polls));
            }
        }
    }
    seeder.writer.sync()?;
    let written = seeder.written;
    thread.close();
    // Fold the WAL into the file, so the benchmark starts from a plain database.
    rusqlite::Connection::open(&path)?.query_row("PRAGMA wal_checkpoint(TRUNCATE)", [], |_| Ok(()))?;
    let bytes = std::fs::metadata(&path)?.len();
    let (f7, f7_polls) = running_polls.iter().find(|(f, _)| *f == 7).copied().unwrap_or((7, 0));
    println!(
        "seeded {} frames, {written} readings in {:.1} s ({:.0} readings/s), {:.1} MB; F{f7} increment 6 has {f7_polls} polls",
        FRAMES,
        started.elapsed().as_secs_f64(),
        written as f64 / started.elapsed().as_secs_f64(),
        bytes as f64 / 1e6,
    );
    Ok(())
}
