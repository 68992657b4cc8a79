DROP INDEX drift_events_origin;
ALTER TABLE drift_events DROP COLUMN cause;
ALTER TABLE drift_states DROP COLUMN onset_origin;
ALTER TABLE drift_states RENAME COLUMN noticed_at TO state_since;
ALTER TABLE drift_states ADD COLUMN machine jsonb NOT NULL DEFAULT '{}';
DROP TABLE drift_checkpoints;
DROP TABLE drift_marks;
