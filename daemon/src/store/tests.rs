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
    let db = open(&path).unwrap();
    let conn = db.conn();
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
        .event(Event {
            at_us: 5,
            frame_key: Some(key),
            kind: EventKind::Note,
            message: "hello".into(),
            actor: None,
            data: None,
        })
        .unwrap();
    thread.close();
    let reports = reports.lock().unwrap();
    assert_eq!(reports.last().unwrap().total_readings, 1000);
    assert_eq!(reports.iter().map(|r| r.readings).sum::<u64>(), 1000);
    assert_eq!(reports.last().unwrap().last, Some((key, 0, 999)));
    let check = reader(&path).unwrap();
    let (count, max): (i64, f64) = check
        .conn()
        .query_row("SELECT count(*), max(value) FROM readings", [], |r| Ok((r.get(0)?, r.get(1)?)))
        .unwrap();
    assert_eq!((count, max), (1000, 0.0999));
    assert_eq!(latest_reading(&check, key, ChannelKind::Displacement).unwrap(), Some((999, 0.0999)));
    let events: i64 =
        check.conn().query_row("SELECT count(*) FROM events WHERE kind = 'note'", [], |r| r.get(0)).unwrap();
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
    let check: String = copy.conn().query_row("PRAGMA integrity_check", [], |r| r.get(0)).unwrap();
    assert_eq!(check, "ok");
    let frames: i64 = copy.conn().query_row("SELECT count(*) FROM frames", [], |r| r.get(0)).unwrap();
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
        let seen: i64 = other.conn().query_row("SELECT count(*) FROM frames", [], |r| r.get(0)).unwrap();
        assert_eq!(seen, i + 1);
    }
    writer
        .event(Event {
            at_us: 1,
            frame_key: None,
            kind: EventKind::BusUp,
            message: "m".into(),
            actor: None,
            data: None,
        })
        .unwrap();
    writer.sync().unwrap();
    let events: i64 =
        other.conn().query_row("SELECT count(*) FROM events WHERE kind = 'bus-up'", [], |r| r.get(0)).unwrap();
    assert_eq!(events, 1, "sync waits for what was queued before it");
}

#[test]
fn polls_join_displacement_and_load_by_instant_in_time_order() {
    let (_dir, path) = temp_db();
    let conn = open(&path).unwrap();
    let key = frame_key(&conn, "F1", "F1", 0).unwrap();
    let rows = [(0, 10, 1.0), (1, 10, 0.5), (0, 20, 1.1), (0, 30, 1.2), (1, 30, 0.6), (1, 40, 0.7), (2, 40, 20.0)];
    for (channel, at, value) in rows {
        conn.conn()
            .execute("INSERT INTO readings VALUES (?1, ?2, ?3, 0, ?4)", params![key, channel, at, value])
            .unwrap();
    }
    assert_eq!(
        polls(&conn, key, 0, 100).unwrap(),
        vec![(10, Some(1.0), Some(0.5)), (20, Some(1.1), None), (30, Some(1.2), Some(0.6)), (40, None, Some(0.7))]
    );
    assert_eq!(polls(&conn, key, 15, 30).unwrap(), vec![(20, Some(1.1), None), (30, Some(1.2), Some(0.6))]);
    let plan: String = conn
        .conn()
        .query_row(
            "EXPLAIN QUERY PLAN SELECT at_us, value FROM readings WHERE frame_key = 1 AND channel = 0 AND at_us BETWEEN 0 AND 9 ORDER BY at_us",
            [],
            |r| r.get(3),
        )
        .unwrap();
    assert!(!plan.contains("TEMP B-TREE"), "{plan}");
}

/// A database with frame F1, its writer, and a reader on it.
fn lab_db() -> (tempfile::TempDir, PathBuf, WriterThread, i64) {
    let (dir, path) = temp_db();
    let db = open(&path).unwrap();
    let key = frame_key(&db, "F1", "Frame 1", 0).unwrap();
    let thread = Writer::spawn(db, WriterPolicy::default(), |_| {});
    (dir, path, thread, key)
}

fn new_test(key: i64) -> lab_book::NewTest {
    lab_book::NewTest {
        frame_key: key,
        specimen: "S-1".into(),
        description: "clay".into(),
        height_mm: 20.0,
        diameter_mm: 63.5,
        dry_mass_g: Some(95.0),
        specific_gravity: Some(2.7),
        seating_kpa: 5.0,
        started_us: 1_000,
        actor: Some("olga".into()),
    }
}

