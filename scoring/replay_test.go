package scoring

import (
	"encoding/json"
	"fmt"
	"math"
	"math/rand/v2"
	"reflect"
	"slices"
	"strings"
	"testing"
	"time"
)

var t0 = time.Date(2026, 3, 1, 5, 0, 0, 0, time.UTC)

func day(k int) time.Time { return t0.AddDate(0, 0, k) }

// synthPairs makes pairs of origins first..first+count-1 (daily) for leads
// 1..h, forecast 100, actual 100 + e with e ~ N(0, sd(k)); drop says which
// (origin, lead) to leave out.
func synthPairs(r *rand.Rand, first, count, h int, sd func(k int) float64, drop func(k, lead int) bool) []Pair {
	var ps []Pair
	for k := first; k < first+count; k++ {
		for lead := 1; lead <= h; lead++ {
			e := sd(k) * r.NormFloat64()
			if drop != nil && drop(k, lead) {
				continue
			}
			ps = append(ps, Pair{Origin: day(k), Lead: lead, Forecast: 100, Actual: 100 + e})
		}
	}
	return ps
}

func unit(int) float64 { return 1 }

// testReference is a usable baseline of 365 daily origins, leads 1..3,
// decision leads 2 and 3.
func testReference(t *testing.T, seed uint64) *Reference {
	t.Helper()
	r := rand.New(rand.NewPCG(seed, 1))
	ref := NewReference(synthPairs(r, -365, 365, 3, unit, nil), ReferenceSpec{Horizon: 3, Decision: []int{2, 3}, Window: 30, MASEScale: math.NaN()})
	for h := 0; h <= 3; h++ {
		if l := ref.Lead(h); l == nil || !l.Verdict.Usable {
			t.Fatalf("lead %d of the test baseline is not usable: %+v", h, l)
		}
	}
	return ref
}

// production has a healthy start, a degraded stretch (error scale ×3 on
// origins 60..99) and a recovery, with gaps: lead 3 missing every 7th
// origin (so the series skips it) and lead 1 missing on 20 origins.
func production(seed uint64) []Pair {
	r := rand.New(rand.NewPCG(seed, 2))
	sd := func(k int) float64 {
		if k >= 60 && k < 100 {
			return 3
		}
		return 1
	}
	return synthPairs(r, 0, 200, 3, sd, func(k, lead int) bool {
		return lead == 3 && k%7 == 0 || lead == 1 && k >= 120 && k < 140
	})
}

func TestPoolOrigin(t *testing.T) {
	t.Parallel()
	o := day(0)
	p := func(lead int, e float64) Pair { return Pair{Origin: o, Lead: lead, Forecast: 10, Actual: 10 + e} }
	for _, c := range []struct {
		name      string
		ps        []Pair
		ok        bool
		abs, bias float64
	}{
		{"every decision lead", []Pair{p(1, 1), p(4, -3), p(7, 9)}, true, 2, -1},
		{"lead 4 missing", []Pair{p(1, 2), p(7, 1)}, false, 0, 0},
		{"other order of signs", []Pair{p(1, -0.5), p(4, 0.5)}, true, 0.5, 0},
	} {
		q, ok := poolOrigin(c.ps, []int{1, 4}, Scale{})
		if ok != c.ok || ok && (q.Abs != c.abs || q.E != c.bias || !math.IsNaN(q.Sq)) {
			t.Errorf("%s: %+v %v, want |e| %v, e %v, ok %v", c.name, q, ok, c.abs, c.bias, c.ok)
		}
	}
	if _, ok := poolOrigin([]Pair{p(1, 1)}, nil, Scale{}); ok {
		t.Error("pooling over no decision leads counted the origin")
	}
}

func TestWindow(t *testing.T) {
	t.Parallel()
	w := NewWindow(3)
	if v := w.Values(); v.N != 0 || !math.IsNaN(v.MAE) || !w.Oldest().IsZero() {
		t.Errorf("empty window: %+v", v)
	}
	es := []float64{1, -2, 4, -8, 16}
	for i, e := range es {
		w.Push(day(i), pairQuantity(Pair{Actual: e}, Scale{}))
		lo := max(0, i-2)
		var a, s, m float64
		for _, x := range es[lo : i+1] {
			a, s, m = a+math.Abs(x), s+x*x, m+x
		}
		n := float64(i - lo + 1)
		want := WindowValues{N: i - lo + 1, MAE: a / n, RMSE: math.Sqrt(s / n), ME: m / n,
			JudgedMAE: a / n, JudgedRMSE: math.Sqrt(s / n), JudgedME: m / n, Scale: 1, ScaleRMSE: 1} // no scaling: judged = plain
		if got := w.Values(); got != want || !w.Oldest().Equal(day(lo)) {
			t.Errorf("after %d: %+v oldest %v, want %+v oldest %v", i, got, w.Oldest(), want, day(lo))
		}
	}
}

