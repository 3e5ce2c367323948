//! Schema migrations: numbered SQL files in `migrations/`, embedded at build time, applied in order at
//! start-up, each in one transaction recorded in `PRAGMA user_version`. A database whose version is
//! newer than this binary knows is refused rather than touched.

use rusqlite::Connection;

use super::StoreError;

/// Every migration, in order: (file name, SQL). Keep equal to the files on disk (a test checks).
pub const MIGRATIONS: &[(&str, &str)] = &[
    ("0001_init.sql", include_str!("../../../migrations/0001_init.sql")),
    ("0002_watch.sql", include_str!("../../../migrations/0002_watch.sql")),
    ("0003_notify.sql", include_str!("../../../migrations/0003_notify.sql")),
    ("0004_alarms.sql", include_str!("../../../migrations/0004_alarms.sql")),
    ("0005_void_steps.sql", include_str!("../../../migrations/0005_void_steps.sql")),
    ("0006_review.sql", include_str!("../../../migrations/0006_review.sql")),
    ("0007_publish.sql", include_str!("../../../migrations/0007_publish.sql")),
    ("0008_store_identity.sql", include_str!("../../../migrations/0008_store_identity.sql")),
];

/// The schema version this binary writes.
pub fn latest_version() -> u32 {
    MIGRATIONS.len() as u32
}

/// Brings `conn` up to the latest version; returns (version before, version after).
pub fn migrate(conn: &mut Connection) -> Result<(u32, u32), StoreError> {
    let found: u32 = conn.query_row("PRAGMA user_version", [], |row| row.get(0))?;
    let latest = latest_version();
    if found > latest {
        return Err(StoreError::TooNew { found, latest });
    }
    for (index, (name, sql)) in MIGRATIONS.iter().enumerate().skip(found as usize) {
        let tx = conn.transaction()?;
        tx.execute_batch(sql).map_err(|source| StoreError::Migration { name, source })?;
        tx.pragma_update(None, "user_version", index as u32 + 1)?;
        tx.commit()?;
    }
    Ok((found, latest))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn embedded_list_equals_the_files_on_disk() {
        let dir = concat!(env!("CARGO_MANIFEST_DIR"), "/../migrations");
        let mut on_disk: Vec<String> = std::fs::read_dir(dir)
            .unwrap()
            .map(|e| e.unwrap().file_name().into_string().unwrap())
            .filter(|n| n.ends_with(".sql"))
            .collect();
        on_disk.sort();
        let embedded: Vec<&str> = MIGRATIONS.iter().map(|(n, _)| *n).collect();
        assert_eq!(on_disk, embedded);
        for (i, (name, sql)) in MIGRATIONS.iter().enumerate() {
            assert!(name.starts_with(&format!("{:04}_", i + 1)), "{name} is numbered {}", i + 1);
            assert_eq!(std::fs::read_to_string(format!("{dir}/{name}")).unwrap(), *sql);
        }
    }

    #[test]
    fn migrating_twice_changes_nothing_and_newer_databases_are_refused() {
        let mut conn = Connection::open_in_memory().unwrap();
        assert_eq!(migrate(&mut conn).unwrap(), (0, latest_version()));
        assert_eq!(migrate(&mut conn).unwrap(), (latest_version(), latest_version()));
        conn.pragma_update(None, "user_version", latest_version() + 1).unwrap();
        let error = migrate(&mut conn).unwrap_err();
        assert!(error.to_string().contains("newer than this oedolog"), "{error}");
    }
}
