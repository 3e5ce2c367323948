//! Store tests on real SQLite files in a temp folder.

use std::sync::Mutex;

use super::*;
use rusqlite::params;

fn temp_db() -> (tempfile::TempDir, PathBuf) {
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("sub/lab.sqlite");
    (dir, path)
}

#[test]
fn open_sets_wal_full_and_migrates() {
    let (_dir, path) = temp_db();
    let conn = open(&path).unwrap();
    let mode: String = conn.query_row("PRAGMA journal_mode", [], |r| r.get(0)).unwrap();
    let sync: i64 = conn.query_row("PRAGMA synchronous", [], |r| r.get(0)).unwrap();
    let version: u32 = conn.query_row("PRAGMA user_version", [], |r| r.get(0)).unwrap();
    assert_eq!((mode.as_str(), sync, version), ("wal", 2, migrations::latest_version()));
}

#[test]
fn writer_commits_readings_and_events_and_reports_each_commit() {
    let (_dir, path) = temp_db();
    let conn = open(&path).unwrap();
    let key = frame_key(&conn, "F1", "Frame 1", 0).unwrap();
    let reports = Arc::new(Mutex::new(Vec::new()));
    let sink = reports.clone();
    let thread =
        Writer::spawn(conn, WriterPolicy { flush: Duration::from_millis(20), ..Default::default() }, move |r| {
            sink.lock().unwrap().push(r)
        });
    let writer = thread.writer();
    for i in 0..1000 {
        let value = f64::from(i) * 1e-4;
        writer
            .reading(Reading {
                frame_key: key,
                channel: ChannelKind::Displacement,
                at_us: i64::from(i),
                raw: f64::from(i),
                value,
            })
            .unwrap();
    }
    writer
        .event(Event { at_us: 5, frame_key: Some(key), kind: "test", message: "hello".into(), actor: None, data: None })
        .unwrap();
    thread.close();
    let reports = reports.lock().unwrap();
    assert_eq!(reports.last().unwrap().total_readings, 1000);
    assert_eq!(reports.iter().map(|r| r.readings).sum::<u64>(), 1000);
    assert_eq!(reports.last().unwrap().last, Some((key, 0, 999)));
    let check = reader(&path).unwrap();
    let (count, max): (i64, f64) =
        check.query_row("SELECT count(*), max(value) FROM readings", [], |r| Ok((r.get(0)?, r.get(1)?))).unwrap();
    assert_eq!((count, max), (1000, 0.0999));
    assert_eq!(latest_reading(&check, key, ChannelKind::Displacement).unwrap(), Some((999, 0.0999)));
    let events: i64 = check.query_row("SELECT count(*) FROM events WHERE kind = 'test'", [], |r| r.get(0)).unwrap();
    assert_eq!(events, 1);
}

#[test]
fn a_failing_job_changes_nothing_and_reports_its_error() {
    let (_dir, path) = temp_db();
    let conn = open(&path).unwrap();
    let thread = Writer::spawn(conn, WriterPolicy::default(), |_| {});
    let writer = thread.writer();
    let result = writer.run(|conn| {
        conn.execute("INSERT INTO frames (id, name, created_us) VALUES ('A', 'a', 0)", [])?;
        conn.execute("INSERT INTO frames (id, name, created_us) VALUES ('A', 'dup', 0)", [])?;
        Ok(())
    });
    assert!(result.is_err());
    let count =
        writer.run(|conn| Ok(conn.query_row("SELECT count(*) FROM frames", [], |r| r.get::<_, i64>(0))?)).unwrap();
    assert_eq!(count, 0, "the first insert of the failed job was rolled back");
}

#[test]
fn duplicate_reading_keys_are_ignored_not_fatal() {
    let (_dir, path) = temp_db();
    let conn = open(&path).unwrap();
    let key = frame_key(&conn, "F1", "F1", 0).unwrap();
    let reports = Arc::new(Mutex::new(Vec::new()));
    let sink = reports.clone();
    let thread = Writer::spawn(conn, WriterPolicy::default(), move |r| sink.lock().unwrap().push(r));
    let r = Reading { frame_key: key, channel: ChannelKind::Load, at_us: 7, raw: 1.0, value: 1.0 };
    thread.writer().reading(r).unwrap();
    thread.writer().reading(r).unwrap();
    thread.close();
    assert_eq!(reports.lock().unwrap().iter().map(|r| r.readings).sum::<u64>(), 1);
}

