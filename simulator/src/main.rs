//! `oedolog-sim`: serves simulated loading frames over Modbus TCP and/or RTU until killed.
//! Thin: parses the command line, wires the library's tasks, prints one readiness line per endpoint.

use std::io::Write;
use std::sync::Arc;
use std::time::Duration;

use anyhow::{Context, bail};
use clap::{Parser, ValueEnum};
use oedolog_sim::clock::ScaledClock;
use oedolog_sim::control;
use oedolog_sim::device::Simulation;
use oedolog_sim::faults::FaultSetting;
use oedolog_sim::server::{RtuLine, Shared, open_rtu, run_schedules, serve_rtu, serve_tcp};
use tokio::io::AsyncBufReadExt;

/// Emulates oedometer loading frames (unit ids 1..=N) as Modbus devices, for demos and tests.
#[derive(Parser, Debug)]
#[command(name = "oedolog-sim", version, about)]
struct Args {
    /// Number of frames, each one Modbus unit with unit id 1..=N.
    #[arg(long, default_value_t = 4, value_parser = clap::value_parser!(u8).range(1..=247))]
    frames: u8,
    /// Serve Modbus TCP on this address, e.g. 127.0.0.1:0 (port 0: any free port, printed at start).
    #[arg(long, value_name = "ADDR")]
    tcp: Option<String>,
    /// Serve Modbus RTU on this serial device or pty path (repeatable: every line serves every unit).
    #[arg(long, value_name = "PATH")]
    rtu: Vec<String>,
    /// RTU baud rate.
    #[arg(long, default_value_t = 19_200)]
    baud: u32,
    /// RTU parity (8 data bits); even is the serial-line specification's default.
    #[arg(long, value_enum, default_value_t = ParityArg::Even)]
    parity: ParityArg,
    /// RTU stop bits, 1 or 2 (8N2 is the specification's framing without parity).
    #[arg(long, default_value_t = 1, value_parser = clap::value_parser!(u32).range(1..=2))]
    stop_bits: u32,
    /// Keep RS-485 wire time on RTU lines: a request is received only after its characters' wire time
    /// and t3.5, the reply follows the turnaround and goes out at the baud rate (README, the simulator).
    #[arg(long)]
    line_timing: bool,
    /// The device's turnaround with --line-timing: from a request received to the reply's first bit, µs.
    #[arg(long, default_value_t = 0)]
    turnaround_us: u64,
    /// Timing framing with --line-timing when the port's own settings cannot say it (a pty, whose peer
    /// may not open with parity): 8E1, 8O1, 8N2 or 8N1; default from --parity and --stop-bits.
    #[arg(long, value_name = "FRAMING")]
    line_framing: Option<String>,
    /// Simulated seconds per real second.
    #[arg(long, default_value_t = 1.0)]
    speed: f64,
    /// `auto`: the demo's load schedule; `manual`: loads only by `apply` lines on stdin.
    #[arg(long, value_enum, default_value_t = ScheduleArg::Auto)]
    schedule: ScheduleArg,
    /// Seed of the noise and fault draws.
    #[arg(long, default_value_t = 1)]
    seed: u64,
    /// A fault on every frame, KIND=VALUE (repeatable): drop, delay, bad-crc, noise, split, exception,
    /// disconnect take a probability per request 0..1; stuck and travel take on/off.
    #[arg(long = "fault", value_name = "KIND=VALUE")]
    faults: Vec<FaultSetting>,
    /// How late a delayed reply comes, ms.
    #[arg(long, default_value_t = 1_500)]
    delay_ms: u64,
    /// How long an RTU line stays silent after a `disconnect` fault, s.
    #[arg(long, default_value_t = 3.0)]
    disconnect_s: f64,
}

#[derive(Clone, Copy, Debug, ValueEnum)]
enum ParityArg {
    None,
    Even,
    Odd,
}

#[derive(Clone, Copy, Debug, PartialEq, ValueEnum)]
enum ScheduleArg {
    Auto,
    Manual,
}

fn say(line: &str) {
    let mut out = std::io::stdout().lock();
    let _ = writeln!(out, "{line}");
    let _ = out.flush();
}

