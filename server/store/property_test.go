package store_test

import (
	"context"
	"flag"
	"fmt"
	"maps"
	"math"
	"math/rand/v2"
	"slices"
	"strings"
	"sync/atomic"
	"testing"
	"time"

	"github.com/jackc/pgx/v5/pgxpool"

	"github.com/aftercast/aftercast/scoring"
	"github.com/aftercast/aftercast/server/store"
	"github.com/aftercast/aftercast/server/store/storetest"
)

// Rerun one failing case with
//
//	go test -run 'TestLiveEqualsOffline/seed=N$' ./server/store/
//
// or explore other seeds with -prop.base and -prop.cases.
var (
	propBase  = flag.Uint64("prop.base", 1, "first seed of TestLiveEqualsOffline")
	propCases = flag.Int("prop.cases", 240, "number of seeded cases of TestLiveEqualsOffline")
)

// TestLiveEqualsOffline proves method.md §3's last rule over seeded random
// interleavings: forecast vectors (dense and sparse), repeats, re-issues,
// actuals, repeated and revised actuals are shuffled and pushed in random
// batches, and everything the store reports — the acknowledgements, the
// accuracy table, the late count, the pair list and windowed selections —
// must equal an in-test model that applies the rules one item at a time in
// the same order.
//
//nolint:paralleltest // the cases are subtests run by a pool of workers, more at once than -parallel allows, and must all end before the coverage check; t.Parallel in them would defeat both
func TestLiveEqualsOffline(t *testing.T) {
	t.Parallel()
	// One database and one pool for all cases; each case has its own series.
	cfg, err := pgxpool.ParseConfig(storetest.URL(t))
	if err != nil {
		t.Fatal(err)
	}
	cfg.MaxConns = 16
	pool, err := pgxpool.NewWithConfig(context.Background(), cfg)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(pool.Close)
	s := store.New(pool, store.Limits{})

	// The cases wait on PostgreSQL round trips far more than on the CPU, so
	// run more of them at once than -parallel (GOMAXPROCS) would.
	const workers = 12
	seeds := make(chan uint64)
	done := make(chan struct{})
	for range workers {
		go func() {
			defer func() { done <- struct{}{} }()
			for seed := range seeds {
				t.Run(fmt.Sprintf("seed=%d", seed), func(t *testing.T) {
					propCase(t, s, seed)
				})
			}
		}()
	}
	for i := range *propCases {
		seeds <- *propBase + uint64(i)
	}
	close(seeds)
	for range workers {
		<-done
	}
	// The generator must reach every rule, or the test proves less than it
	// claims. (Checked when every case ran, not under -run …/seed=N.)
	c := &propCoverage
	ran := c.cases.Swap(0)
	t.Logf("over %d cases: forecast points accepted %d, duplicate %d, late %d (%d late re-issues stored beside a value); actuals accepted %d, duplicate %d, revised %d; %d windowed selections met late pairs",
		ran, c.fAccepted.Load(), c.fDuplicate.Load(), c.fLate.Load(), c.lateReissues.Load(), c.aAccepted.Load(), c.aDuplicate.Load(), c.aRevised.Load(), c.windowLate.Load())
	if ran >= 100 && (c.fDuplicate.Load() == 0 || c.fLate.Load() == 0 || c.lateReissues.Load() == 0 || c.aDuplicate.Load() == 0 || c.aRevised.Load() == 0 || c.windowLate.Load() == 0) {
		t.Error("the generator no longer produces every kind of event: see the counts above")
	}
}

// propCoverage counts what the cases exercised.
var propCoverage struct {
	cases, fAccepted, fDuplicate, fLate, aAccepted, aDuplicate, aRevised, windowLate, lateReissues atomic.Int64
}

// propEvent is one item of a push: a forecast vector or an actual.
type propEvent struct {
	fc    *propVector
	act   *propActual
	label string // what the generator meant it to be, for failure messages
}

type propVector struct {
	model  string
	origin int // grid index
	vals   []float64
}

type propActual struct {
	target int // grid index
	value  float64
}

// propModel applies method.md §3 sequentially.
type propModel struct {
	fcs  map[propFKey]*propRow
	acts map[int]float64
	// counts
	fAccepted, fDuplicate, fLate int64
	aAccepted, aDuplicate, aRev  int64
	aScored                      int64 // pairs completed by new actuals
}

