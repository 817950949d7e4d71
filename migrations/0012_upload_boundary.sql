-- An uploaded inflow forecast names the boundary it is for: NULL is the
-- upstream inflow (every upload before this migration), otherwise the name
-- of one of the reach's tributaries (`laterals[].name`). The upload in force
-- is the newest one not withdrawn for that boundary.
ALTER TABLE inflow_forecasts ADD COLUMN boundary TEXT;
