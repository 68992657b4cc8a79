// Package evaluate scores a CSV file of (origin, target, forecast, actual)
// rows offline, per series, model and lead: the engine behind `aftercast
// evaluate`. It streams: for input sorted by origin within each series it
// holds one origin's rows per series at a time, so memory does not grow
// with the file's length. Unsorted input is re-read with every row held.
package evaluate

import (
	"errors"
	"fmt"
	"io"
	"math"
	"os"
	"slices"
	"strings"
	"time"

	"github.com/aftercast/aftercast/cmd/aftercast/internal/records"
	"github.com/aftercast/aftercast/cmd/aftercast/internal/report"
	"github.com/aftercast/aftercast/scoring"
)

// Options select and configure an evaluation. Zero times leave a range
// open; an empty Leads keeps every lead.
type Options struct {
	Step       string         // "" = infer per series from the data
	Location   *time.Location // zone of calendar steps; nil = UTC
	Season     int            // MASE season m in steps; < 1 = 1
	Leads      []int
	OriginFrom time.Time // inclusive
	OriginTo   time.Time // exclusive
	TargetFrom time.Time // inclusive
	TargetTo   time.Time // exclusive
	// Notes receives what the user should know but is not a result, such
	// as an inferred step. May be nil.
	Notes io.Writer
}

// maxStreamLead bounds a lead, so that a target decades after its origin
// (a typo in a year) is an error and not a huge allocation.
const maxStreamLead = 1_000_000

// maxErrors is how many input errors are collected before giving up, so a
// wrong file gives a useful list rather than a million lines.
const maxErrors = 10

// Columns of the pairs file.
const (
	colSeries   = "series"
	colModel    = "model"
	colOrigin   = "origin_time"
	colTarget   = "target_time"
	colForecast = "forecast"
	colActual   = "actual"
)

// File evaluates the pairs file at path, with optional training history
// (historyPath "" for none) for the MASE scale. Results are sorted by series
// and model. Any input error fails the whole evaluation: nothing is returned
// that could be mistaken for a result.
func File(path, historyPath string, opt Options) ([]report.Result, error) {
	if opt.Location == nil {
		opt.Location = time.UTC
	}
	e := &evaluation{opt: opt, leadSet: leadSet(opt.Leads)}
	if opt.Step != "" {
		st, err := scoring.ParseStep(opt.Step, opt.Location)
		if err != nil {
			return nil, err
		}
		e.fixedStep = st
	} else if err := e.inferSteps(path); err != nil {
		return nil, err
	}
	err := e.pass(path, false)
	if errors.Is(err, errUnsorted) {
		e.notef("%s is not sorted by origin within each series: reading it again with every row held in memory", path)
		err = e.pass(path, true)
	}
	if err != nil {
		return nil, err
	}
	var scales map[string]history
	if historyPath != "" {
		if scales, err = readHistory(historyPath); err != nil {
			return nil, err
		}
	}
	return e.results(scales)
}

type evaluation struct {
	opt       Options
	leadSet   map[int]bool
	fixedStep scoring.Step
	inferred  map[groupKey]scoring.Step
	groups    map[groupKey]*group
	errs      []error
}

type groupKey struct{ series, model string }

type pairValues struct{ f, y float64 }

type group struct {
	key         groupKey
	step        scoring.Step
	tab         scoring.Tabulator
	firstOrigin time.Time
	// Streaming: the rows of the newest origin, by lead (one target per
	// lead), for duplicate checks; curLeads lists the leads set in curRow.
	cur      time.Time
	curRow   []pairValues
	curSet   []bool
	curLeads []int
	// Holding all rows (unsorted input): every (origin, target).
	all map[[2]int64]pairValues
}

var errUnsorted = errors.New("input not sorted by origin within series")

func (e *evaluation) notef(format string, args ...any) {
	if e.opt.Notes != nil {
		fmt.Fprintf(e.opt.Notes, "aftercast: "+format+"\n", args...)
	}
}

func (e *evaluation) fail(err error) error {
	e.errs = append(e.errs, err)
	if len(e.errs) >= maxErrors {
		return e.joined()
	}
	return nil
}

func (e *evaluation) joined() error {
	if len(e.errs) >= maxErrors {
		e.errs = append(e.errs, fmt.Errorf("stopped after %d errors", maxErrors))
	}
	return errors.Join(e.errs...)
}

func open(path string, required ...string) (*os.File, *records.Reader, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, nil, fmt.Errorf("opening input: %w", err)
	}
	rd, err := records.NewReader(f, path, required...)
	if err != nil {
		f.Close()
		return nil, nil, err
	}
	return f, rd, nil
}