type propFKey struct {
	model  string
	origin int
}

type propRow struct {
	vals     []float64 // NaN = none
	late     []bool
	lateVals []float64 // a late re-issue stored beside a scored value; NaN = none
}

func newPropModel() *propModel {
	return &propModel{fcs: map[propFKey]*propRow{}, acts: map[int]float64{}}
}

func (m *propModel) forecast(v *propVector) {
	k := propFKey{v.model, v.origin}
	r := m.fcs[k]
	if r == nil {
		r = &propRow{}
		m.fcs[k] = r
	}
	for len(r.vals) < len(v.vals) {
		r.vals = append(r.vals, math.NaN())
		r.late = append(r.late, false)
		r.lateVals = append(r.lateVals, math.NaN())
	}
	for i, x := range v.vals {
		if math.IsNaN(x) {
			continue
		}
		_, known := m.acts[v.origin+i+1]
		switch {
		case r.vals[i] == x, known && r.lateVals[i] == x:
			m.fDuplicate++
		case known:
			// Late (method.md §3): stored, flagged, never scored — as the
			// lead's value when it had none, else beside the scored one.
			m.fLate++
			if math.IsNaN(r.vals[i]) {
				r.vals[i], r.late[i] = x, true
			} else {
				r.lateVals[i] = x
			}
		default:
			m.fAccepted++
			r.vals[i], r.late[i] = x, false
		}
	}
}

func (m *propModel) actual(a *propActual) {
	old, ok := m.acts[a.target]
	switch {
	case !ok:
		m.aAccepted++
		// Every stored value for this target now has its pair; none is
		// late, since a value is late only when its actual came first.
		for k, r := range m.fcs {
			if h := a.target - k.origin; h >= 1 && h <= len(r.vals) && !math.IsNaN(r.vals[h-1]) {
				m.aScored++
			}
		}
	case old == a.value:
		m.aDuplicate++
	default:
		m.aRev++
	}
	m.acts[a.target] = a.value
}

// propPair is a pair of the model, keyed by grid indices.
type propPair struct {
	origin, lead     int
	forecast, actual float64
	late             bool
}

// pairs returns the model's pairs of one model in origin, lead order.
func (m *propModel) pairs(model string) []propPair {
	var out []propPair
	for k, r := range m.fcs {
		if k.model != model {
			continue
		}
		for i, x := range r.vals {
			if math.IsNaN(x) {
				continue
			}
			y, ok := m.acts[k.origin+i+1]
			if !ok {
				continue
			}
			out = append(out, propPair{k.origin, i + 1, x, y, r.late[i]})
			if l := r.lateVals[i]; !math.IsNaN(l) {
				out = append(out, propPair{k.origin, i + 1, l, y, true})
			}
		}
	}
	// A late re-issue follows the scored value of its lead.
	slices.SortStableFunc(out, func(a, b propPair) int {
		if a.origin != b.origin {
			return a.origin - b.origin
		}
		return a.lead - b.lead
	})
	return out
}

// propSel is a selection in grid indices.
type propSel struct {
	leads               []int
	originLo, originHi  int
	targetLo, targetHi  int
	originOpen, tgtOpen [2]bool // [from, to]: true leaves that bound open
	window              int
	pageSize            int
	description         string
}

func (sel *propSel) filter(ps []propPair) []propPair {
	in := func(x, lo, hi int, open [2]bool) bool {
		return (open[0] || x >= lo) && (open[1] || x < hi)
	}
	var base []propPair
	for _, p := range ps {
		if len(sel.leads) > 0 && !slices.Contains(sel.leads, p.lead) {
			continue
		}
		if !in(p.origin, sel.originLo, sel.originHi, sel.originOpen) || !in(p.origin+p.lead, sel.targetLo, sel.targetHi, sel.tgtOpen) {
			continue
		}
		base = append(base, p)
	}
	if sel.window == 0 {
		return base
	}
	// Per lead, walk back from the newest origin, keeping pairs until the
	// window holds `window` scored (non-late) ones; late pairs met on the
	// way are kept (and reported as late) but do not count.
	scored := map[int]int{}
	var out []propPair
	for i := len(base) - 1; i >= 0; i-- {
		p := base[i]
		if scored[p.lead] >= sel.window {
			continue
		}
		out = append(out, p)
		if !p.late {
			scored[p.lead]++
		}
	}
	slices.Reverse(out)
	return out
}

