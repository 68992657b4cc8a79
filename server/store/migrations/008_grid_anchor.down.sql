ALTER TABLE series DROP COLUMN grid_anchor;
