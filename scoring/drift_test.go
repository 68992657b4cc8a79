package scoring

import (
	"encoding/json"
	"fmt"
	"math"
	"math/rand/v2"
	"reflect"
	"strings"
	"testing"
)

// Fixed bands for the state-machine tests (the machine does not care how
// they were made): MAE 95% band [0.6, 1.0], 99% upper limit 1.2; ME 95%
// band [−0.3, 0.3], 99% band [−0.5, 0.5].
var (
	testMAEBand = Band{Metric: MetricMAE, N: 30, Expected: 0.8, Lower: 0.6, Upper: 1.0,
		AlarmLower: math.Inf(-1), AlarmUpper: 1.2, K: 365, KEff: 300}
	testMEBand = Band{Metric: MetricME, N: 30, Expected: 0, Lower: -0.3, Upper: 0.3,
		AlarmLower: -0.5, AlarmUpper: 0.5, K: 365, KEff: 340}
)

func ev(n int, mae, me float64) Evaluation {
	return Evaluation{N: n, MAE: mae, ME: me, MAEBand: testMAEBand, MEBand: testMEBand}
}

// Window values used below, by what they call for.
const (
	okMAE   = 0.8  // inside the 95% band
	gapMAE  = 1.1  // above the 95% band, below the 99% limit: within, not inside
	hiMAE   = 1.3  // above the 99% limit: degraded
	loMAE   = 0.5  // below the 95% band: improved (and back inside for leaving degraded)
	okME    = 0.0  // inside
	gapME   = 0.4  // outside the 95%, inside the 99% band
	hiME    = 0.6  // above the 99% band
	loME    = -0.6 // below the 99% band
	fullWin = 30
	short   = 10 // 7 ≤ n < 14: m = 3
)

type step struct {
	ev   Evaluation
	want State // state after the step
	// For the step that changes state (Changed must match want != previous):
	metric Metric
	value  float64
	limit  float64
}

func s(e Evaluation, want State) step { return step{ev: e, want: want} }

func sc(e Evaluation, want State, metric Metric, value, limit float64) step {
	return step{e, want, metric, value, limit}
}

const (
	ins  = StateInsufficientData
	in   = StateWithin
	deg  = StateDegraded
	imp  = StateImproved
	base = StateInsufficientBaseline
)

// run feeds the steps to a detector that starts in state start (reached
// through a full window of evaluations calling for it) and checks each
// step's state and transition.
func runSteps(t *testing.T, name string, d *Detector, steps []step) {
	t.Helper()
	for i, st := range steps {
		prev := d.state()
		tr := d.Observe(st.ev)
		if tr.From != prev || tr.To != st.want || d.State != st.want || tr.Changed != (prev != st.want) || tr.N != st.ev.N {
			t.Errorf("%s step %d (%+v): %v; want %s→%s", name, i, st.ev, tr, prev, st.want)
			return
		}
		if tr.Changed && (tr.Metric != st.metric || tr.Value != st.value || tr.Limit != st.limit) {
			t.Errorf("%s step %d: caused by %s=%v limit %v; want %s=%v limit %v", name, i, tr.Metric, tr.Value, tr.Limit, st.metric, st.value, st.limit)
		}
		if tr.Changed && tr.Metric != "" {
			want := testMAEBand.KEff
			if tr.Metric == "me" {
				want = testMEBand.KEff
			}
			if tr.KEff != want {
				t.Errorf("%s step %d: K_eff %v, want %v", name, i, tr.KEff, want)
			}
		}
	}
}

// detectorIn returns a detector in the given state, reached through
// evaluations of full windows.
func detectorIn(t *testing.T, st State) *Detector {
	t.Helper()
	d := &Detector{}
	switch st {
	case in:
		d.Observe(ev(fullWin, okMAE, okME))
	case deg:
		d.Observe(ev(fullWin, hiMAE, okME))
	case imp:
		for range DriftHysteresis {
			d.Observe(ev(fullWin, loMAE, okME))
		}
	}
	if d.state() != st {
		t.Fatalf("setup: state %s, want %s", d.State, st)
	}
	return d
}

