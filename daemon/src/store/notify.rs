//! How far each webhook has got through the journal (`notify_cursors`).

use rusqlite::{OptionalExtension, params};

use super::journal::{self, Event};
use super::{Reader, StoreError, Writer};

/// The saved cursor of the webhook at `url` (the config's url exactly), if it has one.
pub fn cursor(reader: &Reader, url: &str) -> Result<Option<i64>, StoreError> {
    Ok(reader
        .conn()
        .query_row("SELECT last_event_id FROM notify_cursors WHERE url = ?1", [url], |r| r.get(0))
        .optional()?)
}

/// Gives the webhook at `url` its first cursor: the newest journal id at the moment of the writer job
/// that saves it (so every entry committed after that is the webhook's); returns it.
pub fn start_cursor(writer: &Writer, url: String, now_us: i64) -> Result<i64, StoreError> {
    writer.run(move |conn| {
        let newest = journal::newest_id_on(conn)?;
        conn.execute(
            "INSERT INTO notify_cursors (url, last_event_id, updated_us) VALUES (?1, ?2, ?3)",
            params![url, newest, now_us],
        )?;
        Ok(newest)
    })
}

/// Saves the cursor of the webhook at `url`, and with it, in the same writer job, the `notify-failed`
/// entry of an event refused for good (so that is journalled at most once).
pub fn save_cursor(
    writer: &Writer,
    url: String,
    cursor: i64,
    now_us: i64,
    refused: Option<Event>,
) -> Result<(), StoreError> {
    writer.run(move |conn| {
        conn.execute(
            "INSERT INTO notify_cursors (url, last_event_id, updated_us) VALUES (?1, ?2, ?3)
             ON CONFLICT(url) DO UPDATE SET last_event_id = excluded.last_event_id, updated_us = excluded.updated_us",
            params![url, cursor, now_us],
        )?;
        if let Some(event) = refused {
            journal::insert(conn, &event)?;
        }
        Ok(())
    })
}
