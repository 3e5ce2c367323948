//! The engineer's review in the store: revisions (adjustments and their withdrawals) and approvals. Nothing
//! here overwrites: a revision is a new row, a withdrawal is a new revision naming the one it takes back,
//! and an approval a later revision withdraws keeps its row with the withdrawal marked. Each change goes in
//! one writer job with its journal entry.

use rusqlite::{OptionalExtension, params};

use super::journal::{self, Event, EventKind};
use super::{Reader, StoreError, Writer};

/// A revision to write: new choices for a scope, or the withdrawal of an earlier revision.
#[derive(Clone, Debug)]
pub struct NewRevision {
    /// The test.
    pub test_id: i64,
    /// Its frame, for the journal.
    pub frame_key: i64,
    /// The load step (`seq`), or `None` for the e–log σ′ curve.
    pub seq: Option<i64>,
    /// The choices as JSON (`None` for a withdrawal).
    pub choices: Option<String>,
    /// The revision this one takes back (`None` for new choices).
    pub withdraws: Option<i64>,
    /// Why, as the engineer wrote it.
    pub reason: String,
    /// Who.
    pub actor: String,
    /// When, UTC µs.
    pub at_us: i64,
    /// The values before and after, JSON.
    pub before: String,
    /// See `before`.
    pub after: String,
    /// The journal line.
    pub message: String,
}

/// What writing a revision did.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Revised {
    /// The new revision's id.
    pub id: i64,
    /// The approval it withdrew, if the test was approved.
    pub withdrew_approval: Option<i64>,
}

/// Writes `revision` with its journal entry and, when the test was approved, withdraws the approval
/// (journalled too), in one job. [`StoreError::Refused`] for a withdrawal of a revision that is not this
/// test's, is itself a withdrawal, or was already taken back.
pub fn add_revision(writer: &Writer, revision: NewRevision) -> Result<Revised, StoreError> {
    writer.run(move |conn| {
        if let Some(earlier) = revision.withdraws {
            let found: Option<(i64, Option<i64>)> = conn
                .query_row("SELECT test_id, withdraws FROM revisions WHERE id = ?1", [earlier], |r| {
                    Ok((r.get(0)?, r.get(1)?))
                })
                .optional()?;
            match found {
                Some((test, None)) if test == revision.test_id => {}
                Some((test, Some(_))) if test == revision.test_id => {
                    return Err(StoreError::Refused(format!("revision {earlier} is itself a withdrawal")));
                }
                _ => return Err(StoreError::Refused(format!("test {} has no revision {earlier}", revision.test_id))),
            }
            let taken_back: bool =
                conn.query_row("SELECT EXISTS(SELECT 1 FROM revisions WHERE withdraws = ?1)", [earlier], |r| r.get(0))?;
            if taken_back {
                return Err(StoreError::Refused(format!("revision {earlier} was already withdrawn")));
            }
        }
        conn.execute(
            "INSERT INTO revisions (test_id, seq, choices, withdraws, reason, actor, at_us, before, after)
             VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9)",
            params![
                revision.test_id,
                revision.seq,
                revision.choices,
                revision.withdraws,
                revision.reason,
                revision.actor,
                revision.at_us,
                revision.before,
                revision.after
            ],
        )?;
        let id = conn.last_insert_rowid();
        let kind = if revision.withdraws.is_some() { EventKind::RevisionWithdrawn } else { EventKind::Revised };
        journal::insert(
            conn,
            &Event {
                at_us: revision.at_us,
                frame_key: Some(revision.frame_key),
                kind,
                message: revision.message.clone(),
                actor: Some(revision.actor.clone()),
                data: Some(serde_json::json!({
                    "test_id": revision.test_id, "revision": id, "seq": revision.seq, "withdraws": revision.withdraws,
                })),
            },
        )?;
        let approval: Option<(i64, String)> = conn
            .query_row(
                "SELECT id, actor FROM approvals WHERE test_id = ?1 AND withdrawn_us IS NULL ORDER BY id DESC LIMIT 1",
                [revision.test_id],
                |r| Ok((r.get(0)?, r.get(1)?)),
            )
            .optional()?;
        if let Some((approval, approved_by)) = &approval {
            conn.execute(
                "UPDATE approvals SET withdrawn_us = ?2, withdrawn_by_revision = ?3 WHERE id = ?1",
                params![approval, revision.at_us, id],
            )?;
            journal::insert(
                conn,
                &Event {
                    at_us: revision.at_us,
                    frame_key: Some(revision.frame_key),
                    kind: EventKind::ApprovalWithdrawn,
                    message: format!(
                        "test {}: the approval by {approved_by} is withdrawn by revision {id}; the test needs a new review",
                        revision.test_id
                    ),
                    actor: Some(revision.actor.clone()),
                    data: Some(serde_json::json!({ "test_id": revision.test_id, "approval": approval, "revision": id })),
                },
            )?;
        }
        Ok(Revised { id, withdrew_approval: approval.map(|a| a.0) })
    })
}

/// An approval to write.
#[derive(Clone, Debug)]
pub struct NewApproval {
    /// The test.
    pub test_id: i64,
    /// Its frame, for the journal.
    pub frame_key: i64,
    /// Who approved.
    pub actor: String,
    /// When, UTC µs.
    pub at_us: i64,
    /// The engineer's note.
    pub note: String,
    /// The revisions in force, JSON list of ids.
    pub revisions: String,
    /// The approved values, JSON.
    pub frozen: String,
    /// The journal line.
    pub message: String,
}