func propCase(t *testing.T, s *store.Store, seed uint64) {
	t.Helper()
	fail := func(format string, args ...any) {
		t.Helper()
		t.Errorf("seed %d (rerun: -run 'TestLiveEqualsOffline/seed=%d$'): %s", seed, seed, fmt.Sprintf(format, args...))
	}
	ctx, cancel := context.WithTimeout(context.Background(), 2*time.Minute)
	defer cancel()
	rng := rand.New(rand.NewPCG(seed, 0x9e3779b97f4a7c15))

	// The series.
	var (
		stepText = []string{"1h", "15m", "1d"}[rng.IntN(3)]
		zone     = "UTC"
		base     = time.Date(2026, 3, 28, 6, 0, 0, 0, time.UTC) // the night before Europe's spring DST change
		horizon  = 3 + rng.IntN(6)
	)
	if stepText == "1d" {
		// Local 06:00 one to five days before one of the zone's 2026 DST
		// changes, so that the targets straddle a 23- or 25-hour day.
		dst := []struct {
			zone    string
			changes [2]time.Time
		}{
			{"Europe/Brussels", [2]time.Time{time.Date(2026, 3, 29, 0, 0, 0, 0, time.UTC), time.Date(2026, 10, 25, 0, 0, 0, 0, time.UTC)}},
			{"America/New_York", [2]time.Time{time.Date(2026, 3, 8, 0, 0, 0, 0, time.UTC), time.Date(2026, 11, 1, 0, 0, 0, 0, time.UTC)}},
			{"Australia/Sydney", [2]time.Time{time.Date(2026, 4, 5, 0, 0, 0, 0, time.UTC), time.Date(2026, 10, 4, 0, 0, 0, 0, time.UTC)}},
		}[rng.IntN(3)]
		zone = dst.zone
		loc, err := time.LoadLocation(zone)
		if err != nil {
			t.Fatal(err)
		}
		d := dst.changes[rng.IntN(2)].AddDate(0, 0, -1-rng.IntN(5))
		base = time.Date(d.Year(), d.Month(), d.Day(), 6, 0, 0, 0, loc)
	} else if rng.IntN(2) == 0 {
		zone = "Europe/Brussels" // fixed steps ignore the zone
	}
	key := fmt.Sprintf("prop-%d", seed)
	// The grid of a daily series runs at 06:00 local here, so its anchor
	// is set; the fixed steps keep the default one.
	var anchor time.Time
	if stepText == "1d" {
		anchor = base.AddDate(-10, 0, 0)
	}
	se, _, err := s.CreateSeries(ctx, store.Series{Key: key, Step: stepText, Horizon: horizon, TimeZone: zone, GridAnchor: anchor})
	if err != nil {
		t.Fatal(err)
	}
	step := se.StepValue()
	at := func(k int) time.Time { return step.Add(base, k) }

	// Values on a 0.5 grid, zero included, so that repeats are exact and
	// MAPE's and sMAPE's exclusions occur.
	value := func() float64 { return float64(rng.IntN(61)-10) / 2 }
	vector := func(n int, sparse bool) []float64 {
		vals := make([]float64, n)
		for {
			some := false
			for i := range vals {
				if sparse && rng.IntN(3) == 0 {
					vals[i] = math.NaN()
				} else {
					vals[i] = value()
					some = true
				}
			}
			if some {
				return vals
			}
		}
	}

	// The events.
	models := []string{"m0", "m1"}[:1+rng.IntN(2)]
	var events []propEvent
	targets := map[int]bool{}
	for _, model := range models {
		nOrigins := 5 + rng.IntN(8)
		span := nOrigins + rng.IntN(6)
		origins := rng.Perm(span)[:nOrigins]
		for _, o := range origins {
			first := &propVector{model, o, vector(1+rng.IntN(horizon), rng.IntN(2) == 0)}
			events = append(events, propEvent{fc: first, label: "first issue"})
			for h := 1; h <= horizon; h++ {
				targets[o+h] = true
			}
			if rng.IntN(5) < 2 {
				events = append(events, propEvent{fc: &propVector{model, o, slices.Clone(first.vals)}, label: "exact repeat"})
			}
			for range rng.IntN(3) {
				n := 1 + rng.IntN(horizon)
				re := &propVector{model, o, make([]float64, n)}
				some := false
				for i := range re.vals {
					switch r := rng.IntN(5); {
					case r < 2 && i < len(first.vals):
						re.vals[i] = first.vals[i]
					case r < 4:
						re.vals[i] = value()
					default:
						re.vals[i] = math.NaN()
					}
					some = some || !math.IsNaN(re.vals[i])
				}
				if !some {
					re.vals[0] = value()
				}
				events = append(events, propEvent{fc: re, label: "re-issue"})
				if rng.IntN(5) == 0 {
					events = append(events, propEvent{fc: &propVector{model, o, slices.Clone(re.vals)}, label: "repeated re-issue"})
				}
			}
		}
	}
	for _, tg := range slices.Sorted(maps.Keys(targets)) {
		if rng.IntN(7) == 0 {
			continue // never observed: its forecasts stay unpaired
		}
		v := value()
		events = append(events, propEvent{act: &propActual{tg, v}, label: "actual"})
		if rng.IntN(10) < 3 {
			events = append(events, propEvent{act: &propActual{tg, v}, label: "repeated actual"})
		}
		for range rng.IntN(3) {
			if rng.IntN(3) == 0 {
				continue
			}
			events = append(events, propEvent{act: &propActual{tg, value()}, label: "revised actual"})
		}
	}
	rng.Shuffle(len(events), func(i, j int) { events[i], events[j] = events[j], events[i] })

	// Push in random batches of consecutive events of one kind, applying the
	// same events to the model in the same order.
	model := newPropModel()
	var fAck, aAck store.Ack
	var trace []string
	for i := 0; i < len(events); {
		size := 1 + rng.IntN(5)
		j := i + 1
		for j < len(events) && j-i < size && (events[j].fc != nil) == (events[i].fc != nil) {
			j++
		}
		batch := events[i:j]
		if batch[0].fc != nil {
			vs := make([]store.ForecastVector, len(batch))
			for n, e := range batch {
				vs[n] = store.ForecastVector{Series: key, Model: e.fc.model, Origin: at(e.fc.origin), Values: slices.Clone(e.fc.vals)}
				model.forecast(e.fc)
				trace = append(trace, fmt.Sprintf("F%d %s %s o=%d %v", i+n, e.label, e.fc.model, e.fc.origin, e.fc.vals))
			}
			ack, err := s.WriteForecasts(ctx, vs, 0)
			if err != nil {
				t.Fatalf("seed %d: WriteForecasts: %v", seed, err)
			}
			fAck.Add(ack)
		} else {
			as := make([]store.Actual, len(batch))
			for n, e := range batch {
				as[n] = store.Actual{Series: key, Time: at(e.act.target), Value: e.act.value}
				model.actual(e.act)
				trace = append(trace, fmt.Sprintf("A%d %s t=%d %v", i+n, e.label, e.act.target, e.act.value))
			}
			ack, err := s.WriteActuals(ctx, as, 0)
			if err != nil {
				t.Fatalf("seed %d: WriteActuals: %v", seed, err)
			}
			aAck.Add(ack)
		}
		trace = append(trace, "--")
		i = j
	}
	defer func() {
		if t.Failed() {
			t.Logf("seed %d: step %s zone %s horizon %d; pushes (batches separated by --):\n%s", seed, stepText, zone, horizon, strings.Join(trace, "\n"))
		}
	}()

	c := &propCoverage
	c.cases.Add(1)
	c.fAccepted.Add(model.fAccepted)
	c.fDuplicate.Add(model.fDuplicate)
	c.fLate.Add(model.fLate)
	c.aAccepted.Add(model.aAccepted)
	c.aDuplicate.Add(model.aDuplicate)
	c.aRevised.Add(model.aRev)
	for _, r := range model.fcs {
		for _, l := range r.lateVals {
			if !math.IsNaN(l) {
				c.lateReissues.Add(1)
			}
		}
	}

	// (a) Acknowledgements.
	if fAck.Accepted != model.fAccepted || fAck.Duplicate != model.fDuplicate || fAck.Late != model.fLate || fAck.Revised != 0 || fAck.Rejected != 0 || fAck.Scored != 0 {
		fail("forecast acks: accepted %d duplicate %d late %d revised %d rejected %d scored %d; model: accepted %d duplicate %d late %d",
			fAck.Accepted, fAck.Duplicate, fAck.Late, fAck.Revised, fAck.Rejected, fAck.Scored, model.fAccepted, model.fDuplicate, model.fLate)
	}
	if aAck.Accepted != model.aAccepted || aAck.Duplicate != model.aDuplicate || aAck.Revised != model.aRev || aAck.Late != 0 || aAck.Rejected != 0 || aAck.Scored != model.aScored {
		fail("actual acks: accepted %d duplicate %d revised %d late %d rejected %d scored %d; model: accepted %d duplicate %d revised %d scored %d",
			aAck.Accepted, aAck.Duplicate, aAck.Revised, aAck.Late, aAck.Rejected, aAck.Scored, model.aAccepted, model.aDuplicate, model.aRev, model.aScored)
	}

	for _, m := range models {
		all := model.pairs(m)
		// (b) and (c): the whole stored state.
		whole := &propSel{originOpen: [2]bool{true, true}, tgtOpen: [2]bool{true, true}, description: "everything", pageSize: 1 + rng.IntN(40)}
		propCheck(ctx, fail, s, key, m, whole, all, at)
		// (d) random selections.
		for range 4 {
			sel := propRandomSel(rng, horizon, all)
			propCheck(ctx, fail, s, key, m, sel, all, at)
		}
	}
}

