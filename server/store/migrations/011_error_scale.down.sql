ALTER TABLE series DROP COLUMN error_scale;
