-- Series keys and model names are identifiers of a restricted alphabet
-- (method.md §1), not prose: compare them bytewise. Under a server's glibc
-- or ICU locale every primary-key comparison would go through the
-- collation, and an operating-system upgrade that changes the collation
-- silently invalidates the indexes built under the old one (PostgreSQL
-- wiki, "Locale data changes"; recalled, not re-read). COLLATE "C" gives
-- the same order on every server. The private cluster is initdb'ed with
-- --locale=C already, so there nothing changes but the declaration.
ALTER TABLE series ALTER COLUMN key TYPE text COLLATE "C";
ALTER TABLE forecasts ALTER COLUMN model TYPE text COLLATE "C";
ALTER TABLE series_models ALTER COLUMN model TYPE text COLLATE "C";
ALTER TABLE baselines ALTER COLUMN model TYPE text COLLATE "C";
ALTER TABLE baseline_leads ALTER COLUMN model TYPE text COLLATE "C";
ALTER TABLE drift_states ALTER COLUMN model TYPE text COLLATE "C";
ALTER TABLE drift_events ALTER COLUMN model TYPE text COLLATE "C";
