ALTER TABLE series ALTER COLUMN key TYPE text COLLATE "default";
ALTER TABLE forecasts ALTER COLUMN model TYPE text COLLATE "default";
ALTER TABLE series_models ALTER COLUMN model TYPE text COLLATE "default";
ALTER TABLE baselines ALTER COLUMN model TYPE text COLLATE "default";
ALTER TABLE baseline_leads ALTER COLUMN model TYPE text COLLATE "default";
ALTER TABLE drift_states ALTER COLUMN model TYPE text COLLATE "default";
ALTER TABLE drift_events ALTER COLUMN model TYPE text COLLATE "default";