#[test]
fn every_stored_name_round_trips_through_sqlite_and_an_unknown_one_is_refused_by_name() {
    let (_dir, path) = temp_db();
    let db = open(&path).unwrap();
    let conn = db.conn();
    let back = |value: &dyn rusqlite::ToSql| -> String { conn.query_row("SELECT ?1", [value], |r| r.get(0)).unwrap() };
    for &kind in EventKind::ALL {
        assert_eq!(back(&kind), kind.name());
        let read: EventKind = conn.query_row("SELECT ?1", [kind.name()], |r| r.get(0)).unwrap();
        assert_eq!(read, kind);
        assert_eq!(serde_json::to_value(kind).unwrap(), kind.name(), "the API and webhooks show the stored name");
    }
    for &state in TestState::ALL {
        let read: TestState = conn.query_row("SELECT ?1", [state.name()], |r| r.get(0)).unwrap();
        assert_eq!((back(&state), read), (state.name().to_string(), state));
    }
    for source in [oedolog_core::watch::OnsetSource::LoadStep, oedolog_core::watch::OnsetSource::Deformation] {
        let text = back(&names::StoredOnset(source));
        let read: names::StoredOnset = conn.query_row("SELECT ?1", [&text], |r| r.get(0)).unwrap();
        assert_eq!((read.0, serde_json::to_value(source).unwrap()), (source, serde_json::json!(text)));
    }
    for code in oedolog_core::alarms::Code::ALL {
        let read: names::StoredCode = conn.query_row("SELECT ?1", [code.name()], |r| r.get(0)).unwrap();
        assert_eq!((back(&names::StoredCode(code)), read.0), (code.name().to_string(), code));
    }
    let unknown = |what: &str| -> String {
        let error = match what {
            "kind" => conn.query_row("SELECT 'bus-sideways'", [], |r| r.get::<_, EventKind>(0)).map(|_| ()),
            "state" => conn.query_row("SELECT 'paused'", [], |r| r.get::<_, TestState>(0)).map(|_| ()),
            "onset" => conn.query_row("SELECT 'guess'", [], |r| r.get::<_, names::StoredOnset>(0)).map(|_| ()),
            _ => conn.query_row("SELECT 'smoke'", [], |r| r.get::<_, names::StoredCode>(0)).map(|_| ()),
        };
        error.unwrap_err().to_string()
    };
    for (what, says) in [
        ("kind", "journal kind `bus-sideways`"),
        ("state", "test state `paused`"),
        ("onset", "onset source `guess`"),
        ("code", "alarm code `smoke`"),
    ] {
        let error = unknown(what);
        assert!(error.contains(says) && error.contains("does not know"), "{what}: {error}");
    }
}

#[test]
fn the_test_states_are_exactly_those_the_schema_allows() {
    let (_dir, path, thread, key) = lab_db();
    let writer = thread.writer();
    let id = lab_book::start_test(&writer, new_test(key)).unwrap();
    let outcome = |state: &'static str| {
        writer.run(move |conn| Ok(conn.execute("UPDATE tests SET state = ?2 WHERE id = ?1", params![id, state])?))
    };
    for &state in TestState::ALL {
        assert_eq!(outcome(state.name()).unwrap(), 1, "{state} is allowed");
        let stored = read::test(&reader(&path).unwrap(), id).unwrap().unwrap().state;
        assert_eq!(stored, state);
    }
    assert!(outcome("paused").is_err(), "the schema refuses a state the enum does not have");
    thread.close();
}

#[test]
fn a_lab_book_job_stores_its_change_and_its_journal_entry_together_or_nothing() {
    let (_dir, path, thread, key) = lab_db();
    let writer = thread.writer();
    let id = lab_book::start_test(&writer, new_test(key)).unwrap();
    let check = reader(&path).unwrap();
    let journal = || testing::journal(&check);
    let started = journal().pop().unwrap();
    assert_eq!(
        (started.kind, started.actor.as_deref(), started.frame.as_deref()),
        (EventKind::TestStarted, Some("olga"), Some("F1"))
    );
    assert_eq!(started.message, format!("test {id} started: specimen S-1"));
    let step = lab_book::Step { test_id: id, frame_key: key, seq: 1 };
    lab_book::arm_increment(&writer, step, 50.0, 5.0, 2_000, None, "armed 50".into()).unwrap();
    let open = lab_book::open_test(&check, key).unwrap().unwrap();
    assert_eq!(
        (open.state, open.increment.map(|i| (i.seq, i.stress_kpa, i.from_kpa))),
        (TestState::Armed, Some((1, 50.0, Some(5.0))))
    );
    // The same increment again breaks UNIQUE (test_id, seq): neither the row, the state nor the entry.
    let entries = journal().len();
    lab_book::record_ready(&writer, step, 2_500, "ready early".into()).unwrap();
    assert!(lab_book::arm_increment(&writer, step, 80.0, 50.0, 3_000, None, "again".into()).is_err());
    assert_eq!(journal().len(), entries + 1, "only the ready entry");
    assert_eq!(
        lab_book::open_test(&check, key).unwrap().unwrap().state,
        TestState::Ready,
        "the failed arm changed nothing"
    );
    lab_book::record_onset(&writer, step, 2_100, oedolog_core::watch::OnsetSource::Deformation, "t0".into()).unwrap();
    let inc = &read::increments(&check, id).unwrap()[0];
    assert_eq!((inc.onset_us, inc.onset_source), (Some(2_100), Some(oedolog_core::watch::OnsetSource::Deformation)));
    let onset = journal().pop().unwrap();
    assert_eq!((onset.kind, onset.at_us), (EventKind::Onset, 2_100), "stamped at t0");
    lab_book::finish_test(&writer, id, key, 4_000, "done".into()).unwrap();
    lab_book::name_finisher(&writer, key, "vera".into()).unwrap();
    let finished = journal().pop().unwrap();
    assert_eq!((finished.kind, finished.actor.as_deref()), (EventKind::TestFinished, Some("vera")));
    let test = read::test(&check, id).unwrap().unwrap();
    assert_eq!((test.state, test.finished_us), (TestState::Finished, Some(4_000)));
    assert_eq!(read::increments(&check, id).unwrap()[0].ended_us, Some(4_000));
    assert_eq!(lab_book::open_test(&check, key).unwrap(), None);
    thread.close();
}