func TestDetectorTransitions(t *testing.T) {
	t.Parallel()
	cases := []struct {
		name  string
		start State
		steps []step
	}{
		{"filling window below n_min", ins, []step{
			s(ev(1, hiMAE, hiME), ins), s(ev(3, okMAE, okME), ins), s(ev(6, hiMAE, okME), ins)}},
		{"n 7..13 needs 3 evaluations to leave insufficient_data", ins, []step{
			s(ev(7, okMAE, okME), ins), s(ev(8, okMAE, okME), ins), sc(ev(9, okMAE, okME), in, "", 0, 0)}},
		{"n ≥ 14 enters at once", ins, []step{sc(ev(14, okMAE, okME), in, "", 0, 0)}},
		{"persistence counted across the n = 14 boundary", ins, []step{
			s(ev(12, hiMAE, okME), ins), sc(ev(14, hiMAE, okME), deg, "mae", hiMAE, 1.2)}},
		{"first call at n = 7 can be degraded", ins, []step{
			s(ev(7, hiMAE, okME), ins), s(ev(8, hiMAE, okME), ins), sc(ev(9, hiMAE, okME), deg, "mae", hiMAE, 1.2)}},
		{"within → degraded on MAE, full window", in, []step{sc(ev(fullWin, hiMAE, okME), deg, "mae", hiMAE, 1.2)}},
		{"MAE at the limit is not above it", in, []step{s(ev(fullWin, 1.2, okME), in)}},
		{"within → degraded on ME high", in, []step{sc(ev(fullWin, okMAE, hiME), deg, "me", hiME, 0.5)}},
		{"within → degraded on ME low", in, []step{sc(ev(fullWin, okMAE, loME), deg, "me", loME, -0.5)}},
		{"MAE and ME both out: MAE is named", in, []step{sc(ev(fullWin, hiMAE, hiME), deg, "mae", hiMAE, 1.2)}},
		{"short window: 3 consecutive calls to degrade", in, []step{
			s(ev(short, hiMAE, okME), in), s(ev(short, hiMAE, okME), in), sc(ev(short, hiMAE, okME), deg, "mae", hiMAE, 1.2)}},
		{"short window: an interruption restarts the count", in, []step{
			s(ev(short, hiMAE, okME), in), s(ev(short, hiMAE, okME), in), s(ev(short, okMAE, okME), in),
			s(ev(short, hiMAE, okME), in), s(ev(short, okMAE, hiME), in), sc(ev(short, hiMAE, okME), deg, "mae", hiMAE, 1.2)}},
		{"degraded on MAE and ME count as one call", in, []step{
			s(ev(short, hiMAE, okME), in), s(ev(short, okMAE, loME), in), sc(ev(short, okMAE, hiME), deg, "me", hiME, 0.5)}},
		{"within → improved after 3 evaluations below", in, []step{
			s(ev(fullWin, loMAE, okME), in), s(ev(fullWin, loMAE, okME), in), sc(ev(fullWin, loMAE, okME), imp, "mae", loMAE, 0.6)}},
		{"short window: 3 evaluations below to improve", in, []step{
			s(ev(short, loMAE, okME), in), s(ev(short, loMAE, okME), in), sc(ev(short, loMAE, okME), imp, "mae", loMAE, 0.6)}},
		{"improved → within after 3 evaluations not below", imp, []step{
			s(ev(fullWin, okMAE, okME), imp), s(ev(fullWin, 0.6, okME), imp), sc(ev(fullWin, gapMAE, okME), in, "mae", gapMAE, 0.6)}},
		{"no flapping at the lower bound, from within", in, []step{
			s(ev(fullWin, loMAE, okME), in), s(ev(fullWin, okMAE, okME), in), s(ev(fullWin, loMAE, okME), in),
			s(ev(fullWin, loMAE, okME), in), s(ev(fullWin, okMAE, okME), in), s(ev(fullWin, loMAE, okME), in)}},
		{"no flapping at the lower bound, from improved", imp, []step{
			s(ev(fullWin, okMAE, okME), imp), s(ev(fullWin, loMAE, okME), imp), s(ev(fullWin, okMAE, okME), imp),
			s(ev(fullWin, okMAE, okME), imp), s(ev(fullWin, loMAE, okME), imp), s(ev(fullWin, okMAE, okME), imp)}},
		{"improved → degraded directly", imp, []step{sc(ev(fullWin, hiMAE, okME), deg, "mae", hiMAE, 1.2)}},
		{"below the band at the first evaluations: within, then improved", ins, []step{
			sc(ev(14, loMAE, okME), in, "", 0, 0), s(ev(15, loMAE, okME), in), sc(ev(16, loMAE, okME), imp, "mae", loMAE, 0.6)}},
		{"short window below the band leaves insufficient_data for improved", ins, []step{
			s(ev(7, loMAE, okME), ins), s(ev(8, loMAE, okME), ins), sc(ev(9, loMAE, okME), imp, "mae", loMAE, 0.6)}},
		{"gap between 95% and 99% is within", in, []step{s(ev(fullWin, gapMAE, gapME), in)}},
		{"hysteresis: 3 evaluations back inside to leave degraded", deg, []step{
			s(ev(fullWin, okMAE, okME), deg), s(ev(fullWin, okMAE, okME), deg), sc(ev(fullWin, 0.9, okME), in, "mae", 0.9, 1.0)}},
		{"hysteresis: the gap resets the count", deg, []step{
			s(ev(fullWin, okMAE, okME), deg), s(ev(fullWin, okMAE, okME), deg), s(ev(fullWin, gapMAE, okME), deg),
			s(ev(fullWin, okMAE, okME), deg), s(ev(fullWin, okMAE, okME), deg), sc(ev(fullWin, okMAE, okME), in, "mae", okMAE, 1.0)}},
		{"hysteresis: ME outside its 95% band is not inside", deg, []step{
			s(ev(fullWin, okMAE, okME), deg), s(ev(fullWin, okMAE, okME), deg), s(ev(fullWin, okMAE, gapME), deg),
			s(ev(fullWin, okMAE, -gapME), deg), s(ev(fullWin, okMAE, okME), deg)}},
		{"hysteresis: a new alarm while degraded restarts the count", deg, []step{
			s(ev(fullWin, okMAE, okME), deg), s(ev(fullWin, hiMAE, okME), deg), s(ev(fullWin, okMAE, okME), deg),
			s(ev(fullWin, okMAE, okME), deg), sc(ev(fullWin, okMAE, okME), in, "mae", okMAE, 1.0)}},
		{"MAE at the 95% upper bound is inside", deg, []step{
			s(ev(fullWin, 1.0, okME), deg), s(ev(fullWin, 1.0, okME), deg), sc(ev(fullWin, 1.0, okME), in, "mae", 1.0, 1.0)}},
		{"degraded → improved: below the band counts as inside", deg, []step{
			s(ev(fullWin, loMAE, okME), deg), s(ev(fullWin, loMAE, okME), deg), sc(ev(fullWin, loMAE, okME), imp, "mae", loMAE, 1.0)}},
		{"degraded → within when improved is not yet persistent", deg, []step{
			s(ev(short, okMAE, okME), deg), s(ev(short, loMAE, okME), deg), sc(ev(short, loMAE, okME), in, "mae", loMAE, 1.0)}},
		{"degraded → improved with a short window after 3 improved calls", deg, []step{
			s(ev(short, loMAE, okME), deg), s(ev(short, loMAE, okME), deg), sc(ev(short, loMAE, okME), imp, "mae", loMAE, 1.0)}},
		{"window shrinks below n_min: insufficient_data at once", in, []step{sc(ev(5, okMAE, okME), ins, "", 0, 0)}},
		{"degraded → insufficient_data when the window shrinks", deg, []step{sc(ev(6, okMAE, okME), ins, "", 0, 0)}},
		{"NaN values cross no limit", in, []step{s(ev(fullWin, math.NaN(), math.NaN()), in)}},
	}
	for _, c := range cases {
		d := detectorIn(t, c.start)
		runSteps(t, c.name, d, c.steps)
	}
}

