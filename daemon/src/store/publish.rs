//! How far each MQTT broker has got through the store (`publish_reading_cursors`,
//! `publish_event_cursors`), and the readings after a cursor.

use rusqlite::{OptionalExtension, params};

use super::journal;
use super::{ChannelKind, Reader, StoreError, Writer};

/// Where a broker stands on one frame's channel.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct ReadingCursor {
    /// `frames.key`.
    pub frame_key: i64,
    /// The channel.
    pub channel: ChannelKind,
    /// The stamp of the newest reading the broker acknowledged (0: none yet).
    pub last_at_us: i64,
    /// Its sequence number; the next reading is `last_seq + 1`.
    pub last_seq: i64,
}

/// A broker's cursors: one per configured frame and channel, and the journal's.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct Cursors {
    /// In the order of the frame keys asked for, channels in [`ChannelKind::ALL`] order.
    pub readings: Vec<ReadingCursor>,
    /// `events.id` up to which the journal is acknowledged.
    pub last_event_id: i64,
}

fn channel_of(code: i64) -> Option<ChannelKind> {
    ChannelKind::ALL.into_iter().find(|c| c.code() == code)
}

/// The broker's cursors for `frame_keys`; those it has none of yet are made, in one writer job, at the
/// newest reading of each channel stamped before `since_us` (the daemon's start: every reading of this
/// run is the broker's, also those committed while the daemon was starting) and at the newest journal
/// entry, and saved before this returns.
pub fn start_cursors(
    writer: &Writer,
    broker: String,
    frame_keys: Vec<i64>,
    since_us: i64,
    now_us: i64,
) -> Result<Cursors, StoreError> {
    writer.run(move |conn| {
        let mut readings = Vec::new();
        for &frame_key in &frame_keys {
            for channel in ChannelKind::ALL {
                let found: Option<(i64, i64)> = conn
                    .query_row(
                        "SELECT last_at_us, last_seq FROM publish_reading_cursors
                         WHERE broker = ?1 AND frame_key = ?2 AND channel = ?3",
                        params![broker, frame_key, channel.code()],
                        |r| Ok((r.get(0)?, r.get(1)?)),
                    )
                    .optional()?;
                let (last_at_us, last_seq) = match found {
                    Some(f) => f,
                    None => {
                        let newest: i64 = conn.query_row(
                            "SELECT coalesce(max(at_us), 0) FROM readings
                             WHERE frame_key = ?1 AND channel = ?2 AND at_us < ?3",
                            params![frame_key, channel.code(), since_us],
                            |r| r.get(0),
                        )?;
                        conn.execute(
                            "INSERT INTO publish_reading_cursors (broker, frame_key, channel, last_at_us, last_seq, updated_us)
                             VALUES (?1, ?2, ?3, ?4, 0, ?5)",
                            params![broker, frame_key, channel.code(), newest, now_us],
                        )?;
                        (newest, 0)
                    }
                };
                readings.push(ReadingCursor { frame_key, channel, last_at_us, last_seq });
            }
        }
        let last_event_id = match conn
            .query_row("SELECT last_event_id FROM publish_event_cursors WHERE broker = ?1", [&broker], |r| r.get(0))
            .optional()?
        {
            Some(id) => id,
            None => {
                let newest = journal::newest_id_on(conn)?;
                conn.execute(
                    "INSERT INTO publish_event_cursors (broker, last_event_id, updated_us) VALUES (?1, ?2, ?3)",
                    params![broker, newest, now_us],
                )?;
                newest
            }
        };
        Ok(Cursors { readings, last_event_id })
    })
}

/// Saves a broker's cursors in one writer job (all of them or none).
pub fn save_cursors(writer: &Writer, broker: String, cursors: Cursors, now_us: i64) -> Result<(), StoreError> {
    writer.run(move |conn| {
        let mut update = conn.prepare_cached(
            "UPDATE publish_reading_cursors SET last_at_us = ?4, last_seq = ?5, updated_us = ?6
             WHERE broker = ?1 AND frame_key = ?2 AND channel = ?3",
        )?;
        for c in &cursors.readings {
            update.execute(params![broker, c.frame_key, c.channel.code(), c.last_at_us, c.last_seq, now_us])?;
        }
        conn.execute(
            "UPDATE publish_event_cursors SET last_event_id = ?2, updated_us = ?3 WHERE broker = ?1",
            params![broker, cursors.last_event_id, now_us],
        )?;
        Ok(())
    })
}

/// A broker's saved cursors, if it has any (for tests and diagnosis).
pub fn saved_cursors(reader: &Reader, broker: &str) -> Result<Vec<ReadingCursor>, StoreError> {
    let mut statement = reader.conn().prepare_cached(
        "SELECT frame_key, channel, last_at_us, last_seq FROM publish_reading_cursors WHERE broker = ?1
         ORDER BY frame_key, channel",
    )?;
    let rows = statement.query_map([broker], |r| {
        Ok((r.get::<_, i64>(0)?, r.get::<_, i64>(1)?, r.get::<_, i64>(2)?, r.get::<_, i64>(3)?))
    })?;
    let mut out = Vec::new();
    for row in rows {
        let (frame_key, code, last_at_us, last_seq) = row?;
        if let Some(channel) = channel_of(code) {
            out.push(ReadingCursor { frame_key, channel, last_at_us, last_seq });
        }
    }
    Ok(out)
}

/// One stored reading as published: (at_us, raw, value).
pub type StoredReading = (i64, f64, f64);

/// The database's identity (`store_identity`, 32 lower-case hex digits, made with the schema): what the
/// lab publishes carries it beside each sequence number.
pub fn store_identity(reader: &Reader) -> Result<String, StoreError> {
    Ok(reader.conn().query_row("SELECT id FROM store_identity WHERE one = 1", [], |r| r.get(0))?)
}

/// The readings of one channel after `after_us`, oldest first, at most `limit` (the primary key's order:
/// a range scan, no sort).
pub fn readings_after(
    reader: &Reader,
    frame_key: i64,
    channel: ChannelKind,
    after_us: i64,
    limit: i64,
) -> Result<Vec<StoredReading>, StoreError> {
    let mut statement = reader.conn().prepare_cached(
        "SELECT at_us, raw, value FROM readings WHERE frame_key = ?1 AND channel = ?2 AND at_us > ?3
         ORDER BY at_us LIMIT ?4",
    )?;
    let rows = statement
        .query_map(params![frame_key, channel.code(), after_us, limit], |r| Ok((r.get(0)?, r.get(1)?, r.get(2)?)))?;
    Ok(rows.collect::<Result<_, _>>()?)
}

/// The stamp of the oldest reading of a channel after `after_us` (what the broker's lag is measured from).
pub fn oldest_after(
    reader: &Reader,
    frame_key: i64,
    channel: ChannelKind,
    after_us: i64,
) -> Result<Option<i64>, StoreError> {
    Ok(reader.conn().query_row(
        "SELECT min(at_us) FROM readings WHERE frame_key = ?1 AND channel = ?2 AND at_us > ?3",
        params![frame_key, channel.code(), after_us],
        |r| r.get(0),
    )?)
}
