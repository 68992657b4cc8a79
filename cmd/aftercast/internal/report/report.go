// Package report writes per-lead accuracy results as a person-readable
// table, as JSON, or as CSV. `aftercast evaluate` and `aftercast accuracy`
// share it so that both print the same shapes.
package report

import (
	"encoding/csv"
	"encoding/json"
	"fmt"
	"io"
	"math"
	"strconv"
	"text/tabwriter"

	aftercastv1 "github.com/aftercast/aftercast/api/aftercast/v1"
	"github.com/aftercast/aftercast/scoring"
)

// Result is the accuracy of one (series, model).
type Result struct {
	Series string
	Model  string
	Step   string
	Table  scoring.Table
	// Late counts, by lead and overall, the pairs left unscored because
	// their forecast arrived after the actual (method §3); nil where there
	// is no such notion (offline evaluation).
	Late *Late
}

// Late is the count of late pairs of a Result.
type Late struct {
	ByLead  map[int]int64
	Overall int64
}

// Formats lists the names Write accepts.
var Formats = []string{"table", "json", "csv"}

// Write writes results in the named format.
func Write(w io.Writer, format string, rs []Result) error {
	switch format {
	case "table":
		return WriteTable(w, rs)
	case "json":
		return WriteJSON(w, rs)
	case "csv":
		return WriteCSV(w, rs)
	}
	return fmt.Errorf("unknown format %q: want table, json or csv", format)
}

// Metrics is the JSON shape of one row of metrics, shared by every command
// that prints them; pointers make undefined metrics null rather than NaN,
// which JSON cannot carry.
type Metrics struct {
	Lead          *int     `json:"lead,omitempty"`
	N             int64    `json:"n"`
	ME            *float64 `json:"me"`
	MAE           *float64 `json:"mae"`
	RMSE          *float64 `json:"rmse"`
	MAPE          *float64 `json:"mape"`
	MAPEExcluded  int64    `json:"mape_excluded"`
	SMAPE         *float64 `json:"smape"`
	SMAPEExcluded int64    `json:"smape_excluded"`
	WAPE          *float64 `json:"wape"`
	MASE          *float64 `json:"mase"`
	// Late is the count of late pairs, not in n (accuracy only).
	Late *int64 `json:"late,omitempty"`
}

type jsonResult struct {
	Series  string    `json:"series"`
	Model   string    `json:"model"`
	Step    string    `json:"step"`
	Leads   []Metrics `json:"leads"`
	Overall Metrics   `json:"overall"`
}

func opt(x float64) *float64 {
	if !scoring.Defined(x) {
		return nil
	}
	return &x
}

// MetricsJSON is the JSON shape of m.
func MetricsJSON(m scoring.Metrics) Metrics {
	return Metrics{N: m.N, ME: opt(m.ME), MAE: opt(m.MAE), RMSE: opt(m.RMSE),
		MAPE: opt(m.MAPE), MAPEExcluded: m.MAPEExcluded, SMAPE: opt(m.SMAPE), SMAPEExcluded: m.SMAPEExcluded,
		WAPE: opt(m.WAPE), MASE: opt(m.MASE)}
}

// FromProto is the metrics of an API response; an absent value is
// undefined (NaN).
func FromProto(m *aftercastv1.AccuracyMetrics) scoring.Metrics {
	v := func(p *float64) float64 {
		if p == nil {
			return math.NaN()
		}
		return *p
	}
	return scoring.Metrics{N: m.GetN(), ME: v(m.Me), MAE: v(m.Mae), RMSE: v(m.Rmse), MAPE: v(m.Mape),
		MAPEExcluded: m.GetMapeExcluded(), SMAPE: v(m.Smape), SMAPEExcluded: m.GetSmapeExcluded(), WAPE: v(m.Wape), MASE: v(m.Mase)}
}

// WriteJSON writes {"results":[{series, model, step, leads, overall}]} with
// unrounded values and null for undefined metrics.
func WriteJSON(w io.Writer, rs []Result) error {
	out := struct {
		Results []jsonResult `json:"results"`
	}{Results: make([]jsonResult, 0, len(rs))}
	for _, r := range rs {
		jr := jsonResult{Series: r.Series, Model: r.Model, Step: r.Step, Leads: make([]Metrics, 0, len(r.Table.Leads)),
			Overall: MetricsJSON(r.Table.Overall)}
		if r.Late != nil {
			jr.Overall.Late = &r.Late.Overall
		}
		for _, l := range r.Table.Leads {
			m := MetricsJSON(l.Metrics)
			m.Lead = &l.Lead
			if r.Late != nil {
				n := r.Late.ByLead[l.Lead]
				m.Late = &n
			}
			jr.Leads = append(jr.Leads, m)
		}
		out.Results = append(out.Results, jr)
	}
	enc := json.NewEncoder(w)
	enc.SetIndent("", "  ")
	return enc.Encode(out)
}

