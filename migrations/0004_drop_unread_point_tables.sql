-- The points of interest and their thresholds live in the reach document
-- (reach_versions.document), which every reader uses. These two copies were
-- written with each reach version and never read: drop them, so that the
-- reach document is the one home of a point's description.
DROP TABLE poi_thresholds;
DROP TABLE points_of_interest;