#[test]
fn an_event_of_a_kind_this_oedolog_does_not_know_is_refused_when_read_not_passed_on() {
    let (_dir, path, thread, _key) = lab_db();
    let writer = thread.writer();
    writer
        .run(|conn| {
            Ok(conn.execute("INSERT INTO events (at_us, kind, message) VALUES (1, 'from-the-future', 'x')", [])?)
        })
        .unwrap();
    let error = journal::after(&reader(&path).unwrap(), 0, 10, None).unwrap_err().to_string();
    assert!(error.contains("journal kind `from-the-future`"), "{error}");
    thread.close();
}

#[test]
fn alarms_and_their_journal_entries_are_stored_in_one_job_and_an_acknowledgement_once() {
    use oedolog_core::alarms::Code;
    let (_dir, path, thread, key) = lab_db();
    let writer = thread.writer();
    let raise = alarms::AlarmChange::Raise {
        frame_key: Some(key),
        bus: None,
        code: Code::Stale,
        message: "no reading".into(),
        data: serde_json::json!({"age_s": 31}),
    };
    let stored = alarms::store_changes(&writer, 10, vec![raise]).unwrap();
    let alarms::AlarmStored::Raised { id, frame } = stored[0].clone() else { panic!("{stored:?}") };
    assert_eq!(frame.as_deref(), Some("F1"));
    let check = reader(&path).unwrap();
    let open = alarms::open_alarms(&check).unwrap();
    assert_eq!((open.len(), open[0].code, open[0].raised_us), (1, Some(Code::Stale), 10));
    let raised = testing::journal(&check).pop().unwrap();
    assert_eq!(raised.kind, EventKind::AlarmRaised);
    assert_eq!(raised.data, Some(serde_json::json!({"alarm": "stale", "alarm_id": id, "bus": null, "age_s": 31})));
    assert_eq!(alarms::acknowledge(&writer, id, "olga".into(), 20).unwrap(), alarms::Acknowledged::Done);
    assert_eq!(alarms::acknowledge(&writer, id, "vera".into(), 21).unwrap(), alarms::Acknowledged::AlreadyAcknowledged);
    assert_eq!(alarms::acknowledge(&writer, id + 1, "vera".into(), 21).unwrap(), alarms::Acknowledged::NotFound);
    let acked = testing::journal(&check).pop().unwrap();
    assert_eq!((acked.kind, acked.actor.as_deref()), (EventKind::AlarmAcknowledged, Some("olga")));
    assert_eq!(acked.message, format!("alarm {id} (stale) acknowledged by olga"));
    let clear = alarms::AlarmChange::Clear { id, code: Code::Stale, message: "back".into() };
    assert_eq!(alarms::store_changes(&writer, 30, vec![clear]).unwrap(), [alarms::AlarmStored::Cleared]);
    assert_eq!(alarms::acknowledge(&writer, id, "vera".into(), 31).unwrap(), alarms::Acknowledged::AlreadyCleared);
    assert!(alarms::open_alarms(&check).unwrap().is_empty());
    let history = alarms::history(&check, 10).unwrap();
    assert_eq!((history[0].cleared_us, history[0].acknowledged_by.as_deref()), (Some(30), Some("olga")));
    let kinds: Vec<EventKind> = testing::journal(&check).iter().map(|e| e.kind).collect();
    assert_eq!(kinds, [EventKind::AlarmRaised, EventKind::AlarmAcknowledged, EventKind::AlarmCleared]);
    thread.close();
}

