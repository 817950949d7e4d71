-- Retention: a run whose full results (hydrographs, profile, ensemble) were
-- pruned keeps their digest (JSON of `forecast::digest::ResultsDigest`) and
-- the time it was pruned; its provenance stays whole. Both NULL for a run
-- kept whole.
ALTER TABLE forecast_runs ADD COLUMN pruned_at TEXT;
ALTER TABLE forecast_runs ADD COLUMN digest TEXT
    CHECK (digest IS NULL OR json_valid(digest));
-- Audit rows are pruned by time; readings by gauge and time (their key).
