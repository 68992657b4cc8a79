CREATE TABLE forecast_freshness (
    series_id        bigint NOT NULL REFERENCES series (id),
    model            text NOT NULL,
    last_origin      timestamptz NOT NULL,
    last_received_at timestamptz NOT NULL,
    PRIMARY KEY (series_id, model)
);
CREATE TABLE actual_freshness (
    series_id        bigint NOT NULL REFERENCES series (id) PRIMARY KEY,
    last_time        timestamptz NOT NULL,
    last_received_at timestamptz NOT NULL
);
DROP TABLE series_models;
