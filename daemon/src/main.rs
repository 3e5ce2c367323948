//! The `oedolog` binary: parses the command line, wires the library together, picks the exit code.

use std::net::SocketAddr;
use std::path::PathBuf;
use std::process::ExitCode;
use std::sync::Arc;

use anyhow::{Context, bail};
use clap::{Parser, Subcommand};
use oedolog::clock::{AnchoredScaledClock, Clock, SimulatedClockSpec, SteadyClock};
use oedolog::config::{Config, Purpose};
use oedolog::{demo, logging, service, store};

/// Data-acquisition daemon for incremental-loading oedometer tests.
#[derive(Parser, Debug)]
#[command(name = "oedolog", version, about, long_about = None)]
struct Cli {
    #[command(subcommand)]
    command: Command,
}

#[derive(Subcommand, Debug)]
enum Command {
    /// Run the daemon: poll every frame, store every reading, serve the dashboard.
    Run {
        /// The configuration file.
        #[arg(long, env = "OEDOLOG_CONFIG", value_name = "FILE")]
        config: PathBuf,
        /// Print `committed batch=… readings=… total=… last=…` on stdout after each durable commit.
        #[arg(long)]
        report_commits: bool,
        /// For soak tests and demos: time runs SPEED× faster than real time since ORIGIN_US (UTC µs), so
        /// restarts given the same anchor go on where they stopped. Stamps are then not the lab's time.
        #[arg(long, value_name = "SPEED@ORIGIN_US")]
        simulated_clock: Option<SimulatedClockSpec>,
    },
    /// Simulated frames, the daemon and the dashboard in one process, on a fast clock.
    Demo {
        /// Simulated frames.
        #[arg(long, default_value_t = 6, value_parser = clap::value_parser!(u8).range(1..=32))]
        frames: u8,
        /// Simulated seconds per real second.
        #[arg(long, default_value_t = 300.0)]
        speed: f64,
        /// Where the dashboard listens (default: the config's [http] listen, else 127.0.0.1:8321).
        #[arg(long, value_name = "ADDR")]
        listen: Option<SocketAddr>,
        /// The database file (default: a file under the user's data folder).
        #[arg(long, value_name = "PATH")]
        db: Option<PathBuf>,
        /// A configuration file whose [http], [log], [alarms], [[notify.webhook]] and [[publish.mqtt]] tables apply to the demo.
        #[arg(long, value_name = "FILE")]
        config: Option<PathBuf>,
        /// Write the simulator's answer key to FILE: one JSON line per load step it applies (frame, seq,
        /// stress_kpa, onset_at, cv_mm2_per_min, t50_min, t90_min, t100_min).
        #[arg(long, value_name = "FILE")]
        truth: Option<PathBuf>,
    },
    /// The fleet board: read every lab's retained status and frame states from MQTT brokers and serve one
    /// read-only board of all of them, who needs a person first.
    Fleet {
        /// A configuration file with [fleet], [[fleet.broker]], [http] and [log].
        #[arg(long, value_name = "FILE")]
        config: PathBuf,
    },
    /// Check a configuration file: a summary, or every problem with its line, column and field.
    CheckConfig {
        /// The file.
        file: PathBuf,
    },
    /// Copy the database to DEST while the daemon runs (SQLite's online backup: a consistent copy).
    Backup {
        /// Where the copy goes.
        dest: PathBuf,
        /// The configuration file naming the database.
        #[arg(long, env = "OEDOLOG_CONFIG", value_name = "FILE", conflicts_with = "db")]
        config: Option<PathBuf>,
        /// The database file itself.
        #[arg(long, value_name = "PATH")]
        db: Option<PathBuf>,
    },
    /// Run a recorded time curve through the live watch at its own timestamps and print the timeline: the
    /// onset, the ETA of ready as it evolved, and when ready would have come and why.
    Replay {
        /// A CSV with the header `time_min,displacement_mm` (minutes since the load went on, mm).
        file: PathBuf,
        /// Poll period, s: replay only the readings the daemon would have taken (default: every reading).
        #[arg(long, value_name = "N", allow_negative_numbers = true)]
        poll_s: Option<f64>,
        /// Specimen height at the onset, mm (the drainage path is half the height at 50 % consolidation).
        #[arg(long, value_name = "MM", default_value_t = 20.0, allow_negative_numbers = true)]
        height_mm: f64,
        /// Stress before the load step, kPa.
        #[arg(long, value_name = "KPA", default_value_t = 50.0, allow_negative_numbers = true)]
        from_kpa: f64,
        /// Stress of the load step, kPa.
        #[arg(long, value_name = "KPA", default_value_t = 100.0, allow_negative_numbers = true)]
        stress_kpa: f64,
        /// Print one JSON object instead of the timeline.
        #[arg(long)]
        json: bool,
    },
    /// Reduce files logged by hand or on other equipment: one increment's time curve, or a whole test.
    Analyze {
        #[command(subcommand)]
        what: AnalyzeCommand,
    },
}

