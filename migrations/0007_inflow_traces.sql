-- The extra traces of an inflow upload (a forecaster's low/high range or
-- the members of an inflow ensemble), each on the main series' times:
-- JSON `[{name, series: [{time, discharge}]}]`, NULL for a single-series
-- upload (every upload stored before traces existed).
ALTER TABLE inflow_forecasts ADD COLUMN traces TEXT
    CHECK (traces IS NULL OR json_valid(traces));
