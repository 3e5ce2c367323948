-- 0003: how far each webhook has got through the journal, so a restart neither repeats nor floods.

-- One row per configured [[notify.webhook]] url.
CREATE TABLE notify_cursors (
    url           TEXT PRIMARY KEY,          -- the webhook's url exactly as configured: the config's unique key
    last_event_id INTEGER NOT NULL,          -- events.id up to which this webhook is done (delivered, refused for good, or not subscribed)
    updated_us    INTEGER NOT NULL           -- when the cursor last moved, UTC µs: shows a webhook that has stalled
);
