//! What tests outside the store check the database with: typed, so no SQL leaves the store.

use super::Reader;
use super::journal::{self, JournalEntry};

/// A table whose rows a test counts.
#[derive(Clone, Copy, Debug)]
pub(crate) enum Table {
    /// `tests`.
    Tests,
    /// `increments`.
    Increments,
    /// `events`.
    Events,
    /// `readings`.
    Readings,
    /// `revisions`.
    Revisions,
}

/// The rows of `table`.
pub(crate) fn count(reader: &Reader, table: Table) -> i64 {
    let name = match table {
        Table::Tests => "tests",
        Table::Increments => "increments",
        Table::Events => "events",
        Table::Readings => "readings",
        Table::Revisions => "revisions",
    };
    reader.conn().query_row(&format!("SELECT count(*) FROM {name}"), [], |r| r.get(0)).expect("count rows")
}

/// The whole journal, oldest first.
pub(crate) fn journal(reader: &Reader) -> Vec<JournalEntry> {
    journal::after(reader, 0, i64::MAX, None).expect("read the journal")
}
