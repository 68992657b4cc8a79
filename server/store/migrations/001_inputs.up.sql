-- aftercast stores its inputs and derives every score on read
-- (docs: "store inputs, derive scores"). Every primary key starts with
-- series_id so that the tables can later be distributed or hash-partitioned
-- by series; forecasts and actuals can also be range-partitioned by time
-- (origin / time) without changing a key, since both keys contain it.

CREATE TABLE series (
    id             bigint GENERATED ALWAYS AS IDENTITY PRIMARY KEY,
    key            text NOT NULL UNIQUE CHECK (key ~ '^[A-Za-z0-9_.:/-]{1,200}$'),
    step           text NOT NULL,
    horizon        integer NOT NULL CHECK (horizon >= 1),
    season         integer NOT NULL DEFAULT 0 CHECK (season >= 0),
    unit           text NOT NULL DEFAULT '',
    time_zone      text NOT NULL DEFAULT 'UTC',
    decision_leads integer[] NOT NULL DEFAULT '{}',
    created_at     timestamptz NOT NULL DEFAULT now()
);

-- One row per forecast vector. vals[h] is the value for lead h (NULL where
-- the producer sent none). late[h] is true where that value reached us after
-- the actual of its target was known (the hindsight guard): it is stored but
-- never scored. late is NULL when no lead is late, which is the common case.
CREATE TABLE forecasts (
    series_id         bigint NOT NULL REFERENCES series (id),
    model             text NOT NULL,
    origin            timestamptz NOT NULL,
    vals              float8[] NOT NULL,
    late              boolean[],
    quantile_levels   float8[],
    quantile_vals     float8[], -- [level][lead], same leads as vals
    issued_at         timestamptz,
    first_received_at timestamptz NOT NULL,
    received_at       timestamptz NOT NULL,
    PRIMARY KEY (series_id, model, origin)
);

-- The newest value of each actual; first_received_at is never overwritten
-- because the hindsight guard compares against it.
CREATE TABLE actuals (
    series_id         bigint NOT NULL REFERENCES series (id),
    time              timestamptz NOT NULL,
    value             float8 NOT NULL,
    first_received_at timestamptz NOT NULL,
    received_at       timestamptz NOT NULL,
    revisions         integer NOT NULL DEFAULT 0,
    PRIMARY KEY (series_id, time)
);
