-- The ensemble of a run (percentile traces, crest range and level chances
-- per point), attached after the run's deterministic results are stored
-- and served: JSON of `forecast::record::EnsembleRecord`, NULL until the
-- ensemble is done, and for runs made before ensembles or with them off.
ALTER TABLE forecast_runs ADD COLUMN ensemble TEXT
    CHECK (ensemble IS NULL OR json_valid(ensemble));
