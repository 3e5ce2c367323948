-- 0007: how far each MQTT broker has got through the store, so a restart or a broker that was away
-- catches up in order, with no gap and nothing sent twice beyond QoS 1's at-least-once.

-- One row per [[publish.mqtt]] broker, frame and channel: the readings of one channel are stored in the
-- order of their stamps (one bus task reads a channel; the steady clock never goes back), so the newest
-- stamp published is the whole cursor.
CREATE TABLE publish_reading_cursors (
    broker     TEXT NOT NULL,                 -- the broker's url and client_id as configured: the config's unique key
    frame_key  INTEGER NOT NULL REFERENCES frames(key),
    channel    INTEGER NOT NULL,              -- readings.channel
    last_at_us INTEGER NOT NULL,              -- readings.at_us up to which the broker acknowledged this channel
    last_seq   INTEGER NOT NULL,              -- the sequence number of that reading: a consumer drops repeats by it
    updated_us INTEGER NOT NULL,              -- when the cursor last moved, UTC µs: shows a broker that has stalled
    PRIMARY KEY (broker, frame_key, channel)
) WITHOUT ROWID;

-- One row per broker: how far it has got through the journal (events.id is its sequence number).
CREATE TABLE publish_event_cursors (
    broker        TEXT PRIMARY KEY,           -- as in publish_reading_cursors
    last_event_id INTEGER NOT NULL,           -- events.id up to which the broker acknowledged the journal
    updated_us    INTEGER NOT NULL            -- when the cursor last moved, UTC µs
);