// rowReader parses the rows of a pairs file, re-using the previous origin
// and group key when their text repeats, as it does for every lead of one
// forecast.
type rowReader struct {
	*records.Reader
	series, model, origin, target, forecast, actual records.Column

	lastOrigin     string
	lastOriginTime time.Time
	lastKey        groupKey
}

func newRowReader(rd *records.Reader) *rowReader {
	return &rowReader{Reader: rd, series: rd.Column(colSeries), model: rd.Column(colModel),
		origin: rd.Column(colOrigin), target: rd.Column(colTarget),
		forecast: rd.Column(colForecast), actual: rd.Column(colActual)}
}

func (rr *rowReader) times() (groupKey, time.Time, time.Time, error) {
	series, err := rr.Required(rr.series)
	if err != nil {
		return groupKey{}, time.Time{}, time.Time{}, err
	}
	k := rr.lastKey
	if model := strings.TrimSpace(rr.String(rr.model)); series != k.series || model != k.model {
		k = groupKey{series: series, model: model}
		rr.lastKey = k
	}
	var o time.Time
	if s := rr.String(rr.origin); s != "" && s == rr.lastOrigin {
		o = rr.lastOriginTime
	} else {
		if o, err = rr.Time(rr.origin); err != nil {
			return k, o, o, err
		}
		rr.lastOrigin, rr.lastOriginTime = s, o
	}
	t, err := rr.Time(rr.target)
	return k, o, t, err
}

// pair parses the current row: its group key, origin, target, forecast
// and actual.
func (rr *rowReader) pair() (k groupKey, o, t time.Time, fc, y float64, err error) {
	if k, o, t, err = rr.times(); err != nil {
		return k, o, t, 0, 0, err
	}
	if fc, err = rr.Float(rr.forecast); err != nil {
		return k, o, t, 0, 0, err
	}
	y, err = rr.Float(rr.actual)
	return k, o, t, fc, y, err
}

// inferSteps reads only the times of every row to infer each group's step.
func (e *evaluation) inferSteps(path string) error {
	f, rd, err := open(path, colSeries, colOrigin, colTarget)
	if err != nil {
		return err
	}
	defer f.Close()
	guesses := make(map[groupKey]*scoring.StepGuess)
	rr := newRowReader(rd)
	for {
		err := rd.Next()
		if errors.Is(err, io.EOF) {
			break
		}
		if err != nil && !errors.Is(err, records.ErrRow) {
			return err
		}
		var k groupKey
		var o, t time.Time
		if err == nil {
			k, o, t, err = rr.times()
		}
		if err != nil {
			if err := e.fail(err); err != nil {
				return err
			}
			continue
		}
		g := guesses[k]
		if g == nil {
			g = scoring.NewStepGuess(e.opt.Location)
			guesses[k.clone()] = g
		}
		g.Observe(o)
		g.Observe(t)
	}
	if len(e.errs) > 0 {
		return e.joined()
	}
	e.inferred = make(map[groupKey]scoring.Step, len(guesses))
	var failed []string
	for _, k := range sortedKeys(guesses) {
		st, err := guesses[k].Step()
		if err != nil {
			failed = append(failed, fmt.Sprintf("%s: %v", k.label(), err))
			continue
		}
		e.inferred[k] = st
		e.notef("no --step given: inferred step %s for %s", st, k.label())
	}
	if len(failed) > 0 {
		return fmt.Errorf("cannot infer the step, pass --step:\n  %s", strings.Join(failed, "\n  "))
	}
	return nil
}

// clone detaches a key from the input chunk its strings point into.
func (k groupKey) clone() groupKey { return groupKey{strings.Clone(k.series), strings.Clone(k.model)} }

func (k groupKey) label() string {
	if k.model == "" {
		return "series " + k.series
	}
	return fmt.Sprintf("series %s model %s", k.series, k.model)
}

func (e *evaluation) stepFor(k groupKey) scoring.Step {
	if e.inferred != nil {
		return e.inferred[k]
	}
	return e.fixedStep
}

// pass reads the file once and scores every selected row. With holdAll
// false it returns errUnsorted as soon as a series goes back in origin.
func (e *evaluation) pass(path string, holdAll bool) error {
	f, rd, err := open(path, colSeries, colOrigin, colTarget, colForecast, colActual)
	if err != nil {
		return err
	}
	defer f.Close()
	e.groups = make(map[groupKey]*group)
	e.errs = nil
	rr := newRowReader(rd)
	var last *group
	for {
		err := rd.Next()
		if errors.Is(err, io.EOF) {
			break
		}
		if err != nil && !errors.Is(err, records.ErrRow) {
			return err // a broken CSV structure: later lines cannot be trusted
		}
		var k groupKey
		var o, t time.Time
		var fc, y float64
		if err == nil { // else a row refused on its own (records.ErrRow)
			k, o, t, fc, y, err = rr.pair()
		}
		if err != nil {
			if err := e.fail(err); err != nil {
				return err
			}
			continue
		}
		last = e.groupFor(last, k, o, holdAll)
		if err := e.score(rd, last, o, t, fc, y, holdAll); err != nil {
			if errors.Is(err, errUnsorted) {
				return err
			}
			if err := e.fail(err); err != nil {
				return err
			}
		}
	}
	if len(e.errs) > 0 {
		return e.joined()
	}
	return nil
}

