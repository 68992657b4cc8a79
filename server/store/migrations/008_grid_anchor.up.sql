-- Where a series' grid starts (method.md §1): origins and actual times must
-- be grid_anchor + k·step. NULL is the default, local midnight of 1 January
-- 2000 in the series' zone (Monday 3 January 2000 for week steps), which
-- the store derives, so existing series keep their meaning.
ALTER TABLE series ADD COLUMN grid_anchor timestamptz;