#[tokio::main]
async fn main() -> anyhow::Result<()> {
    let args = Args::parse();
    if !(args.speed.is_finite() && args.speed > 0.0) {
        bail!("--speed {}: allowed a positive number of simulated seconds per real second", args.speed);
    }
    if !(args.disconnect_s.is_finite() && args.disconnect_s >= 0.0) {
        bail!("--disconnect-s {}: allowed a number of seconds ≥ 0", args.disconnect_s);
    }
    let tcp = match (&args.tcp, args.rtu.is_empty()) {
        (None, true) => Some("127.0.0.1:0".to_string()),
        (tcp, _) => tcp.clone(),
    };
    let clock = Arc::new(ScaledClock::new(args.speed, 0.0));
    let automatic = args.schedule == ScheduleArg::Auto;
    let mut sim = Simulation::demo(usize::from(args.frames), 0.0, automatic, args.seed)
        .context("building the simulated frames")?;
    for setting in &args.faults {
        sim.set_fault(None, *setting).map_err(anyhow::Error::msg)?;
    }
    for unit in 1..=args.frames {
        if let Some(frame) = sim.frame_mut(oedolog_protocol::UnitId(unit)) {
            frame.set_fault_timing(args.delay_ms, args.disconnect_s);
        }
    }
    let shared = Shared::new(sim, clock.clone());
    eprintln!("oedolog-sim: {} frames, speed {}x, schedule {:?}", args.frames, clock.speed(), args.schedule);

    if let Some(addr) = tcp {
        let listener = tokio::net::TcpListener::bind(&addr).await.with_context(|| format!("--tcp {addr}"))?;
        say(&format!("listening on tcp {}", listener.local_addr()?));
        tokio::spawn(serve_tcp(listener, shared.clone()));
    }
    let parity = match args.parity {
        ParityArg::None => tokio_serial::Parity::None,
        ParityArg::Even => tokio_serial::Parity::Even,
        ParityArg::Odd => tokio_serial::Parity::Odd,
    };
    let timing = if args.line_timing {
        let turnaround = Duration::from_micros(args.turnaround_us);
        let (with_parity, stop_bits) = match args.line_framing.as_deref() {
            None => (parity != tokio_serial::Parity::None, args.stop_bits),
            Some("8E1" | "8O1") => (true, 1),
            Some("8N2") => (false, 2),
            Some("8N1") => (false, 1),
            Some(other) => bail!("--line-framing {other}: allowed 8E1, 8O1, 8N2 or 8N1"),
        };
        Some(oedolog_sim::line::LineTiming::new(args.baud, with_parity, stop_bits, turnaround))
    } else {
        None
    };
    for path in &args.rtu {
        let line = RtuLine { path: path.clone(), baud: args.baud, parity, stop_bits: args.stop_bits, timing };
        if timing.is_some() {
            // A line-timed line blocks its thread while it waits out wire time: give it a thread and a
            // runtime of its own. The port is opened there, before the readiness line.
            let (opened, ready) = std::sync::mpsc::channel();
            let shared = shared.clone();
            std::thread::spawn(move || {
                let runtime = match tokio::runtime::Builder::new_current_thread().enable_all().build() {
                    Ok(runtime) => runtime,
                    Err(error) => return opened.send(Err(anyhow::Error::from(error))).unwrap_or(()),
                };
                runtime.block_on(async move {
                    match open_rtu(&line) {
                        Ok(port) => {
                            let _ = opened.send(Ok(()));
                            serve_rtu(line, port, shared, Duration::from_millis(500)).await;
                        }
                        Err(error) => {
                            let _ = opened.send(Err(anyhow::Error::from(error)));
                        }
                    }
                });
            });
            ready.recv().context("the line's thread ended")?.with_context(|| format!("--rtu {path}"))?;
        } else {
            // Open here so a wrong path fails at start, and keep that port: a request sent right after the
            // readiness line must find it open. The server reopens the path if it vanishes later.
            let port = open_rtu(&line).with_context(|| format!("--rtu {path}"))?;
            tokio::spawn(serve_rtu(line, port, shared.clone(), Duration::from_millis(500)));
        }
        say(&format!("listening on rtu {path}"));
    }
    if automatic {
        tokio::spawn(run_schedules(shared.clone(), Duration::from_millis(50), |unit, onset_s, stress_kpa| {
            say(&format!("applied unit={unit} stress_kpa={stress_kpa} onset_s={onset_s:.3}"));
        }));
    }

    // Control lines on stdin; at end of input keep serving until killed.
    let mut lines = tokio::io::BufReader::new(tokio::io::stdin()).lines();
    while let Ok(Some(line)) = lines.next_line().await {
        let answer = control::execute(&line, &shared);
        if !answer.is_empty() {
            say(&answer);
        }
    }
    std::future::pending::<()>().await;
    Ok(())
}