// groupFor returns the group of key k, made with first origin o when it is
// new; last, the previous row's group, is the answer for most rows.
func (e *evaluation) groupFor(last *group, k groupKey, o time.Time, holdAll bool) *group {
	if last != nil && last.key == k {
		return last
	}
	g := e.groups[k]
	if g == nil {
		k = k.clone()
		g = &group{key: k, step: e.stepFor(k), firstOrigin: o, cur: o}
		if holdAll {
			g.all = make(map[[2]int64]pairValues)
		}
		e.groups[k] = g
	}
	return g
}

func (e *evaluation) score(rd *records.Reader, g *group, o, t time.Time, fc, y float64, holdAll bool) error {
	h, err := g.step.Lead(o, t)
	if err != nil {
		return rd.Errorf("%s: %w", g.key.label(), err)
	}
	v := pairValues{fc, y}
	if holdAll {
		key := [2]int64{o.UnixNano(), t.UnixNano()}
		if prev, ok := g.all[key]; ok {
			return duplicate(rd, prev, v)
		}
		g.all[key] = v
	} else {
		switch c := o.Compare(g.cur); {
		case c < 0:
			return errUnsorted
		case c > 0:
			g.cur = o
			for _, l := range g.curLeads {
				g.curSet[l] = false
			}
			g.curLeads = g.curLeads[:0]
		}
		if h >= len(g.curSet) {
			if h > maxStreamLead {
				return rd.Errorf("%s: lead %d is beyond %d steps", g.key.label(), h, maxStreamLead)
			}
			g.curSet = append(g.curSet, make([]bool, h+1-len(g.curSet))...)
			g.curRow = append(g.curRow, make([]pairValues, h+1-len(g.curRow))...)
		}
		if g.curSet[h] {
			return duplicate(rd, g.curRow[h], v)
		}
		g.curSet[h], g.curRow[h] = true, v
		g.curLeads = append(g.curLeads, h)
	}
	if o.Before(g.firstOrigin) {
		g.firstOrigin = o
	}
	if !e.selected(h, o, t) {
		return nil
	}
	g.tab.Add(h, y, fc)
	return nil
}

// duplicate accepts an exact repeat of a row (it is counted once) and
// refuses a conflicting one.
func duplicate(rd *records.Reader, prev, v pairValues) error {
	if prev == v {
		return nil
	}
	return rd.Errorf("duplicate (series, origin, target) with different values: forecast %v, actual %v here; forecast %v, actual %v earlier",
		v.f, v.y, prev.f, prev.y)
}

func (e *evaluation) selected(h int, o, t time.Time) bool {
	if e.leadSet != nil && !e.leadSet[h] {
		return false
	}
	return inRange(o, e.opt.OriginFrom, e.opt.OriginTo) && inRange(t, e.opt.TargetFrom, e.opt.TargetTo)
}

func inRange(t, from, to time.Time) bool {
	return (from.IsZero() || !t.Before(from)) && (to.IsZero() || t.Before(to))
}

func leadSet(leads []int) map[int]bool {
	if len(leads) == 0 {
		return nil
	}
	s := make(map[int]bool, len(leads))
	for _, h := range leads {
		s[h] = true
	}
	return s
}

func (e *evaluation) results(hist map[string]history) ([]report.Result, error) {
	out := make([]report.Result, 0, len(e.groups))
	var errs []error
	for _, k := range sortedKeys(e.groups) {
		g := e.groups[k]
		scale := math.NaN()
		if h, ok := hist[k.series]; ok {
			s, err := h.scale(g.step, g.firstOrigin, e.opt.Season)
			if err != nil {
				errs = append(errs, err)
				continue
			}
			scale = s
		}
		out = append(out, report.Result{Series: k.series, Model: k.model, Step: g.step.String(), Table: g.tab.Table(scale)})
	}
	if len(errs) > 0 {
		return nil, errors.Join(errs...)
	}
	return out, nil
}

func sortedKeys[V any](m map[groupKey]V) []groupKey {
	ks := make([]groupKey, 0, len(m))
	for k := range m {
		ks = append(ks, k)
	}
	slices.SortFunc(ks, func(a, b groupKey) int {
		if c := strings.Compare(a.series, b.series); c != 0 {
			return c
		}
		return strings.Compare(a.model, b.model)
	})
	return ks
}