#[test]
fn a_webhook_cursor_starts_at_the_newest_entry_and_moves_with_its_failure_entry() {
    let (_dir, path, thread, _key) = lab_db();
    let writer = thread.writer();
    let note =
        |at_us| Event { at_us, frame_key: None, kind: EventKind::Note, message: "n".into(), actor: None, data: None };
    let first = journal::append(&writer, note(1)).unwrap();
    let check = reader(&path).unwrap();
    assert_eq!(notify::cursor(&check, "http://a/").unwrap(), None);
    assert_eq!(notify::start_cursor(&writer, "http://a/".into(), 5).unwrap(), first);
    assert_eq!(notify::cursor(&check, "http://a/").unwrap(), Some(first));
    let second = journal::append(&writer, note(2)).unwrap();
    let failed = Event { kind: EventKind::NotifyFailed, ..note(3) };
    notify::save_cursor(&writer, "http://a/".into(), second, 6, Some(failed)).unwrap();
    assert_eq!(notify::cursor(&check, "http://a/").unwrap(), Some(second));
    assert_eq!(journal::newest_id(&check).unwrap(), second + 1);
    let subscribed = journal::of_kinds(&check, 0, i64::MAX, &[EventKind::Note], 10).unwrap();
    assert_eq!(subscribed.iter().map(|e| e.id).collect::<Vec<_>>(), [first, second], "not the notify-failed entry");
    thread.close();
}

#[test]
fn a_database_has_one_identity_kept_on_reopen_and_by_a_backup_and_a_new_database_gets_another() {
    let (dir, path) = temp_db();
    drop(open(&path).unwrap());
    let first = publish::store_identity(&reader(&path).unwrap()).unwrap();
    assert_eq!(first.len(), 32);
    assert!(first.bytes().all(|b| b.is_ascii_digit() || (b'a'..=b'f').contains(&b)), "{first}");
    drop(open(&path).unwrap());
    assert_eq!(publish::store_identity(&reader(&path).unwrap()).unwrap(), first, "kept when reopened");
    let copy = dir.path().join("copy.sqlite");
    backup(&path, &copy).unwrap();
    assert_eq!(publish::store_identity(&reader(&copy).unwrap()).unwrap(), first, "a backup is the same database");
    let other = dir.path().join("other.sqlite");
    drop(open(&other).unwrap());
    assert_ne!(publish::store_identity(&reader(&other).unwrap()).unwrap(), first, "a new database, a new identity");
    // A second row, or one that is not 32 lower-case hex digits, is refused by the table itself.
    let conn = rusqlite::Connection::open(&path).unwrap();
    assert!(conn.execute("INSERT INTO store_identity (one, id) VALUES (2, ?1)", [&first]).is_err());
    assert!(conn.execute("UPDATE store_identity SET id = 'ABC'", []).is_err());
    assert!(conn.execute("UPDATE store_identity SET id = upper(id)", []).is_err());
}

#[test]
fn a_reading_set_holds_one_reply_s_channels_in_order_and_gives_back_a_fourth() {
    let r = |channel, at_us| Reading { frame_key: 1, channel, at_us, raw: 1.0, value: 1.0 };
    let mut set = ReadingSet::default();
    assert!(set.is_empty());
    for (i, c) in ChannelKind::ALL.into_iter().enumerate() {
        set.push(r(c, i as i64)).unwrap();
    }
    assert_eq!(set.len(), 3);
    assert_eq!(set.iter().map(|x| x.at_us).collect::<Vec<_>>(), [0, 1, 2]);
    let fourth = r(ChannelKind::Load, 9);
    assert_eq!(set.push(fourth).unwrap_err().at_us, 9);
    // Through the writer: every reading of the set is stored.
    let (_dir, path) = temp_db();
    let db = open(&path).unwrap();
    let key = frame_key(&db, "F1", "set", 0).unwrap();
    let thread = Writer::spawn(db, WriterPolicy::default(), |_| {});
    let mut set = ReadingSet::default();
    for (i, c) in ChannelKind::ALL.into_iter().enumerate() {
        set.push(Reading { frame_key: key, channel: c, at_us: 10 + i as i64, raw: 2.0, value: 2.0 }).unwrap();
    }
    thread.writer().readings(set).unwrap();
    thread.close();
    let conn = rusqlite::Connection::open(&path).unwrap();
    let n: i64 = conn.query_row("SELECT count(*) FROM readings WHERE frame_key = ?1", [key], |r| r.get(0)).unwrap();
    assert_eq!(n, 3);
}
