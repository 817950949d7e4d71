-- Ratings over time (src/gauge/ratings.rs): gaugings measured at a gauge,
-- rating versions each valid from an instant (until the next), and
-- gauge-height shifts over a period. A reading is converted with the
-- version valid at its time (the gauge's own `rating_curve` before the first
-- version), its stage shifted first. Times are RFC 3339 text in UTC.
CREATE TABLE gaugings (
    gauge_id      TEXT NOT NULL REFERENCES gauges (id),
    time          TEXT NOT NULL,
    stage_m       REAL NOT NULL,
    discharge_m3s REAL NOT NULL CHECK (discharge_m3s > 0),
    method        TEXT NOT NULL,
    quality       TEXT NOT NULL CHECK (quality IN ('excellent', 'good', 'fair', 'poor')),
    received_at   TEXT NOT NULL,
    key_id        TEXT NOT NULL,
    PRIMARY KEY (gauge_id, time)
) STRICT;

CREATE TABLE rating_versions (
    gauge_id   TEXT    NOT NULL REFERENCES gauges (id),
    version    INTEGER NOT NULL CHECK (version >= 1),
    valid_from TEXT    NOT NULL,
    curve      TEXT    NOT NULL CHECK (json_valid(curve)),
    note       TEXT    NOT NULL,
    created_at TEXT    NOT NULL,
    created_by TEXT    NOT NULL,
    PRIMARY KEY (gauge_id, version)
) STRICT;

CREATE TABLE rating_shifts (
    id         INTEGER PRIMARY KEY,
    gauge_id   TEXT NOT NULL REFERENCES gauges (id),
    from_time  TEXT NOT NULL,
    to_time    TEXT,
    offset_m   REAL NOT NULL,
    reason     TEXT NOT NULL,
    created_at TEXT NOT NULL,
    created_by TEXT NOT NULL
) STRICT;
CREATE INDEX rating_shifts_by_gauge ON rating_shifts (gauge_id, from_time);
