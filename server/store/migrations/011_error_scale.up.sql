-- How a series' errors are scaled before they are judged (method.md §4a):
-- 'auto' divides them by a power of the forecast level fitted to each
-- baseline, 'absolute' judges them as they are. Existing series take the
-- method's default.
ALTER TABLE series ADD COLUMN error_scale text NOT NULL DEFAULT 'auto'
    CHECK (error_scale IN ('auto', 'absolute'));
