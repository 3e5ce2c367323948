-- 0001: the first schema. Timestamps are INTEGER microseconds since 1970-01-01 UTC ("_us").
-- Never edit this file once it has landed: add 0002_….sql instead.

-- The loading frames the configuration has named, one row per config id.
CREATE TABLE frames (
    key        INTEGER PRIMARY KEY,          -- compact id used by every reading row (saves bytes per reading)
    id         TEXT NOT NULL UNIQUE,         -- the config's frame id, what people and the API call it
    name       TEXT NOT NULL,                -- shown on screens; refreshed from the config at each start
    created_us INTEGER NOT NULL              -- when the frame first appeared in this database
);

-- One oedometer test: a specimen on a frame, from set-up to finish.
CREATE TABLE tests (
    id                    INTEGER PRIMARY KEY,
    frame_key             INTEGER NOT NULL REFERENCES frames(key),
    specimen              TEXT NOT NULL,     -- specimen id / sample reference as the lab writes it
    description           TEXT NOT NULL DEFAULT '',  -- soil description, borehole, depth: for the report
    height_mm             REAL NOT NULL CHECK (height_mm > 0),        -- initial height H0
    diameter_mm           REAL NOT NULL CHECK (diameter_mm > 0),      -- ring inside diameter
    dry_mass_g            REAL CHECK (dry_mass_g > 0),                -- for the height of solids Hs
    specific_gravity      REAL CHECK (specific_gravity > 0),          -- Gs, measured or assumed
    initial_water_content REAL,                                       -- w0 as a ratio (0.35 = 35 %)
    final_water_content   REAL,                                       -- wf, for the e cross-check
    sigma_v0_kpa          REAL,                                       -- in-situ vertical effective stress, for OCR
    state                 TEXT NOT NULL DEFAULT 'seating'             -- frame state while the test runs
        CHECK (state IN ('seating', 'armed', 'primary', 'ready', 'finished')),
    started_us            INTEGER NOT NULL,
    finished_us           INTEGER,                                    -- NULL while the test runs
    zero_mm               REAL                                        -- gauge reading under seating (the zero)
);
-- At most one running test per frame.
CREATE UNIQUE INDEX tests_running ON tests(frame_key) WHERE finished_us IS NULL;

-- Load increments (and decrements) of a test, in order.
CREATE TABLE increments (
    id          INTEGER PRIMARY KEY,
    test_id     INTEGER NOT NULL REFERENCES tests(id),
    seq         INTEGER NOT NULL,                  -- 1, 2, … within the test
    stress_kpa  REAL NOT NULL CHECK (stress_kpa >= 0),  -- target effective vertical stress
    armed_us    INTEGER,                           -- when the operator entered the next stress
    reported_us INTEGER,                           -- when someone said the load went on
    onset_us    INTEGER,                           -- t0 found from the data (load step or first sharp deformation)
    ended_us    INTEGER,                           -- when the next increment began or the test finished
    UNIQUE (test_id, seq)
);

-- Every valid reading, one row each. WITHOUT ROWID keyed by (frame, channel, time): no second index.
CREATE TABLE readings (
    frame_key INTEGER NOT NULL,                    -- frames.key
    channel   INTEGER NOT NULL,                    -- 0 displacement (mm), 1 load (kN), 2 temperature (°C)
    at_us     INTEGER NOT NULL,                    -- UTC instant of the reading
    raw       REAL NOT NULL,                       -- what the device sent, after its register map
    value     REAL NOT NULL,                       -- calibrated engineering value
    PRIMARY KEY (frame_key, channel, at_us)
) WITHOUT ROWID;

-- The journal: daemon start/stop, bus up/down, faults, operator actions.
CREATE TABLE events (
    id        INTEGER PRIMARY KEY,
    at_us     INTEGER NOT NULL,
    frame_key INTEGER REFERENCES frames(key),      -- NULL for daemon- or bus-wide events
    kind      TEXT NOT NULL,                       -- machine name, e.g. daemon-start, bus-down, value-refused
    message   TEXT NOT NULL,                       -- what a person reads
    actor     TEXT,                                -- user name for operator actions
    data      TEXT                                 -- JSON details, optional
);
CREATE INDEX events_by_time ON events(at_us);
