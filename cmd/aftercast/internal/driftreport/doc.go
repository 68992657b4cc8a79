// Package driftreport writes what `aftercast baseline`, `aftercast drift`
// and `aftercast events` print: the outcome of a baseline import, a
// baseline's per-lead expectations, bands and limits, the current drift
// states and drift events — as aligned tables for people, with values
// rounded, and as JSON for programs, with exact values and null for absent
// ones.
//
// Enums are written as their lower-case names without the type prefix
// (DRIFT_STATE_WITHIN is "within", DRIFT_METRIC_MAE is "mae"). Times are
// RFC 3339 in UTC. The JSON shapes are the To* types' fields; the package
// talks to no server.
package driftreport
