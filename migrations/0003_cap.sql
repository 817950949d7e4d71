-- CAP 1.2 messages issued from forecast runs (src/alerts.rs plans them,
-- src/store/alerts.rs stores them). One row per message, never updated:
-- a later message of the same (reach, point, threshold) references the
-- earlier ones instead of replacing them.
--
-- `sent` and `expires` are the exact CAP date-time strings written into
-- the document (`YYYY-MM-DDThh:mm:ss-00:00`, CAP 1.2 §3.3.2), so a later
-- `references` triple built from this row matches the message it names
-- byte for byte. The form is fixed-width, so text order is time order.
-- Within one key, messages are ordered by (`sent`, `run_id`): one run
-- issues at most one message per key, so this order is total.
CREATE TABLE cap_messages (
    identifier      TEXT    PRIMARY KEY,             -- CAP identifier
    reach_id        TEXT    NOT NULL REFERENCES reaches (id),
    -- `reach/point/threshold`, each part with `%` and `/` percent-encoded
    -- so that names containing `/` cannot make two keys equal.
    key             TEXT    NOT NULL,
    point_name      TEXT    NOT NULL,
    threshold_name  TEXT    NOT NULL,
    sender          TEXT    NOT NULL,
    sent            TEXT    NOT NULL,                -- CAP time, as rendered
    expires         TEXT    NOT NULL,                -- CAP time, as rendered
    msg_type        TEXT    NOT NULL CHECK (msg_type IN ('Alert', 'Update', 'Cancel')),
    active          INTEGER NOT NULL CHECK (active IN (0, 1)),
    -- The facts the next plan compares against (cap::Material); NULL for
    -- a withdrawal, which states no forecast.
    material        TEXT    CHECK (material IS NULL OR json_valid(material)),
    document        TEXT    NOT NULL,                -- the CAP XML served
    title           TEXT    NOT NULL,                -- Atom entry title
    summary         TEXT    NOT NULL,                -- Atom entry summary
    run_id          INTEGER NOT NULL REFERENCES forecast_runs (id),
    CHECK ((msg_type = 'Cancel') = (active = 0))
) STRICT;
CREATE INDEX cap_messages_by_key ON cap_messages (reach_id, key, sent);