// sameValues compares values that may hold NaN (the pooled RMSE) exactly,
// NaN equal to NaN.
func sameValues(a, b any) bool { return fmt.Sprintf("%#v", a) == fmt.Sprintf("%#v", b) }

// A replay feeds each lead's detector exactly what feeding it by hand over
// the lead's sliding windows gives, and the series detector the pooled
// decision-lead windows.
func TestReplayMatchesFeedingByHand(t *testing.T) {
	t.Parallel()
	ref := testReference(t, 1)
	ps := production(1)
	got, err := Replay(ref, Checkpoint{}, ps, ReplayOptions{})
	if err != nil {
		t.Fatal(err)
	}
	var want []Change
	byOrigin := map[time.Time][]Pair{}
	var origins []time.Time
	for _, p := range ps {
		if byOrigin[p.Origin] == nil {
			origins = append(origins, p.Origin)
		}
		byOrigin[p.Origin] = append(byOrigin[p.Origin], p)
	}
	dets := make([]Detector, 4)
	wins := make([][]float64, 4) // |e| then e, interleaved per origin
	for h := range dets {
		dets[h].SetBaseline(ref.Lead(h).Verdict)
	}
	feed := func(h int, o time.Time, abs, e float64) {
		wins[h] = append(wins[h], abs, e)
		if len(wins[h]) > 60 {
			wins[h] = wins[h][2:]
		}
		var a, m float64
		for i := 0; i < len(wins[h]); i += 2 {
			a, m = a+wins[h][i], m+wins[h][i+1]
		}
		n := len(wins[h]) / 2
		b := ref.Lead(h).Bands(n)
		if tr := dets[h].Observe(Evaluation{N: n, MAE: a / float64(n), ME: m / float64(n), MAEBand: b.MAE, MEBand: b.ME}); tr.Changed {
			want = append(want, Change{Origin: o, Lead: h, Transition: tr})
		}
	}
	for _, o := range origins {
		group := byOrigin[o]
		var e2, e3 float64
		has := 0
		for _, p := range group {
			switch p.Lead {
			case 2:
				e2, has = p.Actual-p.Forecast, has+1
			case 3:
				e3, has = p.Actual-p.Forecast, has+1
			}
		}
		if has == 2 {
			feed(0, o, (math.Abs(e2)+math.Abs(e3))/2, (e2+e3)/2)
		}
		for _, p := range group {
			e := p.Actual - p.Forecast
			feed(p.Lead, o, math.Abs(e), e)
		}
	}
	if !reflect.DeepEqual(got.History, want) {
		t.Errorf("replay history differs from feeding by hand:\n got %v\nwant %v", got.History, want)
	}
	var degraded bool
	for _, c := range got.History {
		degraded = degraded || c.Lead == 0 && c.To == StateDegraded
	}
	if !degraded {
		t.Errorf("the ×3 stretch never degraded the series: %v", got.History)
	}
	for _, st := range got.Status {
		if st.State() != dets[st.Lead].state() {
			t.Errorf("lead %d ends %s, by hand %s", st.Lead, st.State(), dets[st.Lead].state())
		}
	}
}

