-- 0006: an engineer's review. The automatic reduction is never stored over: every adjustment is a revision
-- of one scope of a test — a load step (seq) or the e–log σ′ curve (seq NULL) — with its choices as JSON,
-- who, when, why, and the values before and after. A revision that takes back an earlier one names it in
-- `withdraws` and has no choices. What is in force for a scope is its latest revision not taken back.
CREATE TABLE revisions (
    id        INTEGER PRIMARY KEY,
    test_id   INTEGER NOT NULL REFERENCES tests(id),
    seq       INTEGER,
    choices   TEXT,
    withdraws INTEGER REFERENCES revisions(id),
    reason    TEXT NOT NULL,
    actor     TEXT NOT NULL,
    at_us     INTEGER NOT NULL,
    before    TEXT NOT NULL,
    after     TEXT NOT NULL,
    CHECK ((choices IS NULL) <> (withdraws IS NULL))
);
CREATE INDEX revisions_by_test ON revisions(test_id, id);

-- An approval freezes the reduction it approved (`frozen`, JSON) and the revisions then in force. A later
-- revision withdraws it visibly: withdrawn_us and the revision that did it are set, the row stays.
CREATE TABLE approvals (
    id                    INTEGER PRIMARY KEY,
    test_id               INTEGER NOT NULL REFERENCES tests(id),
    actor                 TEXT NOT NULL,
    at_us                 INTEGER NOT NULL,
    note                  TEXT NOT NULL,
    revisions             TEXT NOT NULL,
    frozen                TEXT NOT NULL,
    withdrawn_us          INTEGER,
    withdrawn_by_revision INTEGER REFERENCES revisions(id)
);
CREATE INDEX approvals_by_test ON approvals(test_id, id);