#[test]
fn backup_copies_a_consistent_database_while_the_writer_runs() {
    let (dir, path) = temp_db();
    let conn = open(&path).unwrap();
    let key = frame_key(&conn, "F1", "F1", 0).unwrap();
    let thread = Writer::spawn(conn, WriterPolicy { flush: Duration::from_millis(5), ..Default::default() }, |_| {});
    let writer = thread.writer();
    for i in 0..5000 {
        writer
            .reading(Reading { frame_key: key, channel: ChannelKind::Displacement, at_us: i, raw: 0.0, value: 0.0 })
            .unwrap();
    }
    let dest = dir.path().join("copy.sqlite");
    backup(&path, &dest).unwrap();
    let copy = reader(&dest).unwrap();
    let check: String = copy.query_row("PRAGMA integrity_check", [], |r| r.get(0)).unwrap();
    assert_eq!(check, "ok");
    let frames: i64 = copy.query_row("SELECT count(*) FROM frames", [], |r| r.get(0)).unwrap();
    assert_eq!(frames, 1);
    thread.close();
}

#[test]
fn a_damaged_file_is_refused() {
    let (_dir, path) = temp_db();
    drop(open(&path).unwrap());
    // Overwrite the header: no longer a database.
    std::fs::write(&path, vec![0x42; 8192]).unwrap();
    assert!(open(&path).is_err());
}

#[test]
fn a_job_is_answered_only_after_its_commit() {
    let (_dir, path) = temp_db();
    let conn = open(&path).unwrap();
    // A long flush window: only the job's own urgency may commit the batch.
    let thread = Writer::spawn(conn, WriterPolicy { flush: Duration::from_secs(30), ..Default::default() }, |_| {});
    let writer = thread.writer();
    let other = reader(&path).unwrap();
    for i in 0..20 {
        writer
            .run(move |conn| {
                Ok(conn.execute("INSERT INTO frames (id, name, created_us) VALUES (?1, 'x', 0)", [format!("F{i}")])?)
            })
            .unwrap();
        // Another connection sees the change as soon as the caller is told it is done.
        let seen: i64 = other.query_row("SELECT count(*) FROM frames", [], |r| r.get(0)).unwrap();
        assert_eq!(seen, i + 1);
    }
    writer
        .event(Event { at_us: 1, frame_key: None, kind: "queued", message: "m".into(), actor: None, data: None })
        .unwrap();
    writer.sync().unwrap();
    let events: i64 = other.query_row("SELECT count(*) FROM events WHERE kind = 'queued'", [], |r| r.get(0)).unwrap();
    assert_eq!(events, 1, "sync waits for what was queued before it");
}

#[test]
fn polls_join_displacement_and_load_by_instant_in_time_order() {
    let (_dir, path) = temp_db();
    let conn = open(&path).unwrap();
    let key = frame_key(&conn, "F1", "F1", 0).unwrap();
    let rows = [(0, 10, 1.0), (1, 10, 0.5), (0, 20, 1.1), (0, 30, 1.2), (1, 30, 0.6), (1, 40, 0.7), (2, 40, 20.0)];
    for (channel, at, value) in rows {
        conn.execute("INSERT INTO readings VALUES (?1, ?2, ?3, 0, ?4)", params![key, channel, at, value]).unwrap();
    }
    assert_eq!(
        polls(&conn, key, 0, 100).unwrap(),
        vec![(10, Some(1.0), Some(0.5)), (20, Some(1.1), None), (30, Some(1.2), Some(0.6)), (40, None, Some(0.7))]
    );
    assert_eq!(polls(&conn, key, 15, 30).unwrap(), vec![(20, Some(1.1), None), (30, Some(1.2), Some(0.6))]);
    let plan: String = conn
        .query_row(
            "EXPLAIN QUERY PLAN SELECT at_us, value FROM readings WHERE frame_key = 1 AND channel = 0 AND at_us BETWEEN 0 AND 9 ORDER BY at_us",
            [],
            |r| r.get(3),
        )
        .unwrap();
    assert!(!plan.contains("TEMP B-TREE"), "{plan}");
}
