-- Hindcast runs: a past period replayed as if live, each run issued at a
-- past instant from what was known then (provenance.hindcast says how).
-- They are stored beside live runs and verified like them, but are never
-- served as the current forecast, never alert and never feed the board.
ALTER TABLE forecast_runs ADD COLUMN kind TEXT NOT NULL DEFAULT 'live'
    CHECK (kind IN ('live', 'hindcast'));
CREATE INDEX forecast_runs_live ON forecast_runs (reach_id, kind, id);
