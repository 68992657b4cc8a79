-- The foreign keys from the two input tables to series cost a trigger call
-- per row on the hot write paths (measured: a quarter of an actuals batch).
-- Series are never deleted and the store only writes rows for series it
-- has just resolved, so the keys guard nothing the store does not already
-- guarantee. The smaller tables keep theirs.
ALTER TABLE actuals DROP CONSTRAINT actuals_series_id_fkey;
ALTER TABLE forecasts DROP CONSTRAINT forecasts_series_id_fkey;
