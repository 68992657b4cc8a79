package scoring

import (
	"math"
	"slices"
	"time"
)

// LeadMetrics are the metrics of the pairs of one lead.
type LeadMetrics struct {
	Lead int
	Metrics
}

// Table is the per-lead accuracy of a selection of pairs plus the overall
// metrics pooled over every pair of every lead of the selection.
type Table struct {
	Leads   []LeadMetrics // ascending by lead; leads without pairs are absent
	Overall Metrics
}

// Tabulator accumulates pairs per lead. The zero value is ready to use.
type Tabulator struct {
	dense []Accumulator        // by lead, for leads up to maxDenseLead
	far   map[int]*Accumulator // beyond it
}

// maxDenseLead bounds the lead-indexed slice; a direct index is several
// times cheaper than a map lookup on the hot path of scoring.
const maxDenseLead = 4096

// Add scores the pair (actual y, forecast f) at lead h.
func (t *Tabulator) Add(h int, y, f float64) { t.acc(h).Add(y, f) }

// Remove takes back a pair added earlier at lead h.
func (t *Tabulator) Remove(h int, y, f float64) { t.acc(h).Remove(y, f) }

// Merge adds every pair of o to t.
func (t *Tabulator) Merge(o *Tabulator) {
	o.each(func(h int, a *Accumulator) { t.acc(h).Merge(a) })
}

// Len is the number of pairs over all leads.
func (t *Tabulator) Len() int64 {
	var n int64
	t.each(func(_ int, a *Accumulator) { n += a.N() })
	return n
}

func (t *Tabulator) each(f func(h int, a *Accumulator)) {
	for h := range t.dense {
		f(h, &t.dense[h])
	}
	for h, a := range t.far {
		f(h, a)
	}
}

func (t *Tabulator) acc(h int) *Accumulator {
	if h >= 0 && h <= maxDenseLead {
		if h >= len(t.dense) {
			t.dense = append(t.dense, make([]Accumulator, h+1-len(t.dense))...)
		}
		return &t.dense[h]
	}
	if t.far == nil {
		t.far = make(map[int]*Accumulator)
	}
	a := t.far[h]
	if a == nil {
		a = new(Accumulator)
		t.far[h] = a
	}
	return a
}

// Table returns the per-lead and overall metrics. scale is the MASE scale,
// NaN when unknown.
func (t *Tabulator) Table(scale float64) Table {
	var hs []int
	t.each(func(h int, a *Accumulator) {
		if a.N() > 0 {
			hs = append(hs, h)
		}
	})
	slices.Sort(hs)
	var all Accumulator
	tab := Table{Leads: make([]LeadMetrics, 0, len(hs))}
	for _, h := range hs {
		a := t.acc(h)
		all.Merge(a)
		tab.Leads = append(tab.Leads, LeadMetrics{Lead: h, Metrics: a.Metrics(scale)})
	}
	tab.Overall = all.Metrics(scale)
	return tab
}

// Pair is one scored (origin, lead) pair: the actual and the forecast.
// Tabulating ignores the origin; drift replays order by it.
type Pair struct {
	Origin   time.Time
	Lead     int
	Actual   float64
	Forecast float64
}

// Tabulate is the per-lead table of a slice of pairs.
func Tabulate(pairs []Pair, scale float64) Table {
	var t Tabulator
	for _, p := range pairs {
		t.Add(p.Lead, p.Actual, p.Forecast)
	}
	return t.Table(scale)
}

// NoScale is the MASE scale to pass when none is known.
var NoScale = math.NaN()
