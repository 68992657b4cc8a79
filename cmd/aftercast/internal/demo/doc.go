// Package demo is the invented scenario behind `aftercast demo`, and the
// report the demo prints at its end.
//
// The scenario is a district-heating utility that forecasts the hourly heat
// demand (MW) of eight substations every morning. Everything in it is
// synthetic and made up — names, loads, weather — and generated from a
// seed, deterministically, by [Generate]: outdoor temperature (an annual
// cycle, a daily cycle and persistent weather), heat demand driven by
// heating degrees with daily and weekly profiles, a weather-service
// temperature forecast whose error grows with lead, and a forecaster that
// turns it into 48 hourly demand forecasts from each 05:00 origin. The
// load the model does not explain is a share of the load, and temperature
// forecasts err more in winter, so the forecast errors grow with the heat
// load as real ones do. A year of daily backtest origins precedes 120
// production days through the heating season, November to February,
// during which two faults begin: a replaced heat meter that reads 8% high,
// and a temperature feed that arrives a day stale. The backtest averages
// summer and winter errors; the winter is judged against it as the
// series' error scale says (method.md §4a).
//
// The package owns the numbers and their timing; it talks to no server.
// cmd/aftercast/demo.go sends them through the public gRPC API as a real
// producer would, and hands the drift states and events it reads back to
// [WriteReport].
package demo
