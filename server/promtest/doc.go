// Package promtest holds the end-to-end test of deploy/prometheus: it runs
// aftercast in-process, points a real Prometheus (the `prometheus` binary
// on PATH, Debian's package in CI) at its /metrics with the rules of
// deploy/prometheus/aftercast-rules.yml, and checks that the drift alerts
// fire for a drifting series and not for a healthy one, that their
// descriptions give the stored onset origins (data time), that every rule
// evaluates cleanly and that the drained evaluation backlog reads 0. The package has no
// non-test code; promtool's unit tests of the rules themselves live beside
// the rules (deploy/prometheus/aftercast-rules.test.yml).
package promtest
