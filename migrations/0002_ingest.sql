-- Storage for reaches, gauges, readings, inflow forecasts, forecast runs,
-- API keys and the audit log. Conventions as in 0001: STRICT tables, times in
-- UTC, values in SI (metres, m³/s, m/h). Readings' times are INTEGER Unix
-- milliseconds (UTC) so the (gauge, time) index is compact and fast; other
-- times are RFC 3339 text in UTC. Documented in DEVELOPERS.md, "Schema".

-- API keys: only the SHA-256 of the secret part is stored.
CREATE TABLE api_keys (
    id            TEXT    PRIMARY KEY,                   -- public key id (hex)
    name          TEXT    NOT NULL,
    role          TEXT    NOT NULL CHECK (role IN ('gauge', 'forecaster', 'admin')),
    secret_sha256 BLOB    NOT NULL CHECK (length(secret_sha256) = 32),
    created_at    TEXT    NOT NULL,
    revoked_at    TEXT
) STRICT;

-- Gauges a `gauge` key may post readings for. Not a foreign key to gauges:
-- a key may be issued before its gauge is described.
CREATE TABLE api_key_gauges (
    key_id   TEXT NOT NULL REFERENCES api_keys (id) ON DELETE CASCADE,
    gauge_id TEXT NOT NULL,
    PRIMARY KEY (key_id, gauge_id)
) STRICT;

CREATE TABLE reaches (
    id         TEXT PRIMARY KEY,
    name       TEXT NOT NULL,
    created_at TEXT NOT NULL
) STRICT;

-- The reach description (cross-sections, points of interest, boundary) as
-- one JSON document per version. A new version never overwrites an old one,
-- so earlier forecast runs stay readable.
CREATE TABLE reach_versions (
    reach_id   TEXT    NOT NULL REFERENCES reaches (id),
    version    INTEGER NOT NULL CHECK (version >= 1),
    document   TEXT    NOT NULL CHECK (json_valid(document)),
    created_at TEXT    NOT NULL,
    created_by TEXT    REFERENCES api_keys (id),
    PRIMARY KEY (reach_id, version)
) STRICT;

-- Points of interest of one reach version.
CREATE TABLE points_of_interest (
    reach_id          TEXT    NOT NULL,
    reach_version     INTEGER NOT NULL,
    poi_id            TEXT    NOT NULL,
    name              TEXT    NOT NULL,
    kind              TEXT    NOT NULL
        CHECK (kind IN ('bridge', 'road_crossing', 'town', 'gauge', 'other')),
    chainage_m        REAL    NOT NULL,
    bed_elevation_m   REAL    NOT NULL,
    low_chord_m       REAL,
    deck_elevation_m  REAL,
    PRIMARY KEY (reach_id, reach_version, poi_id),
    FOREIGN KEY (reach_id, reach_version) REFERENCES reach_versions (reach_id, version)
) STRICT;

-- User-named threshold elevations of a point of interest.
CREATE TABLE poi_thresholds (
    reach_id      TEXT    NOT NULL,
    reach_version INTEGER NOT NULL,
    poi_id        TEXT    NOT NULL,
    name          TEXT    NOT NULL,
    elevation_m   REAL    NOT NULL,
    PRIMARY KEY (reach_id, reach_version, poi_id, name),
    FOREIGN KEY (reach_id, reach_version, poi_id)
        REFERENCES points_of_interest (reach_id, reach_version, poi_id)
) STRICT;

CREATE TABLE gauges (
    id                 TEXT PRIMARY KEY,             -- slug: [a-z0-9][a-z0-9-]*
    name               TEXT NOT NULL,
    reach_id           TEXT REFERENCES reaches (id),
    chainage_m         REAL,
    measures           TEXT NOT NULL CHECK (measures IN ('stage', 'discharge', 'both')),
    rating_curve       TEXT CHECK (rating_curve IS NULL OR json_valid(rating_curve)),
    stage_min_m        REAL NOT NULL,
    stage_max_m        REAL NOT NULL,
    max_rise_m_per_h   REAL NOT NULL CHECK (max_rise_m_per_h > 0),
    discharge_min_m3s  REAL,
    discharge_max_m3s  REAL,
    created_at         TEXT NOT NULL,
    updated_at         TEXT NOT NULL,
    CHECK (stage_max_m > stage_min_m)
) STRICT;

