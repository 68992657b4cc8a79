// Package push reads the CSV files of `aftercast push` into the messages
// the client streams: forecast rows grouped into vectors by (series,
// origin) with their leads computed from the series' step, and actuals.
// Rows that are bad on their own are rejected with their line and never
// sent; Lines keeps where every sent point came from, so that the server's
// rejections, which name positions in the stream, are reported by line.
//
// It reads row by row, holding a bounded number of open vectors, and does
// no network I/O: looking series up and sending are the caller's (see
// SeriesCache).
package push