// propRandomSel draws a selection: a subset of leads, origin and target
// ranges, and a window of 1..4 origins (sometimes none).
func propRandomSel(rng *rand.Rand, horizon int, all []propPair) *propSel {
	sel := &propSel{originOpen: [2]bool{true, true}, tgtOpen: [2]bool{true, true}, pageSize: 1 + rng.IntN(40)}
	var desc []string
	if rng.IntN(2) == 0 {
		for _, h := range rng.Perm(horizon)[:1+rng.IntN(horizon)] {
			sel.leads = append(sel.leads, h+1)
		}
		desc = append(desc, fmt.Sprintf("leads %v", sel.leads))
	}
	maxO := 0
	for _, p := range all {
		maxO = max(maxO, p.origin)
	}
	bounds := func(lo, hi int) (a, b int, open [2]bool) {
		a = lo + rng.IntN(hi-lo+1)
		b = a + 1 + rng.IntN(hi-a+2)
		open = [2]bool{rng.IntN(3) == 0, rng.IntN(3) == 0}
		return a, b, open
	}
	if rng.IntN(2) == 0 {
		sel.originLo, sel.originHi, sel.originOpen = bounds(0, maxO)
		desc = append(desc, fmt.Sprintf("origins [%d,%d) open %v", sel.originLo, sel.originHi, sel.originOpen))
	}
	if rng.IntN(2) == 0 {
		sel.targetLo, sel.targetHi, sel.tgtOpen = bounds(1, maxO+horizon)
		desc = append(desc, fmt.Sprintf("targets [%d,%d) open %v", sel.targetLo, sel.targetHi, sel.tgtOpen))
	}
	if rng.IntN(5) > 0 {
		sel.window = 1 + rng.IntN(4)
		desc = append(desc, fmt.Sprintf("window %d", sel.window))
	}
	sel.description = strings.Join(desc, ", ")
	if sel.description == "" {
		sel.description = "everything"
	}
	return sel
}