-- The current value of each reading, one row per (gauge, time).
-- rate_check: 'ok'; 'suspect' = faster than the gauge's plausible rate of
-- rise, stored but excluded from forecasting; 'confirmed' = a forecaster
-- confirmed a suspect reading, used again.
CREATE TABLE readings (
    gauge_id        TEXT    NOT NULL REFERENCES gauges (id),
    time_ms         INTEGER NOT NULL,                  -- Unix ms, UTC
    stage_m         REAL,
    discharge_m3s   REAL    CHECK (discharge_m3s IS NULL OR discharge_m3s >= 0),
    quality         TEXT    NOT NULL
        CHECK (quality IN ('good', 'suspect', 'estimate', 'unchecked')),
    rate_check      TEXT    NOT NULL DEFAULT 'ok'
        CHECK (rate_check IN ('ok', 'suspect', 'confirmed')),
    confirmed_by    TEXT,
    confirmed_at_ms INTEGER,
    revision        INTEGER NOT NULL DEFAULT 0 CHECK (revision >= 0),
    received_at_ms  INTEGER NOT NULL,
    key_id          TEXT    NOT NULL,
    CHECK (stage_m IS NOT NULL OR discharge_m3s IS NOT NULL),
    PRIMARY KEY (gauge_id, time_ms)
) STRICT, WITHOUT ROWID;

-- Values a revision replaced: the old value, who sent it, and who replaced
-- it when.
CREATE TABLE reading_revisions (
    id              INTEGER PRIMARY KEY,
    gauge_id        TEXT    NOT NULL,
    time_ms         INTEGER NOT NULL,
    revision        INTEGER NOT NULL,
    stage_m         REAL,
    discharge_m3s   REAL,
    quality         TEXT    NOT NULL,
    rate_check      TEXT    NOT NULL,
    received_at_ms  INTEGER NOT NULL,
    key_id          TEXT    NOT NULL,
    replaced_at_ms  INTEGER NOT NULL,
    replaced_by     TEXT    NOT NULL,
    FOREIGN KEY (gauge_id, time_ms) REFERENCES readings (gauge_id, time_ms)
) STRICT;
CREATE INDEX reading_revisions_by_reading ON reading_revisions (gauge_id, time_ms);

-- Uploaded inflow forecasts, versioned per reach; withdrawn ones are kept.
CREATE TABLE inflow_forecasts (
    id           INTEGER PRIMARY KEY,
    reach_id     TEXT    NOT NULL REFERENCES reaches (id),
    version      INTEGER NOT NULL CHECK (version >= 1),
    uploaded_at  TEXT    NOT NULL,
    uploaded_by  TEXT    NOT NULL REFERENCES api_keys (id),
    reason       TEXT    NOT NULL,
    series       TEXT    NOT NULL CHECK (json_valid(series)),  -- [{time, discharge}]
    withdrawn    INTEGER NOT NULL DEFAULT 0 CHECK (withdrawn IN (0, 1)),
    withdrawn_at TEXT,
    withdrawn_by TEXT    REFERENCES api_keys (id),
    UNIQUE (reach_id, version)
) STRICT;

-- One run of the routing model and its results.
CREATE TABLE forecast_runs (
    id                INTEGER PRIMARY KEY,
    reach_id          TEXT    NOT NULL,
    reach_version     INTEGER NOT NULL,
    inflow_forecast_id INTEGER REFERENCES inflow_forecasts (id),
    started_at        TEXT    NOT NULL,
    finished_at       TEXT,
    status            TEXT    NOT NULL CHECK (status IN ('running', 'ok', 'failed')),
    error             TEXT,
    provenance        TEXT    NOT NULL CHECK (json_valid(provenance)),
    results           TEXT    CHECK (results IS NULL OR json_valid(results)),
    FOREIGN KEY (reach_id, reach_version) REFERENCES reach_versions (reach_id, version)
) STRICT;
CREATE INDEX forecast_runs_by_reach ON forecast_runs (reach_id, started_at);

-- Every write: who (key id, or NULL for the command line), what, on what,
-- when, with summary counts.
CREATE TABLE audit_log (
    id      INTEGER PRIMARY KEY,
    at      TEXT    NOT NULL,
    key_id  TEXT,
    actor   TEXT    NOT NULL,
    action  TEXT    NOT NULL,
    target  TEXT    NOT NULL,
    summary TEXT    NOT NULL CHECK (json_valid(summary))
) STRICT;
CREATE INDEX audit_log_by_time ON audit_log (at);
