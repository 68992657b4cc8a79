// Package driftreport writes what `aftercast baseline`, `aftercast drift`,
// `aftercast drift history` and `aftercast events` print: the outcome of a
// baseline import, a baseline's per-lead expectations, bands and limits,
// the current drift states, replayed drift histories and drift events — as
// aligned tables for people, with values rounded, and as JSON for programs,
// with exact values and null for absent ones.
//
// Enums are written as their lower-case names without the type prefix
// (DRIFT_STATE_WITHIN is "within", DRIFT_METRIC_MAE is "mae",
// DRIFT_CAUSE_DATA is "data"). When a state began is data time, the onset
// origin; the wall clock only says when the service noticed or recorded
// something. JSON times are RFC 3339 in UTC; tables show origins in the
// series' time zone when the caller knows it (see [Zones]) and wall-clock
// times in UTC. The JSON shapes are the To* types' fields; the package
// talks to no server.
package driftreport
