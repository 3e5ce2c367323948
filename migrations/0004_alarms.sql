-- 0004: alarms, each raised once, then perhaps acknowledged by a named operator, then cleared when the
-- condition is gone. The journal has an entry for every step; this table is their current state.
CREATE TABLE alarms (
    id INTEGER PRIMARY KEY,
    -- The frame it concerns (NULL for a bus alarm).
    frame_key INTEGER REFERENCES frames(key),
    -- The bus it concerns (its config id; NULL for a frame alarm).
    bus TEXT,
    -- What: 'stale', 'gauge-travel', 'out-of-range', 'stuck', 'load-drift', 'temperature', 'bus-errors'.
    code TEXT NOT NULL,
    -- What a person reads when it was raised.
    message TEXT NOT NULL,
    -- Details as JSON.
    data TEXT,
    raised_us INTEGER NOT NULL,
    acknowledged_us INTEGER,
    acknowledged_by TEXT,
    cleared_us INTEGER
);
CREATE INDEX alarms_open ON alarms (cleared_us);
