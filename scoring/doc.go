// Package scoring holds aftercast's arithmetic: series steps and forecast
// leads, the error metrics of method.md §2 as mergeable streaming
// accumulators, and per-lead accuracy tables.
//
// It is pure computation: no I/O, no clocks, no SQL, gRPC or Prometheus.
// Time zones appear only in the calendar arithmetic of [Step]. The server,
// the CLI and the benchmarks translate their data into these types.
package scoring