var csvHeader = []string{"series", "model", "step", "lead", "n", "me", "mae", "rmse", "mape", "mape_excluded", "smape", "smape_excluded", "wape", "mase", "late"}

// WriteCSV writes one row per (series, model, lead) and an "overall" row
// per (series, model); undefined metrics are empty fields, and so is late
// where a result has no late counts.
func WriteCSV(w io.Writer, rs []Result) error {
	cw := csv.NewWriter(w)
	if err := cw.Write(csvHeader); err != nil {
		return err
	}
	num := func(x float64) string {
		if !scoring.Defined(x) {
			return ""
		}
		return strconv.FormatFloat(x, 'g', -1, 64)
	}
	row := func(r Result, lead string, m scoring.Metrics, late func(*Late) int64) []string {
		lateField := ""
		if r.Late != nil {
			lateField = strconv.FormatInt(late(r.Late), 10)
		}
		return []string{r.Series, r.Model, r.Step, lead, strconv.FormatInt(m.N, 10), num(m.ME), num(m.MAE), num(m.RMSE),
			num(m.MAPE), strconv.FormatInt(m.MAPEExcluded, 10), num(m.SMAPE), strconv.FormatInt(m.SMAPEExcluded, 10), num(m.WAPE), num(m.MASE),
			lateField}
	}
	for _, r := range rs {
		for _, l := range r.Table.Leads {
			if err := cw.Write(row(r, strconv.Itoa(l.Lead), l.Metrics, func(lt *Late) int64 { return lt.ByLead[l.Lead] })); err != nil {
				return err
			}
		}
		if err := cw.Write(row(r, "overall", r.Table.Overall, func(lt *Late) int64 { return lt.Overall })); err != nil {
			return err
		}
	}
	cw.Flush()
	return cw.Error()
}

// WriteTable writes, per (series, model), a heading and an aligned table
// with leads as rows and the overall row last. Values are rounded for
// reading; use JSON or CSV for exact values.
func WriteTable(w io.Writer, rs []Result) error {
	for i, r := range rs {
		if i > 0 {
			fmt.Fprintln(w)
		}
		model := r.Model
		if model == "" {
			model = "-"
		}
		fmt.Fprintf(w, "series %s  model %s  step %s  pairs %d\n", r.Series, model, r.Step, r.Table.Overall.N)
		tw := tabwriter.NewWriter(w, 0, 0, 2, ' ', tabwriter.AlignRight)
		fmt.Fprintln(tw, "lead\tn\tME\tMAE\tRMSE\tMAPE%\tsMAPE%\tWAPE%\tMASE\t")
		line := func(lead string, m scoring.Metrics) {
			fmt.Fprintf(tw, "%s\t%d\t%s\t%s\t%s\t%s\t%s\t%s\t%s\t\n", lead, m.N, Human(m.ME), Human(m.MAE), Human(m.RMSE),
				WithExcluded(m.MAPE, m.MAPEExcluded), WithExcluded(m.SMAPE, m.SMAPEExcluded), Human(m.WAPE), Human(m.MASE))
		}
		for _, l := range r.Table.Leads {
			line(strconv.Itoa(l.Lead), l.Metrics)
		}
		line("overall", r.Table.Overall)
		if err := tw.Flush(); err != nil {
			return err
		}
	}
	if len(rs) == 0 {
		fmt.Fprintln(w, "no pairs selected")
	}
	return nil
}

// Human rounds a value for reading; "—" when undefined. Tables share it
// so that every number a person reads is rounded alike.
func Human(x float64) string {
	if !scoring.Defined(x) {
		return "—"
	}
	switch a := math.Abs(x); {
	case a >= 100:
		return strconv.FormatFloat(x, 'f', 1, 64)
	case a >= 1:
		return strconv.FormatFloat(x, 'f', 3, 64)
	case a >= 0.001 || a == 0:
		return strconv.FormatFloat(x, 'f', 4, 64)
	default:
		return strconv.FormatFloat(x, 'g', 4, 64)
	}
}

// WithExcluded is Human, marking a percent metric that left pairs out.
func WithExcluded(x float64, excluded int64) string {
	if excluded == 0 {
		return Human(x)
	}
	return fmt.Sprintf("%s (-%d)", Human(x), excluded)
}