func (sel *propSel) store(at func(int) time.Time) store.Selection {
	out := store.Selection{Leads: sel.leads, Window: sel.window}
	if !sel.originOpen[0] {
		out.OriginFrom = at(sel.originLo)
	}
	if !sel.originOpen[1] {
		out.OriginTo = at(sel.originHi)
	}
	if !sel.tgtOpen[0] {
		out.TargetFrom = at(sel.targetLo)
	}
	if !sel.tgtOpen[1] {
		out.TargetTo = at(sel.targetHi)
	}
	return out
}

// propCheck compares the store's accuracy and pairs for one selection with
// the model's.
func propCheck(ctx context.Context, fail func(string, ...any), s *store.Store, key, m string, sel *propSel, all []propPair, at func(int) time.Time) {
	want := sel.filter(all)
	ssel := sel.store(at)
	what := fmt.Sprintf("model %s, selection %s", m, sel.description)

	// Accuracy against scoring.Tabulate over the scorable pairs.
	var scorable []scoring.Pair
	var late int64
	for _, p := range want {
		if p.late {
			late++
		} else {
			scorable = append(scorable, scoring.Pair{Lead: p.lead, Actual: p.actual, Forecast: p.forecast})
		}
	}
	if sel.window > 0 && late > 0 {
		propCoverage.windowLate.Add(1)
	}
	res, err := s.Accuracy(ctx, key, m, ssel, math.NaN())
	if err != nil {
		fail("%s: Accuracy: %v", what, err)
		return
	}
	if res.Late != late {
		fail("%s: late %d, want %d", what, res.Late, late)
	}
	if diff := propTableDiff(res.Table, scoring.Tabulate(scorable, math.NaN())); diff != "" {
		fail("%s: accuracy differs from offline scoring: %s", what, diff)
	}

	// Pairs over all pages.
	var got []store.Pair
	tok := ""
	for pages := 0; ; pages++ {
		page, next, err := s.Pairs(ctx, key, m, ssel, tok, sel.pageSize)
		if err != nil {
			fail("%s: Pairs: %v", what, err)
			return
		}
		if len(page) > sel.pageSize || (next != "" && len(page) == 0) {
			fail("%s: page of %d pairs for page size %d, next %q", what, len(page), sel.pageSize, next)
			return
		}
		got = append(got, page...)
		if next == "" {
			break
		}
		if pages > 10_000 {
			fail("%s: paging does not end", what)
			return
		}
		tok = next
	}
	n := max(len(got), len(want))
	for i := range n {
		if i >= len(got) || i >= len(want) {
			fail("%s: %d pairs, want %d (first difference at %d)", what, len(got), len(want), i)
			return
		}
		g, w := got[i], want[i]
		if !g.Origin.Equal(at(w.origin)) || g.Lead != w.lead || !g.Target.Equal(at(w.origin+w.lead)) ||
			g.Forecast != w.forecast || g.Actual != w.actual || g.Late != w.late {
			fail("%s: pair %d is {origin %s lead %d target %s forecast %v actual %v late %v}, want {origin %d=%s lead %d forecast %v actual %v late %v}",
				what, i, g.Origin, g.Lead, g.Target, g.Forecast, g.Actual, g.Late, w.origin, at(w.origin), w.lead, w.forecast, w.actual, w.late)
			return
		}
	}
}

