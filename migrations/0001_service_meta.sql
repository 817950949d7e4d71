-- Identity of this database: created once, kept across restarts.
-- `start_count` grows by one each time the service starts on this file, so
-- operators and tests can see that a restart reused the same data.
CREATE TABLE service_meta (
    id          INTEGER PRIMARY KEY CHECK (id = 1),
    instance_id TEXT    NOT NULL,
    created_at  TEXT    NOT NULL,   -- RFC 3339, UTC
    last_start  TEXT    NOT NULL,   -- RFC 3339, UTC
    start_count INTEGER NOT NULL CHECK (start_count >= 1)
) STRICT;
