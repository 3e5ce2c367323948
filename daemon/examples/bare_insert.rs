//! The baseline of `tests/bench/cpu-per-reading.sh`: readings straight into rusqlite, no writer thread,
//! no channel, same schema and pragmas as the store (WAL, synchronous=FULL, the writer's page cache), in
//! transactions of BATCH;
//! prints the process's CPU time per reading (from /proc/self/stat, all threads).
//! Run: `cargo run --release -p oedolog --example bare_insert -- DB READINGS BATCH FRAMES`.

use std::time::Instant;

use oedolog::store::{self, ChannelKind};
use rusqlite::params;

/// utime + stime of this process, µs (clock ticks of 10 ms on Linux: USER_HZ = 100, `common practice`).
fn cpu_us() -> f64 {
    let stat = std::fs::read_to_string("/proc/self/stat").expect("/proc/self/stat");
    // Fields after the command name in parentheses: state is field 3, utime 14, stime 15 (proc(5)).
    let rest = &stat[stat.rfind(')').expect("comm") + 2..];
    let fields: Vec<&str> = rest.split_whitespace().collect();
    let ticks: f64 = fields[11].parse::<f64>().expect("utime") + fields[12].parse::<f64>().expect("stime");
    ticks * 10_000.0
}

fn main() {
    let args: Vec<String> = std::env::args().skip(1).collect();
    let [path, n, batch, frames] = &args[..] else {
        eprintln!("usage: bare_insert DB READINGS BATCH FRAMES");
        std::process::exit(2);
    };
    let (n, batch, frames): (usize, usize, usize) =
        (n.parse().expect("READINGS"), batch.parse().expect("BATCH"), frames.parse().expect("FRAMES"));
    let db = store::open(std::path::Path::new(path)).expect("open");
    let keys: Vec<i64> =
        (1..=frames).map(|i| store::frame_key(&db, &format!("F{i}"), "bench", 0).expect("frame")).collect();
    drop(db);
    let mut conn = rusqlite::Connection::open(path).expect("reopen");
    conn.pragma_update(None, "synchronous", "FULL").expect("synchronous");
    conn.pragma_update(None, "cache_size", -store::WRITER_CACHE_KIB).expect("cache_size");
    let start_us = 1_796_000_000_000_000i64;
    let cpu0 = cpu_us();
    let started = Instant::now();
    let mut i = 0usize;
    while i < n {
        let tx = conn.transaction().expect("tx");
        {
            let mut insert = tx
                .prepare_cached(
                    "INSERT OR IGNORE INTO readings (frame_key, channel, at_us, raw, value) VALUES (?1, ?2, ?3, ?4, ?5)",
                )
                .expect("prepare");
            for _ in 0..batch.min(n - i) {
                // Polls of every frame in turn, 3 channels each, as acquisition hands them over.
                let poll = i / 3;
                let channel = ChannelKind::ALL[i % 3];
                let key = keys[poll % frames];
                let at_us = start_us + (poll / frames) as i64 * 10_000 + (poll % frames) as i64;
                let raw = 10_000.0 + (poll % 997) as f64;
                insert.execute(params![key, channel.code(), at_us, raw, raw * 1e-4]).expect("insert");
                i += 1;
            }
        }
        tx.commit().expect("commit");
    }
    let wall = started.elapsed().as_secs_f64();
    let cpu = cpu_us() - cpu0;
    println!("readings={n} cpu_us={cpu:.0} wall_s={wall:.3} cpu_us_per_reading={:.3}", cpu / n as f64);
}