#[derive(Subcommand, Debug)]
enum AnalyzeCommand {
    /// One time curve: a CSV with the header `time_min,displacement_mm` (minutes since the load went on,
    /// compression positive, mm). Prints both constructions, cv by each, and Cα; d0, d50, d100 and t50 are
    /// reported from log t (Casagrande) when it finds d100, else from √t (Taylor); t90 is Taylor's.
    Increment {
        /// The CSV file.
        file: PathBuf,
        /// Longest drainage path Hdr, mm (half the specimen height for double drainage). Cα is strain over a
        /// height of 2 × Hdr.
        #[arg(long, value_name = "MM", allow_negative_numbers = true)]
        drainage_path_mm: f64,
        /// Print one JSON object instead of a table.
        #[arg(long)]
        json: bool,
    },
    /// A whole test: a TOML file with `[specimen]` and `[[increment]]` tables (optional `readings` time
    /// curves, double drainage). Prints the e–log σ′ curve, mv, cv, Cc, Cr and σ′p.
    Test {
        /// The TOML file.
        file: PathBuf,
        /// Print one JSON object instead of a table.
        #[arg(long)]
        json: bool,
    },
}

async fn shutdown_signal() -> &'static str {
    let ctrl_c = tokio::signal::ctrl_c();
    #[cfg(unix)]
    {
        let mut term =
            tokio::signal::unix::signal(tokio::signal::unix::SignalKind::terminate()).expect("SIGTERM handler");
        tokio::select! {
            _ = ctrl_c => "interrupted",
            _ = term.recv() => "terminated",
        }
    }
    #[cfg(not(unix))]
    {
        let _ = ctrl_c.await;
        "interrupted"
    }
}

fn load(path: &std::path::Path, purpose: Purpose) -> anyhow::Result<Config> {
    Config::load(path, purpose).map_err(|e| anyhow::anyhow!("{}:\n{e}", path.display()))
}

async fn run(command: Command) -> anyhow::Result<()> {
    match command {
        Command::Run { config, report_commits, simulated_clock } => {
            let config = load(&config, Purpose::Run)?;
            let _guard = logging::init(&config.log).map_err(anyhow::Error::msg)?;
            let clock: Arc<dyn Clock> = match simulated_clock {
                Some(spec) => {
                    tracing::warn!(
                        "simulated clock: {}× real time since {}; stamps are not the lab's time",
                        spec.speed,
                        oedolog::clock::rfc3339(spec.origin_us)
                    );
                    Arc::new(AnchoredScaledClock::system(spec))
                }
                // Stamps follow a steady clock: a stepped system clock is reported, never followed.
                None => Arc::new(SteadyClock::system()),
            };
            let running = service::start(&config, clock, service::Options { report_commits }).await?;
            // One line on stdout once serving: scripts and tests wait for it.
            println!("listening on http://{}/", running.http_addr);
            let why = shutdown_signal().await;
            running.stop(why);
            Ok(())
        }
        Command::Demo { frames, speed, listen, db, config, truth } => {
            if !(speed.is_finite() && speed > 0.0 && speed <= 100_000.0) {
                bail!("--speed {speed}: allowed a number of simulated seconds per real second, 0 < speed ≤ 100000");
            }
            let file = config.as_deref().map(|p| load(p, Purpose::Demo)).transpose()?;
            let log = file.as_ref().map(|c| c.log.clone()).unwrap_or(oedolog::config::LogConfig {
                dir: None,
                keep: 14,
                level: "info".into(),
            });
            let _guard = logging::init(&log).map_err(anyhow::Error::msg)?;
            let listen =
                listen.or(file.as_ref().map(|c| c.http.listen)).unwrap_or(oedolog::config::DEFAULT_LISTEN.parse()?);
            let db = db.unwrap_or_else(demo::default_db);
            let users = file.as_ref().map(|c| c.http.users.clone()).unwrap_or_default();
            let notify = file.as_ref().map(|c| c.notify.clone()).unwrap_or_default();
            let publish = file.as_ref().map(|c| c.publish.clone()).unwrap_or_default();
            let alarms = file.as_ref().map(|c| c.alarms.clone()).unwrap_or_default();
            let display = file.as_ref().map(|c| c.display).unwrap_or_default();
            println!(
                "demo: {frames} simulated frames, clock {speed}× real time (simulated), database {}",
                db.display()
            );
            let (running, _clock) = demo::start(demo::DemoOptions {
                frames,
                speed,
                listen,
                db,
                users,
                notify,
                publish,
                alarms,
                display,
                truth,
            })
            .await
            .map_err(|e| anyhow::anyhow!("{e}"))
            .context("starting the demo")?;
            // A demo on every interface (0.0.0.0, ::) is reached on this machine through loopback, and from
            // others through its name: print addresses a browser can open.
            let addr = running.http_addr;
            if addr.ip().is_unspecified() {
                println!("dashboard at http://127.0.0.1:{}/", addr.port());
                // The address of the default route, found without sending anything (192.0.2.1 is TEST-NET-1,
                // RFC 5737); a host name needs [http] public_origins to pass the Host check.
                let routed = std::net::UdpSocket::bind("0.0.0.0:0")
                    .and_then(|s| s.connect("192.0.2.1:9").and_then(|_| s.local_addr()))
                    .map(|a| a.ip())
                    .ok()
                    .filter(|ip| !ip.is_loopback() && !ip.is_unspecified());
                match routed {
                    Some(ip) => println!("  from other machines: http://{ip}:{}/", addr.port()),
                    None => println!("  from other machines: http://<this machine's IP address>:{}/", addr.port()),
                }
            } else {
                println!("dashboard at http://{addr}/");
            }
            let why = shutdown_signal().await;
            running.stop(why);
            Ok(())
        }
        Command::Fleet { config } => {
            let config = load(&config, Purpose::Fleet)?;
            let _guard = logging::init(&config.log).map_err(anyhow::Error::msg)?;
            let running = oedolog::fleet::board::start(&config).await?;
            // One line on stdout once serving: scripts and tests wait for it.
            println!("listening on http://{}/", running.http_addr);
            let why = shutdown_signal().await;
            tracing::info!("fleet board: {why}, stopping");
            running.stop();
            Ok(())
        }
        Command::CheckConfig { file } => {
            let source = std::fs::read_to_string(&file).unwrap_or_default();
            let config = load(&file, Purpose::of_text(&source))?;
            println!("{}: valid", file.display());
            println!("{}", config.summary());
            Ok(())
        }
        Command::Backup { dest, config, db } => {
            let source = match (db, config) {
                (Some(db), _) => db,
                (None, Some(config)) => {
                    load(&config, Purpose::Run)?.store.context("the configuration has no [store]")?.path
                }
                (None, None) => {
                    bail!("give --config FILE (or OEDOLOG_CONFIG) or --db PATH to say which database to copy")
                }
            };
            if dest.exists() {
                bail!("{} exists; choose a new file for the backup", dest.display());
            }
            store::backup(&source, &dest)
                .with_context(|| format!("backing up {} to {}", source.display(), dest.display()))?;
            println!("backup of {} written to {}", source.display(), dest.display());
            Ok(())
        }
        Command::Replay { file, poll_s, height_mm, from_kpa, stress_kpa, json } => {
            replay(&file, oedolog_core::replay::ReplaySettings { height_mm, from_kpa, stress_kpa, poll_s }, json)
        }
        Command::Analyze { what } => {
            let text = match what {
                AnalyzeCommand::Increment { file, drainage_path_mm, json } => {
                    let report = oedolog::analyze::increment(&file, drainage_path_mm)?;
                    if json { report.to_json() } else { report.to_table() }
                }
                AnalyzeCommand::Test { file, json } => {
                    let report = oedolog::analyze::test(&file)?;
                    if json { report.to_json() } else { report.to_table() }
                }
            };
            println!("{}", text.trim_end());
            Ok(())
        }
    }
}