func TestDetectorLeavesDegradedOnMEWithItsBound(t *testing.T) {
	t.Parallel()
	for _, c := range []struct {
		me, limit float64
	}{{hiME, 0.3}, {loME, -0.3}} {
		d := &Detector{}
		runSteps(t, "ME exit", d, []step{
			sc(ev(fullWin, okMAE, c.me), deg, "me", c.me, c.limit*5/3),
			s(ev(fullWin, okMAE, 0.1), deg), s(ev(fullWin, okMAE, 0.1), deg),
			sc(ev(fullWin, okMAE, 0.1), in, "me", 0.1, c.limit),
		})
	}
}

func TestDetectorBaseline(t *testing.T) {
	t.Parallel()
	bad := Verdict{K: 150, KEff: 120, Reason: "insufficient baseline: K=150 (need ≥ 180), K_eff=120.0 (need ≥ 30)"}
	d := detectorIn(t, deg)
	tr := d.SetBaseline(bad)
	if !tr.Changed || tr.From != deg || tr.To != base || tr.Reason != bad.Reason || d.Reason != bad.Reason {
		t.Fatalf("unusable verdict: %v", tr)
	}
	if tr := d.SetBaseline(bad); tr.Changed {
		t.Errorf("repeated verdict changed state: %v", tr)
	}
	for _, e := range []Evaluation{ev(fullWin, hiMAE, okME), ev(3, okMAE, okME), ev(fullWin, okMAE, okME)} {
		if tr := d.Observe(e); tr.Changed || d.State != base {
			t.Errorf("evaluation left insufficient_baseline: %v", tr)
		}
	}
	tr = d.SetBaseline(Verdict{Usable: true, K: 365, KEff: 300})
	if !tr.Changed || tr.To != ins || d.Reason != "" {
		t.Fatalf("usable verdict: %v", tr)
	}
	if tr := d.SetBaseline(Verdict{Usable: true}); tr.Changed {
		t.Errorf("usable verdict outside insufficient_baseline changed state: %v", tr)
	}
	if tr := d.Observe(ev(fullWin, okMAE, okME)); tr.To != in {
		t.Errorf("after a usable baseline: %v", tr)
	}
	// An unusable band moves the detector to insufficient_baseline too.
	e := ev(fullWin, okMAE, okME)
	e.MEBand = Band{Unusable: "all 365 backtest values equal 0: zero spread, no band"}
	tr = d.Observe(e)
	if !tr.Changed || tr.To != base || !strings.Contains(tr.Reason, "zero spread") {
		t.Errorf("unusable band: %v", tr)
	}
}