/// Writes an approval with its journal entry; [`StoreError::Refused`] when the test already has one in
/// force (a later revision withdraws it first).
pub fn approve(writer: &Writer, approval: NewApproval) -> Result<i64, StoreError> {
    writer.run(move |conn| {
        let open: Option<String> = conn
            .query_row(
                "SELECT actor FROM approvals WHERE test_id = ?1 AND withdrawn_us IS NULL LIMIT 1",
                [approval.test_id],
                |r| r.get(0),
            )
            .optional()?;
        if let Some(by) = open {
            return Err(StoreError::Refused(format!(
                "test {} is already approved by {by}; a new revision withdraws that approval first",
                approval.test_id
            )));
        }
        conn.execute(
            "INSERT INTO approvals (test_id, actor, at_us, note, revisions, frozen) VALUES (?1, ?2, ?3, ?4, ?5, ?6)",
            params![
                approval.test_id,
                approval.actor,
                approval.at_us,
                approval.note,
                approval.revisions,
                approval.frozen
            ],
        )?;
        let id = conn.last_insert_rowid();
        journal::insert(
            conn,
            &Event {
                at_us: approval.at_us,
                frame_key: Some(approval.frame_key),
                kind: EventKind::Approved,
                message: approval.message.clone(),
                actor: Some(approval.actor.clone()),
                data: Some(serde_json::json!({ "test_id": approval.test_id, "approval": id })),
            },
        )?;
        Ok(id)
    })
}

/// A revision as stored.
#[derive(Clone, Debug, PartialEq)]
pub struct StoredRevision {
    /// `revisions.id`.
    pub id: i64,
    /// The load step, or `None` for the e–log σ′ curve.
    pub seq: Option<i64>,
    /// The choices as JSON; `None` for a withdrawal.
    pub choices: Option<String>,
    /// The revision a withdrawal takes back.
    pub withdraws: Option<i64>,
    /// Why.
    pub reason: String,
    /// Who.
    pub actor: String,
    /// When, UTC µs.
    pub at_us: i64,
    /// The values before, JSON.
    pub before: String,
    /// The values after, JSON.
    pub after: String,
}

/// Every revision of a test, oldest first.
pub fn revisions(reader: &Reader, test_id: i64) -> Result<Vec<StoredRevision>, StoreError> {
    let mut statement = reader.conn().prepare_cached(
        "SELECT id, seq, choices, withdraws, reason, actor, at_us, before, after
         FROM revisions WHERE test_id = ?1 ORDER BY id",
    )?;
    let rows = statement.query_map([test_id], |r| {
        Ok(StoredRevision {
            id: r.get(0)?,
            seq: r.get(1)?,
            choices: r.get(2)?,
            withdraws: r.get(3)?,
            reason: r.get(4)?,
            actor: r.get(5)?,
            at_us: r.get(6)?,
            before: r.get(7)?,
            after: r.get(8)?,
        })
    })?;
    Ok(rows.collect::<Result<_, _>>()?)
}

/// An approval as stored.
#[derive(Clone, Debug, PartialEq)]
pub struct StoredApproval {
    /// `approvals.id`.
    pub id: i64,
    /// Who approved.
    pub actor: String,
    /// When, UTC µs.
    pub at_us: i64,
    /// The note.
    pub note: String,
    /// The revisions in force then, JSON list of ids.
    pub revisions: String,
    /// The approved values, JSON.
    pub frozen: String,
    /// When a later revision withdrew it.
    pub withdrawn_us: Option<i64>,
    /// That revision.
    pub withdrawn_by_revision: Option<i64>,
}

/// Every approval of a test, oldest first (at most the last is in force).
pub fn approvals(reader: &Reader, test_id: i64) -> Result<Vec<StoredApproval>, StoreError> {
    let mut statement = reader.conn().prepare_cached(
        "SELECT id, actor, at_us, note, revisions, frozen, withdrawn_us, withdrawn_by_revision
         FROM approvals WHERE test_id = ?1 ORDER BY id",
    )?;
    let rows = statement.query_map([test_id], |r| {
        Ok(StoredApproval {
            id: r.get(0)?,
            actor: r.get(1)?,
            at_us: r.get(2)?,
            note: r.get(3)?,
            revisions: r.get(4)?,
            frozen: r.get(5)?,
            withdrawn_us: r.get(6)?,
            withdrawn_by_revision: r.get(7)?,
        })
    })?;
    Ok(rows.collect::<Result<_, _>>()?)
}

/// The revisions in force: per scope (seq, or `None` for the curve), its latest revision with choices that no
/// later revision takes back.
pub fn in_force(revisions: &[StoredRevision]) -> Vec<&StoredRevision> {
    let withdrawn: std::collections::HashSet<i64> = revisions.iter().filter_map(|r| r.withdraws).collect();
    let mut latest: Vec<&StoredRevision> = Vec::new();
    for r in revisions.iter().filter(|r| r.choices.is_some() && !withdrawn.contains(&r.id)) {
        latest.retain(|l| l.seq != r.seq);
        latest.push(r);
    }
    latest
}