// Resuming from any checkpoint, stored as JSON and given the pairs from
// its WindowFrom on, gives the history after it, the final states and the
// later checkpoints of the replay from the start.
func TestReplayResumesFromEveryCheckpoint(t *testing.T) {
	t.Parallel()
	ref := testReference(t, 2)
	ps := production(2)
	opt := ReplayOptions{CheckpointEvery: 9}
	full, err := Replay(ref, Checkpoint{}, ps, opt)
	if err != nil {
		t.Fatal(err)
	}
	if len(full.Checkpoints) < 20 {
		t.Fatalf("%d checkpoints", len(full.Checkpoints))
	}
	for i, cp := range full.Checkpoints {
		b, err := json.Marshal(cp)
		if err != nil {
			t.Fatal(err)
		}
		var stored Checkpoint
		if err := json.Unmarshal(b, &stored); err != nil {
			t.Fatal(err)
		}
		if !reflect.DeepEqual(stored, cp) {
			t.Fatalf("checkpoint %d does not survive JSON:\n%+v\n%+v", i, cp, stored)
		}
		from, _ := slices.BinarySearchFunc(ps, stored.WindowFrom, func(p Pair, t time.Time) int { return p.Origin.Compare(t) })
		got, err := Replay(ref, stored, ps[from:], opt)
		if err != nil {
			t.Fatalf("from checkpoint %d: %v", i, err)
		}
		var after []Change
		for _, c := range full.History {
			if c.Origin.After(cp.Origin) {
				after = append(after, c)
			}
		}
		if !reflect.DeepEqual(got.History, after) {
			t.Errorf("from checkpoint %d (%s): history %v, want %v", i, cp.Origin, got.History, after)
		}
		if !sameValues(got.Status, full.Status) {
			t.Errorf("from checkpoint %d: status differs:\n got %+v\nwant %+v", i, got.Status[0], full.Status[0])
		}
		if !reflect.DeepEqual(got.Checkpoints, full.Checkpoints[i:][min(1, len(full.Checkpoints)-1-i):]) && i < len(full.Checkpoints)-1 {
			t.Errorf("from checkpoint %d: later checkpoints differ", i)
		}
	}
}

// Pairs that no longer rebuild the checkpoint's windows mean the data
// changed before it: the replay refuses to go on.
func TestReplayRefusesAStaleCheckpoint(t *testing.T) {
	t.Parallel()
	ref := testReference(t, 3)
	ps := production(3)
	full, err := Replay(ref, Checkpoint{}, ps, ReplayOptions{CheckpointEvery: 50})
	if err != nil {
		t.Fatal(err)
	}
	cp := full.Checkpoints[2] // after 150 origins
	from, _ := slices.BinarySearchFunc(ps, cp.WindowFrom, func(p Pair, t time.Time) int { return p.Origin.Compare(t) })
	// Origin 126 had no lead-1 pair; fill it in (a backfill before the
	// checkpoint, inside lead 1's window there: the window stays full).
	filled := slices.Clone(ps[from:])
	filled = append(filled, Pair{Origin: day(126), Lead: 1, Forecast: 100, Actual: 100})
	slices.SortFunc(filled, comparePairs)
	if cp.Origin.Before(day(126)) {
		t.Fatalf("checkpoint at %s: the test wants it after origin 126", cp.Origin)
	}
	if _, err := Replay(ref, cp, filled, ReplayOptions{}); err == nil || !strings.Contains(err.Error(), "changed before the checkpoint") {
		t.Errorf("backfill before the checkpoint: %v", err)
	}
	// A revised value inside the window, the same number of pairs.
	revised := slices.Clone(ps[from:])
	for i := range revised {
		if revised[i].Origin.Equal(day(145)) && revised[i].Lead == 2 {
			revised[i].Actual += 1
		}
	}
	if _, err := Replay(ref, cp, revised, ReplayOptions{}); err == nil || !strings.Contains(err.Error(), "changed before the checkpoint") {
		t.Errorf("revision before the checkpoint: %v", err)
	}
	bad := append([]Pair{}, ps[:3]...)
	bad[1], bad[2] = bad[2], bad[1]
	if _, err := Replay(ref, Checkpoint{}, bad, ReplayOptions{}); err == nil {
		t.Error("unsorted pairs accepted")
	}
	if _, err := Replay(ref, Checkpoint{}, []Pair{{Origin: day(0), Lead: 4}}, ReplayOptions{}); err == nil {
		t.Error("a lead beyond the horizon accepted")
	}
}

// Every lead and the series start in insufficient_baseline when their
// backtest is unusable or missing, with the reason.
func TestReplayInsufficientBaseline(t *testing.T) {
	t.Parallel()
	r := rand.New(rand.NewPCG(4, 4))
	// 100 origins: below K_min; lead 2 has no backtest pairs at all.
	back := synthPairs(r, -100, 100, 3, unit, func(_, lead int) bool { return lead == 2 })
	ref := NewReference(back, ReferenceSpec{Horizon: 3, Decision: []int{1, 2}, Window: 30, MASEScale: math.NaN()})
	got, err := Replay(ref, Checkpoint{}, production(4), ReplayOptions{})
	if err != nil {
		t.Fatal(err)
	}
	if len(got.History) != 0 {
		t.Errorf("history: %v", got.History)
	}
	for _, st := range got.Status {
		if st.State() != StateInsufficientBaseline || !strings.Contains(st.Reason, "insufficient baseline") {
			t.Errorf("lead %d: %s (%q)", st.Lead, st.State(), st.Reason)
		}
	}
}

