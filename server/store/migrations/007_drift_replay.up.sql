-- Drift is a replay of the stored data in origin order (method.md §5). A
-- write that changes scored pairs leaves a mark of what must be re-judged
-- in the transaction that stores its data; the evaluator drains the marks
-- off the request path, so a crash between the acknowledgement and the
-- evaluation loses no evaluation.
CREATE TABLE drift_marks (
    id          bigint GENERATED ALWAYS AS IDENTITY PRIMARY KEY,
    series_id   bigint NOT NULL,
    model       text COLLATE "C",  -- NULL: every model of the series
    from_origin timestamptz,       -- NULL: the whole production period
    cause       text NOT NULL CHECK (cause IN ('data', 'baseline')),
    created_at  timestamptz NOT NULL DEFAULT now()
);
CREATE INDEX drift_marks_series ON drift_marks (series_id);

-- Where a replay can resume: the detectors of every lead after the
-- evaluations up to origin, for one baseline version (scoring.Checkpoint as
-- JSON). A replay that starts here reads the pairs from the checkpoint's
-- window_from on.
CREATE TABLE drift_checkpoints (
    series_id        bigint NOT NULL,
    model            text COLLATE "C" NOT NULL,
    origin           timestamptz NOT NULL,
    baseline_version integer NOT NULL,
    seq              integer NOT NULL,
    checkpoint       jsonb NOT NULL,
    PRIMARY KEY (series_id, model, origin)
);

-- The detector's state lives in the checkpoints now. A state's onset is an
-- origin (data time); the wall-clock time it was announced is noticed_at.
ALTER TABLE drift_states DROP COLUMN machine;
ALTER TABLE drift_states RENAME COLUMN state_since TO noticed_at;
ALTER TABLE drift_states ADD COLUMN onset_origin timestamptz;

-- Events: origin_time is the onset origin of the state entered; cause says
-- whether new data, a re-judgement of origins judged before, or a new
-- baseline announced it.
ALTER TABLE drift_events ADD COLUMN cause text NOT NULL DEFAULT 'data'
    CHECK (cause IN ('data', 'revision', 'baseline'));
CREATE INDEX drift_events_origin ON drift_events (origin_time);

-- Judge every baselined (series, model) once more under the replay: only
-- differences from the stored states are announced.
INSERT INTO drift_marks (series_id, model, cause) SELECT DISTINCT series_id, model, 'baseline' FROM baselines;