// propTableDiff compares tables: counts exactly, metrics to 1e-9 relative,
// NaN equal to NaN. It returns "" when they agree.
func propTableDiff(got, want scoring.Table) string {
	close := func(a, b float64) bool {
		if math.IsNaN(a) || math.IsNaN(b) {
			return math.IsNaN(a) && math.IsNaN(b)
		}
		return a == b || math.Abs(a-b) <= 1e-9*max(math.Abs(a), math.Abs(b))
	}
	diff := func(where string, g, w scoring.Metrics) string {
		if g.N != w.N || g.MAPEExcluded != w.MAPEExcluded || g.SMAPEExcluded != w.SMAPEExcluded ||
			!close(g.ME, w.ME) || !close(g.MAE, w.MAE) || !close(g.RMSE, w.RMSE) || !close(g.MAPE, w.MAPE) ||
			!close(g.SMAPE, w.SMAPE) || !close(g.WAPE, w.WAPE) || !close(g.MASE, w.MASE) {
			return fmt.Sprintf("%s: got %+v, want %+v", where, g, w)
		}
		return ""
	}
	if d := diff("overall", got.Overall, want.Overall); d != "" {
		return d
	}
	if len(got.Leads) != len(want.Leads) {
		return fmt.Sprintf("%d leads, want %d", len(got.Leads), len(want.Leads))
	}
	for i := range got.Leads {
		if got.Leads[i].Lead != want.Leads[i].Lead {
			return fmt.Sprintf("lead %d at row %d, want %d", got.Leads[i].Lead, i, want.Leads[i].Lead)
		}
		if d := diff(fmt.Sprintf("lead %d", got.Leads[i].Lead), got.Leads[i].Metrics, want.Leads[i].Metrics); d != "" {
			return d
		}
	}
	return ""
}