func TestDetectorZeroValue(t *testing.T) {
	t.Parallel()
	var d Detector
	tr := d.Observe(ev(3, okMAE, okME))
	if tr.Changed || tr.From != ins || tr.To != ins || d.State != ins {
		t.Errorf("zero value: %v, state %q", tr, d.State)
	}
}

// A detector stored after every evaluation (as JSON, as the service stores
// it) and resumed gives the same transitions as one that ran through.
func TestDetectorResume(t *testing.T) {
	t.Parallel()
	r := rand.New(rand.NewPCG(5, 5))
	maes := []float64{okMAE, gapMAE, hiMAE, loMAE, 1.0, 0.6}
	mes := []float64{okME, gapME, hiME, loME, -gapME}
	var straight, resumed Detector
	changes := map[string]int{}
	run, mae, me := 0, okMAE, okME
	for i := range 20000 {
		n := min(1+i%400, fullWin)
		if r.IntN(50) == 0 {
			n = 7 + r.IntN(7)
		}
		// Runs of one value make persistence and hysteresis matter.
		if run == 0 {
			run, mae, me = 1+r.IntN(5), maes[r.IntN(len(maes))], mes[r.IntN(len(mes))]
			if r.IntN(3) > 0 {
				me = okME
			}
		}
		run--
		e := ev(n, mae, me)
		var tr1, tr2 Transition
		if i%997 == 500 {
			v := Verdict{Usable: i%2 == 0, Reason: "test"}
			tr1, tr2 = straight.SetBaseline(v), resumed.SetBaseline(v)
		} else {
			tr1 = straight.Observe(e)
			tr2 = resumed.Observe(e)
		}
		if !reflect.DeepEqual(tr1, tr2) {
			t.Fatalf("step %d: %v vs resumed %v", i, tr1, tr2)
		}
		if tr1.Changed {
			changes[fmt.Sprintf("%s→%s", tr1.From, tr1.To)]++
		}
		b, err := json.Marshal(resumed)
		if err != nil {
			t.Fatal(err)
		}
		resumed = Detector{}
		if err := json.Unmarshal(b, &resumed); err != nil {
			t.Fatal(err)
		}
		if !reflect.DeepEqual(straight, resumed) {
			t.Fatalf("step %d: %+v round-trips to %+v (%s)", i, straight, resumed, b)
		}
	}
	for _, want := range []string{"insufficient_data→within", "within→degraded", "degraded→within", "within→improved",
		"improved→within", "improved→degraded", "degraded→improved", "within→insufficient_baseline", "insufficient_baseline→insufficient_data"} {
		if changes[want] == 0 {
			t.Errorf("random walk never took %s: %v", want, changes)
		}
	}
}

func TestDetectorJSONNames(t *testing.T) {
	t.Parallel()
	d := detectorIn(t, deg)
	b, _ := json.Marshal(d)
	if !strings.Contains(string(b), `"state":"degraded"`) || !strings.Contains(string(b), `"cause":"mae"`) {
		t.Errorf("JSON %s", b)
	}
	for _, st := range []State{StateWithin, StateDegraded, StateImproved, StateInsufficientData, StateInsufficientBaseline} {
		if !strings.Contains("within degraded improved insufficient_data insufficient_baseline", string(st)) {
			t.Errorf("state name %q", st)
		}
	}
}