func TestAnnounce(t *testing.T) {
	t.Parallel()
	ref := testReference(t, 5)
	ps := production(5)
	full, err := Replay(ref, Checkpoint{}, ps, ReplayOptions{})
	if err != nil {
		t.Fatal(err)
	}
	var series []Change
	for _, c := range full.History {
		if c.Lead == 0 {
			series = append(series, c)
		}
	}
	if len(series) < 2 {
		t.Fatalf("series history too short for the test: %v", series)
	}

	// Nothing announced before: every transition is new data, in origin
	// order, leads ascending within an origin.
	evs := Announce(nil, full, CauseRevision)
	if len(evs) != len(full.History) {
		t.Fatalf("%d events for %d transitions", len(evs), len(full.History))
	}
	for i, e := range evs {
		c := full.History[i]
		if e.Cause != CauseData || e.Lead != c.Lead || !e.Onset.Equal(c.Origin) || e.Transition != c.Transition {
			t.Errorf("event %d: %+v, want data event of %+v", i, e, c)
		}
	}

	// Everything judged already, the same states announced: nothing new.
	before := map[int]Announced{}
	for _, st := range full.Status {
		before[st.Lead] = Announced{State: st.State(), Last: st.Last}
	}
	if evs := Announce(before, full, CauseRevision); len(evs) != 0 {
		t.Errorf("re-judging to the same states announced %v", evs)
	}

	// The series was announced degraded at its last origin, but the
	// re-judged data says otherwise: one revision event, onset where the
	// replay entered the state; the history in between is not announced.
	last := full.Status[0]
	before[0] = Announced{State: StateDegraded, Last: last.Last}
	if last.State() == StateDegraded {
		before[0] = Announced{State: StateImproved, Last: last.Last}
	}
	evs = Announce(before, full, CauseBaseline)
	if len(evs) != 1 || evs[0].Cause != CauseBaseline || evs[0].From != before[0].State || evs[0].To != last.State() ||
		!evs[0].Onset.Equal(last.Onset) || evs[0].Lead != 0 || evs[0].Metric != last.Entered.Metric {
		t.Errorf("revision of the series state: %+v, want %s→%s at %s", evs, before[0].State, last.State(), last.Onset)
	}

	// Judged up to the first series transition only: the difference there
	// (none) and every later transition as data.
	before = map[int]Announced{0: {State: series[0].To, Last: series[0].Origin}}
	evs = Announce(before, full, CauseRevision)
	var got []Change
	for _, e := range evs {
		if e.Lead == 0 {
			if e.Cause != CauseData {
				t.Errorf("unexpected %s event %+v", e.Cause, e)
			}
			got = append(got, Change{Origin: e.Onset, Lead: 0, Transition: e.Transition})
		}
	}
	if !reflect.DeepEqual(got, series[1:]) {
		t.Errorf("later series events %v, want %v", got, series[1:])
	}
}

// The bands a reference keeps for the live window's sizes are exactly the
// ones the summaries give, and larger windows are computed.
func TestReferenceBands(t *testing.T) {
	t.Parallel()
	ref := testReference(t, 6)
	for h := 0; h <= 3; h++ {
		l := ref.Lead(h)
		for _, n := range []int{1, 6, 7, 13, 14, 29, 30, 31, 90} {
			got := l.Bands(n)
			want := BandSet{MAE: l.Abs.Band(MetricMAE, n), ME: l.Bias.Band(MetricME, n)}
			if h > 0 {
				want.RMSE = l.Sq.Band(MetricRMSE, n)
			}
			if got != want {
				t.Errorf("lead %d n=%d: %+v, want %+v", h, n, got, want)
			}
		}
	}
	if ref.Lead(0).Verdict.K != 365 || ref.Lead(0).Abs.Lead != 3 {
		t.Errorf("pooled: K %d, lag lead %d; want 365 origins and the largest decision lead 3", ref.Lead(0).Verdict.K, ref.Lead(0).Abs.Lead)
	}
	// A constant backtest has no spread: no band, and Bands says why.
	flat := NewReference([]Pair{{Origin: day(0), Lead: 1, Forecast: 1, Actual: 2}, {Origin: day(1), Lead: 1, Forecast: 1, Actual: 2}},
		ReferenceSpec{Horizon: 1, Decision: []int{1}, Window: 30})
	if b := flat.Lead(1).Bands(30); b.MAE.Usable() || flat.Lead(1).Verdict.Usable {
		t.Errorf("constant backtest: %+v", b.MAE)
	}
}
