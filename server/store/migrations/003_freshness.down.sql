DROP TABLE actual_freshness;
DROP TABLE forecast_freshness;
