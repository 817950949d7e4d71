-- CAP chains are keyed by stable ids (reach id, point id, level id) since
-- points and levels have ids: renaming a point or a threshold keeps its
-- chain. The columns keep their values; rows written before this change
-- hold display names there, and the alerting step rewrites the key of a
-- still-open chain to ids the first time it plans that reach again
-- (src/service/alerts.rs, `legacy_renames`).
ALTER TABLE cap_messages RENAME COLUMN point_name TO point_id;
ALTER TABLE cap_messages RENAME COLUMN threshold_name TO level_id;