/// `oedolog replay`: checks the settings, replays the file through the live watch, prints the timeline.
fn replay(file: &std::path::Path, settings: oedolog_core::replay::ReplaySettings, json: bool) -> anyhow::Result<()> {
    if let Some(p) = settings.poll_s
        && !(p.is_finite() && p > 0.0 && p <= 86_400.0)
    {
        bail!("--poll-s {p}: allowed a poll period above 0 s and up to 86400 s");
    }
    if !(settings.height_mm.is_finite() && (1.0..=200.0).contains(&settings.height_mm)) {
        bail!("--height-mm {}: allowed 1 to 200 mm", settings.height_mm);
    }
    for (name, v) in [("--from-kpa", settings.from_kpa), ("--stress-kpa", settings.stress_kpa)] {
        if !(v.is_finite() && (0.0..=100_000.0).contains(&v)) {
            bail!("{name} {v}: allowed 0 to 100000 kPa");
        }
    }
    let readings = oedolog::analyze::time_curve(file)?;
    let r = oedolog_core::replay::replay(&readings, &settings, oedolog::watch::WatchParams::default());
    if json {
        println!("{}", serde_json::to_string(&r)?);
        return Ok(());
    }
    println!("{}: {} readings replayed", file.display(), r.readings_used);
    for e in &r.timeline {
        println!("{:>10.2} min  {}", e.t_min, e.message);
    }
    let g = |v: Option<f64>| v.map_or("—".to_string(), |v| format!("{v:.3}"));
    println!("t50 {} min (log t) · t90 {} min (√t) · t100 {} min (log t)", g(r.t50_min), g(r.t90_min), g(r.t100_min));
    println!("Proposals for a qualified engineer to review; the governing standard decides when a load step ends.");
    Ok(())
}

#[tokio::main]
async fn main() -> ExitCode {
    let cli = Cli::parse();
    match run(cli.command).await {
        Ok(()) => ExitCode::SUCCESS,
        Err(error) => {
            eprintln!("oedolog: {error:#}");
            ExitCode::FAILURE
        }
    }
}
