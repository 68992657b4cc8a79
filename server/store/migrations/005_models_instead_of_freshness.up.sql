-- Freshness is read from the input tables' primary keys at scrape time
-- (the newest row per key prefix is one index probe), so the write paths no
-- longer upsert a freshness row per batch — a quarter of their time. What
-- the scrape needs to know is which models a series has.
CREATE TABLE series_models (
    series_id bigint NOT NULL REFERENCES series (id),
    model     text NOT NULL,
    PRIMARY KEY (series_id, model)
);
INSERT INTO series_models (series_id, model) SELECT series_id, model FROM forecast_freshness;
INSERT INTO series_models (series_id, model) SELECT DISTINCT series_id, model FROM forecasts ON CONFLICT DO NOTHING;
DROP TABLE forecast_freshness;
DROP TABLE actual_freshness;
