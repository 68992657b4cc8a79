ALTER TABLE forecasts ADD CONSTRAINT forecasts_series_id_fkey FOREIGN KEY (series_id) REFERENCES series (id);
ALTER TABLE actuals ADD CONSTRAINT actuals_series_id_fkey FOREIGN KEY (series_id) REFERENCES series (id);
