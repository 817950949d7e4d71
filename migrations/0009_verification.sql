-- Verification (src/forecast/verify): how each good run's forecast at each
-- gauged point of interest compared with the stage its gauge later saw.
-- Kept incrementally: a run's forecast at a point stays open until its window
-- has been observed, and every pass adds the newly arrived observations to
-- running statistics per point, issue day and lead hour; a closed forecast
-- leaves its event (crest and level outcomes). Scores are merged from these
-- rows when read, so no history is rescanned. None of it refers to the run's
-- results, which retention may prune; verification stays.

-- Which runs of a reach have been looked at: runs up to this id are opened
-- (or had nothing to verify).
CREATE TABLE verification_cursor (
    reach_id    TEXT    PRIMARY KEY,
    last_run_id INTEGER NOT NULL
) STRICT;

-- Forecasts waiting for their window to be observed. `series` is the JSON of
-- `verify::tally::PointSeries`, `levels` of `[[id, elevation], ...]`.
CREATE TABLE verification_open (
    run_id           INTEGER NOT NULL,
    poi_id           TEXT    NOT NULL,
    reach_id         TEXT    NOT NULL,
    gauge_id         TEXT    NOT NULL,
    series           TEXT    NOT NULL CHECK (json_valid(series)),
    levels           TEXT    NOT NULL CHECK (json_valid(levels)),
    persistence_m    REAL    NOT NULL,
    counted_until_ms INTEGER NOT NULL,
    correction       TEXT    NOT NULL CHECK (json_valid(correction)),
    PRIMARY KEY (run_id, poi_id)
) STRICT;
CREATE INDEX verification_open_by_reach ON verification_open (reach_id);

-- Running statistics of one point at one lead hour (leads in (h, h + 1]
-- hours) over the runs issued on one UTC day: JSON of `verify::moments::
-- Moments` for the model, persistence and the corrected model, of
-- `verify::correction::CorrectionSums` (what the correction's decay is fitted
-- from), and of `verify::tally::QuantileTally` for the ensemble's percentiles
-- (NULL: no ensemble).
CREATE TABLE verification_hours (
    reach_id    TEXT    NOT NULL,
    poi_id      TEXT    NOT NULL,
    issue_day   TEXT    NOT NULL,             -- YYYY-MM-DD, UTC
    lead_hour   INTEGER NOT NULL CHECK (lead_hour >= 0),
    runs        INTEGER NOT NULL CHECK (runs >= 0),
    model       TEXT    NOT NULL CHECK (json_valid(model)),
    persistence TEXT    NOT NULL CHECK (json_valid(persistence)),
    corrected   TEXT    NOT NULL CHECK (json_valid(corrected)),
    correction  TEXT    NOT NULL CHECK (json_valid(correction)),
    ensemble    TEXT    CHECK (ensemble IS NULL OR json_valid(ensemble)),
    PRIMARY KEY (reach_id, poi_id, issue_day, lead_hour)
) STRICT;

-- One closed forecast: JSON of `verify::events::Event`.
CREATE TABLE verification_events (
    run_id    INTEGER NOT NULL,
    poi_id    TEXT    NOT NULL,
    reach_id  TEXT    NOT NULL,
    issued_at TEXT    NOT NULL,
    event     TEXT    NOT NULL CHECK (json_valid(event)),
    PRIMARY KEY (run_id, poi_id)
) STRICT;
CREATE INDEX verification_events_by_point ON verification_events (reach_id, poi_id, issued_at);

-- The error correction decided for each run at each gauged point (JSON of
-- `verify::correction::Correction`), served with the run's forecast; kept
-- when the forecast closes.
CREATE TABLE verification_corrections (
    run_id     INTEGER NOT NULL,
    poi_id     TEXT    NOT NULL,
    reach_id   TEXT    NOT NULL,
    correction TEXT    NOT NULL CHECK (json_valid(correction)),
    PRIMARY KEY (run_id, poi_id)
) STRICT;
