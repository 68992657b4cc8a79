-- A re-issued value for a target whose actual was already known is stored
-- beside the scored value it does not replace (method.md §3): listed by
-- the pairs read as late, never scored. late_vals[h] is that value for
-- lead h; NULL when the vector has none, which is the common case.
ALTER TABLE forecasts ADD COLUMN late_vals float8[];
