-- Baselines: the backtest a (series, model) is judged against. Each import
-- is a new version; the highest version is active. The per-lead rows keep
-- origin order, which the band construction needs (method.md §4).
CREATE TABLE baselines (
    series_id            bigint NOT NULL REFERENCES series (id),
    model                text NOT NULL,
    version              integer NOT NULL,
    created_at           timestamptz NOT NULL DEFAULT now(),
    first_origin         timestamptz NOT NULL,
    last_origin          timestamptz NOT NULL,
    origin_cadence_steps integer NOT NULL,
    max_lead             integer NOT NULL,
    row_count            bigint NOT NULL,
    training_count       bigint NOT NULL,
    mase_scale           float8,
    warnings             jsonb NOT NULL DEFAULT '[]',
    content_hash         bytea NOT NULL, -- of the uploaded rows, so a retried import makes no new version
    PRIMARY KEY (series_id, model, version)
);

CREATE TABLE baseline_leads (
    series_id bigint NOT NULL,
    model     text NOT NULL,
    version   integer NOT NULL,
    lead      integer NOT NULL,
    origins   timestamptz[] NOT NULL, -- ascending
    forecasts float8[] NOT NULL,
    actuals   float8[] NOT NULL,
    PRIMARY KEY (series_id, model, version, lead),
    FOREIGN KEY (series_id, model, version) REFERENCES baselines ON DELETE CASCADE
);

-- Current drift state per (series, model, lead); lead 0 is the series-level
-- state over the pooled decision leads. machine is the state machine's
-- serialised form, so a restart resumes exactly where it was.
CREATE TABLE drift_states (
    series_id        bigint NOT NULL REFERENCES series (id),
    model            text NOT NULL,
    lead             integer NOT NULL,
    baseline_version integer NOT NULL,
    state            text NOT NULL,
    state_since      timestamptz NOT NULL,
    machine          jsonb NOT NULL,
    snapshot         jsonb NOT NULL, -- the last evaluation's window values, bands and limits
    last_origin      timestamptz,
    updated_at       timestamptz NOT NULL,
    PRIMARY KEY (series_id, model, lead)
);

-- Every change of drift state. seq orders events in commit order (see
-- the store's event writer), which the resumable watch relies on.
CREATE TABLE drift_events (
    series_id        bigint NOT NULL REFERENCES series (id),
    seq              bigint GENERATED ALWAYS AS IDENTITY,
    model            text NOT NULL,
    lead             integer, -- NULL: the series-level state
    event_time       timestamptz NOT NULL,
    origin_time      timestamptz NOT NULL,
    metric           text NOT NULL,
    previous         text NOT NULL,
    state            text NOT NULL,
    value            float8,
    limit_value      float8,
    band_lower       float8,
    band_upper       float8,
    window_n         integer NOT NULL,
    k_eff            float8,
    baseline_version integer NOT NULL,
    PRIMARY KEY (series_id, seq)
);
CREATE UNIQUE INDEX drift_events_seq ON drift_events (seq);
