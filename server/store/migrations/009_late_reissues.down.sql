ALTER TABLE forecasts DROP COLUMN late_vals;
