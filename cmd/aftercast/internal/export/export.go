// Package export writes the matched pairs that `aftercast pairs` lists,
// as CSV or as one JSON document, pair by pair as pages arrive so that an
// export of any size is never held in memory. Times are RFC 3339 in UTC
// and numbers are unrounded.
package export

import (
	"bufio"
	"encoding/csv"
	"encoding/json"
	"fmt"
	"io"
	"strconv"
	"time"

	aftercastv1 "github.com/aftercast/aftercast/api/aftercast/v1"
	"google.golang.org/protobuf/types/known/timestamppb"
)

// PairColumns is the CSV header, and the key order of a JSON pair.
var PairColumns = []string{"series", "model", "origin_time", "target_time", "lead", "forecast", "actual", "error",
	"late", "forecast_received_at", "actual_first_received_at", "late_reissue"}

// Formats lists the formats NewPairs accepts.
var Formats = []string{"csv", "json"}

// Pairs writes the pairs of one (series, model).
type Pairs struct {
	series, model string
	csv           *csv.Writer   // format csv
	json          *bufio.Writer // format json
	n             int
}

// jsonPair is one pair in JSON, keys in PairColumns order.
type jsonPair struct {
	Series                string  `json:"series"`
	Model                 string  `json:"model"`
	OriginTime            string  `json:"origin_time"`
	TargetTime            string  `json:"target_time"`
	Lead                  int32   `json:"lead"`
	Forecast              float64 `json:"forecast"`
	Actual                float64 `json:"actual"`
	Error                 float64 `json:"error"`
	Late                  bool    `json:"late"`
	ForecastReceivedAt    string  `json:"forecast_received_at"`
	ActualFirstReceivedAt string  `json:"actual_first_received_at"`
	LateReissue           bool    `json:"late_reissue"` // a late value stored beside the one in use (method.md §3)
}

// NewPairs starts an export in format (csv or json) by writing the CSV
// header or the opening of the JSON document {"pairs":[...]}.
func NewPairs(w io.Writer, format, series, model string) (*Pairs, error) {
	p := &Pairs{series: series, model: model}
	switch format {
	case "csv":
		p.csv = csv.NewWriter(w)
		if err := p.csv.Write(PairColumns); err != nil {
			return nil, err
		}
	case "json":
		p.json = bufio.NewWriter(w)
		if _, err := p.json.WriteString(`{"pairs":[`); err != nil {
			return nil, err
		}
	default:
		return nil, fmt.Errorf("unknown format %q: want csv or json", format)
	}
	return p, nil
}

// Write writes one pair.
func (p *Pairs) Write(pr *aftercastv1.Pair) error {
	p.n++
	if p.csv != nil {
		num := func(x float64) string { return strconv.FormatFloat(x, 'g', -1, 64) }
		return p.csv.Write([]string{p.series, p.model, stamp(pr.GetOriginTime()), stamp(pr.GetTargetTime()),
			strconv.Itoa(int(pr.GetLead())), num(pr.GetForecast()), num(pr.GetActual()), num(pr.GetError()),
			strconv.FormatBool(pr.GetLate()), stamp(pr.GetForecastReceiveTime()), stamp(pr.GetActualFirstReceiveTime()),
			strconv.FormatBool(pr.GetLateReissue())})
	}
	b, err := json.Marshal(jsonPair{
		Series: p.series, Model: p.model, OriginTime: stamp(pr.GetOriginTime()), TargetTime: stamp(pr.GetTargetTime()),
		Lead: pr.GetLead(), Forecast: pr.GetForecast(), Actual: pr.GetActual(), Error: pr.GetError(), Late: pr.GetLate(),
		ForecastReceivedAt: stamp(pr.GetForecastReceiveTime()), ActualFirstReceivedAt: stamp(pr.GetActualFirstReceiveTime()),
		LateReissue: pr.GetLateReissue(),
	})
	if err != nil {
		return fmt.Errorf("encoding pair: %w", err)
	}
	sep := ",\n  "
	if p.n == 1 {
		sep = "\n  "
	}
	if _, err := p.json.WriteString(sep); err != nil {
		return err
	}
	_, err = p.json.Write(b)
	return err
}

// Flush writes out what is buffered, so that a reader of the output sees
// each page as it arrives.
func (p *Pairs) Flush() error {
	if p.csv != nil {
		p.csv.Flush()
		return p.csv.Error()
	}
	return p.json.Flush()
}

// Close ends the export: it closes the JSON document and flushes.
func (p *Pairs) Close() error {
	if p.json != nil {
		end := "]}\n"
		if p.n > 0 {
			end = "\n]}\n"
		}
		if _, err := p.json.WriteString(end); err != nil {
			return err
		}
	}
	return p.Flush()
}

// stamp is a time in RFC 3339 (UTC, nanoseconds when present), or "" when
// unset.
func stamp(ts *timestamppb.Timestamp) string {
	if ts == nil {
		return ""
	}
	return ts.AsTime().Format(time.RFC3339Nano)
}
