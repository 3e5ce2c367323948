//! Store ingest: readings/s through the writer thread vs a bare rusqlite insert loop of the same rows,
//! same pragmas (WAL, synchronous=FULL), same batch size, in the same run; and database bytes per reading.
//! Run: `cargo bench -p oedolog --bench store` (optional argument: readings, default 600 000).

use std::time::{Duration, Instant};

use oedolog::store::{self, ChannelKind, Reading, Writer, WriterPolicy};
use rusqlite::params;

/// Rows like a lab's: 8 frames × 3 channels, one poll per second each, realistic values.
fn rows(n: usize) -> Vec<Reading> {
    let start_us = 1_796_000_000_000_000i64;
    (0..n)
        .map(|i| {
            let frame = (i / 3) % 8;
            let poll = i / 24;
            let channel = ChannelKind::ALL[i % 3];
            let (raw, value) = match channel {
                ChannelKind::Displacement => {
                    let counts = 10_000.0 + (poll as f64).sqrt() * 37.0;
                    (counts.round(), counts.round() * 1e-4)
                }
                ChannelKind::Load => (2_211.0, 0.2211),
                ChannelKind::Temperature => (1_998.0 + (poll % 7) as f64, (1_998.0 + (poll % 7) as f64) * 0.01),
            };
            Reading {
                frame_key: frame as i64 + 1,
                channel,
                at_us: start_us + poll as i64 * 1_000_000 + frame as i64 * 1_000,
                raw,
                value,
            }
        })
        .collect()
}

fn fresh(dir: &std::path::Path, name: &str) -> (std::path::PathBuf, store::Database) {
    let path = dir.join(name);
    let db = store::open(&path).expect("open");
    for i in 1..=8 {
        store::frame_key(&db, &format!("F{i}"), "bench", 0).expect("frame");
    }
    (path, db)
}

fn main() {
    let n: usize = std::env::args().skip(1).find_map(|a| a.parse().ok()).unwrap_or(600_000);
    let dir = tempfile::tempdir().expect("temp dir");
    let data = rows(n);
    let batch = 2_400; // 1 s of 8 frames × 3 channels at 100 Hz: the writer's batches under load

    // Baseline: the same rows, straight into rusqlite, in transactions of `batch`, on a connection of its
    // own to the same schema: WAL (kept in the file) and synchronous=FULL (set per connection), as the store.
    let (base_path, db) = fresh(dir.path(), "bare.sqlite");
    drop(db);
    let mut conn = rusqlite::Connection::open(&base_path).expect("reopen");
    let mode: String = conn.query_row("PRAGMA journal_mode", [], |r| r.get(0)).expect("journal mode");
    assert_eq!(mode, "wal");
    conn.pragma_update(None, "synchronous", "FULL").expect("synchronous");
    let started = Instant::now();
    for chunk in data.chunks(batch) {
        let tx = conn.transaction().expect("tx");
        {
            let mut insert = tx
                .prepare_cached("INSERT OR IGNORE INTO readings (frame_key, channel, at_us, raw, value) VALUES (?1, ?2, ?3, ?4, ?5)")
                .expect("prepare");
            for r in chunk {
                insert.execute(params![r.frame_key, r.channel.code(), r.at_us, r.raw, r.value]).expect("insert");
            }
        }
        tx.commit().expect("commit");
    }
    let bare = started.elapsed();
    drop(conn);

    // The writer thread, fed as fast as the acquisition side can send.
    let (path, conn) = fresh(dir.path(), "writer.sqlite");
    let (tx, rx) = std::sync::mpsc::channel();
    let policy = WriterPolicy { flush: Duration::from_millis(1000), max_batch: batch, ..Default::default() };
    let started = Instant::now();
    let thread = Writer::spawn(conn, policy, move |report| {
        let _ = tx.send(report.total_readings);
    });
    let writer = thread.writer();
    for r in &data {
        writer.reading(*r).expect("send");
    }
    while rx.recv().expect("commit reports") < n as u64 {}
    let through_writer = started.elapsed();
    thread.close();

    let rate = |d: Duration| n as f64 / d.as_secs_f64();
    println!("readings: {n}");
    println!("bare rusqlite loop : {:>10.0} readings/s ({:.2} s)", rate(bare), bare.as_secs_f64());
    println!("store writer thread: {:>10.0} readings/s ({:.2} s)", rate(through_writer), through_writer.as_secs_f64());
    println!("ratio writer/bare  : {:.2}", rate(through_writer) / rate(bare));

    // Bytes per reading once the WAL is folded into the file.
    let conn = rusqlite::Connection::open(&path).expect("reopen");
    conn.query_row("PRAGMA wal_checkpoint(TRUNCATE)", [], |_| Ok(())).expect("checkpoint");
    conn.execute_batch("VACUUM").expect("vacuum");
    drop(conn);
    let bytes = std::fs::metadata(&path).expect("size").len();
    println!("database bytes per reading: {:.1} ({} bytes)", bytes as f64 / n as f64, bytes);
    let _ = base_path;
}
