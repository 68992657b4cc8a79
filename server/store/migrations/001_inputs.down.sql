DROP TABLE actuals;
DROP TABLE forecasts;
DROP TABLE series;
