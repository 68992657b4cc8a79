package store_test

import (
	"math"
	"slices"
	"testing"
	"time"

	"github.com/aftercast/aftercast/server/store"
	"github.com/aftercast/aftercast/server/store/storetest"
)

// A batch of actuals counts each item against the value it meets, exactly as
// if the items had been pushed one by one (method.md §3): a repeat of the
// stored value is a duplicate, a change is a revision, in batch order.
func TestActualBatchCountsAreSequential(t *testing.T) {
	t.Parallel()
	s := storetest.Store(t)
	ctx := ctxT(t)
	mustSeries(t, s, "p", "1h", 3)
	at := t0.Add(time.Hour)
	if a, err := s.WriteActuals(ctx, []store.Actual{{Series: "p", Time: at, Value: 5}}, 0); err != nil || a.Accepted != 1 {
		t.Fatalf("first actual: %+v %v", a, err)
	}
	for _, tc := range []struct {
		name         string
		values       []float64 // pushed in one batch onto the stored value
		dup, revised int64
	}{
		// 5 meets 5: duplicate; 6 meets 5: revised.
		{name: "repeat then change", values: []float64{5, 6}, dup: 1, revised: 1},
		// 5 meets 6: revised; 5 meets 5: duplicate.
		{name: "back and repeat", values: []float64{5, 5}, dup: 1, revised: 1},
		// 7 meets 5: revised; 5 meets 7: revised (back to the stored value).
		{name: "change and back", values: []float64{7, 5}, revised: 2},
	} {
		as := make([]store.Actual, len(tc.values))
		for i, v := range tc.values {
			as[i] = store.Actual{Series: "p", Time: at, Value: v}
		}
		a, err := s.WriteActuals(ctx, as, 0)
		if err != nil {
			t.Fatal(err)
		}
		if a.Duplicate != tc.dup || a.Revised != tc.revised || a.Accepted != 0 {
			t.Errorf("%s %v: ack %+v, want %d duplicate %d revised (as if pushed one by one)", tc.name, tc.values, a, tc.dup, tc.revised)
		}
	}
}

// Origins and actual times are stored to the microsecond. A forecast whose
// origin carries nanoseconds must still meet the hindsight guard and merge
// with its stored vector: either it is refused, or it is treated as the
// stored (truncated) origin — never scored after its actual was known, and
// never the cause of an acknowledged value being lost.
func TestSubMicrosecondOrigin(t *testing.T) {
	t.Parallel()
	s := storetest.Store(t)
	ctx := ctxT(t)
	mustSeries(t, s, "p", "1h", 3)
	h := time.Hour
	origin := t0.Add(500 * time.Nanosecond)

	// The actual of lead 1's target is known before the forecast arrives.
	if _, err := s.WriteActuals(ctx, []store.Actual{{Series: "p", Time: t0.Add(h), Value: 5}}, 0); err != nil {
		t.Fatal(err)
	}
	ack, err := s.WriteForecasts(ctx, []store.ForecastVector{{Series: "p", Model: "m", Origin: origin, Values: []float64{4, 2}}}, 0)
	if err != nil {
		t.Fatal(err)
	}
	if ack.Rejected == 2 {
		return // refusing off-grid origins is a correct answer too
	}
	if ack.Late != 1 || ack.Accepted != 1 {
		t.Errorf("first push: ack %+v, want lead 1 late (its actual was known) and lead 2 accepted", ack)
	}
	// A sparse re-issue of lead 2 must not wipe lead 1.
	ack, err = s.WriteForecasts(ctx, []store.ForecastVector{{Series: "p", Model: "m", Origin: origin, Values: []float64{math.NaN(), 3}}}, 0)
	if err != nil {
		t.Fatal(err)
	}
	if ack.Accepted != 1 {
		t.Errorf("sparse re-issue: ack %+v, want 1 accepted", ack)
	}
	// The same vector again is a duplicate.
	ack, err = s.WriteForecasts(ctx, []store.ForecastVector{{Series: "p", Model: "m", Origin: origin, Values: []float64{math.NaN(), 3}}}, 0)
	if err != nil {
		t.Fatal(err)
	}
	if ack.Duplicate != 1 {
		t.Errorf("repeat: ack %+v, want 1 duplicate", ack)
	}
	if _, err := s.WriteActuals(ctx, []store.Actual{{Series: "p", Time: t0.Add(2 * h), Value: 1}}, 0); err != nil {
		t.Fatal(err)
	}
	res, err := s.Accuracy(ctx, "p", "m", store.Selection{}, math.NaN())
	if err != nil {
		t.Fatal(err)
	}
	if res.Late != 1 || res.Table.Overall.N != 1 {
		t.Errorf("accuracy: late %d scored %d, want lead 1 late and lead 2 scored (the hindsight guard)", res.Late, res.Table.Overall.N)
	}
	pairs, _, err := s.Pairs(ctx, "p", "m", store.Selection{}, "", 10)
	if err != nil {
		t.Fatal(err)
	}
	if len(pairs) != 2 || pairs[0].Forecast != 4 || !pairs[0].Late || pairs[1].Forecast != 3 {
		t.Errorf("pairs %+v, want lead 1 (4, late) and lead 2 (3)", pairs)
	}
}

// Two items whose times differ below a microsecond are one stored row: a
// batch holding both must not fail (PostgreSQL refuses an upsert that
// touches a row twice) — they are either refused or merged like repeats.
func TestSubMicrosecondTimesInOneBatch(t *testing.T) {
	t.Parallel()
	s := storetest.Store(t)
	ctx := ctxT(t)
	mustSeries(t, s, "p", "1h", 3)
	at := t0.Add(time.Hour)
	if _, err := s.WriteActuals(ctx, []store.Actual{
		{Series: "p", Time: at.Add(100 * time.Nanosecond), Value: 1},
		{Series: "p", Time: at.Add(200 * time.Nanosecond), Value: 2},
	}, 0); err != nil {
		t.Errorf("actuals 100 ns apart: %v", err)
	}
	if _, err := s.WriteForecasts(ctx, []store.ForecastVector{
		{Series: "p", Model: "m", Origin: t0.Add(100 * time.Nanosecond), Values: []float64{1}},
		{Series: "p", Model: "m", Origin: t0.Add(200 * time.Nanosecond), Values: []float64{2}},
	}, 0); err != nil {
		t.Errorf("forecast vectors 100 ns apart: %v", err)
	}
}

// WriteActuals first tries to insert a batch as all new and, on a conflict,
// settles it against the stored values instead; the batch after a conflict
// reads first. Whatever path a batch takes, its counts and the stored state
// must be those of pushing the items one by one. Batches alternate between
// all-new and mixed (new, duplicate, revised) so that every path and every
// switch between them is taken.
func TestActualsCountsOnEveryWritePath(t *testing.T) {
	t.Parallel()
	s := storetest.Store(t)
	ctx := ctxT(t)
	mustSeries(t, s, "p", "1h", 2)
	h := time.Hour
	if _, err := s.WriteForecasts(ctx, []store.ForecastVector{{Series: "p", Model: "m", Origin: t0, Values: []float64{1, 2}}}, 0); err != nil {
		t.Fatal(err)
	}
	model := map[time.Time]float64{} // what one-by-one pushing leaves stored
	at := func(k int) time.Time { return t0.Add(time.Duration(k) * h) }
	for round, batch := range [][]store.Actual{
		{{Series: "p", Time: at(1), Value: 1}, {Series: "p", Time: at(2), Value: 2}},                                       // all new, completes 2 pairs
		{{Series: "p", Time: at(1), Value: 1}, {Series: "p", Time: at(2), Value: 3}, {Series: "p", Time: at(3), Value: 3}}, // dup, revised, new
		{{Series: "p", Time: at(4), Value: 4}, {Series: "p", Time: at(5), Value: 5}},                                       // all new, after a conflict
		{{Series: "p", Time: at(6), Value: 6}},                                                                             // all new again
		{{Series: "p", Time: at(6), Value: 7}, {Series: "p", Time: at(7), Value: 7}, {Series: "p", Time: at(7), Value: 7}}, // revised, new, dup of itself
		{{Series: "p", Time: at(5), Value: 5}},                                                                             // duplicate only
	} {
		var want store.Ack
		for _, a := range batch {
			old, ok := model[a.Time]
			switch {
			case !ok:
				want.Accepted++
				if a.Time.Sub(t0) <= 2*h {
					want.Scored++
				}
			case old == a.Value:
				want.Duplicate++
			default:
				want.Revised++
			}
			model[a.Time] = a.Value
		}
		got, err := s.WriteActuals(ctx, batch, 0)
		if err != nil {
			t.Fatalf("round %d: %v", round, err)
		}
		if got.Accepted != want.Accepted || got.Duplicate != want.Duplicate || got.Revised != want.Revised || got.Scored != want.Scored {
			t.Errorf("round %d: ack %+v, want %+v", round, got, want)
		}
		rows, err := s.Pool().Query(ctx, `SELECT time, value FROM actuals`)
		if err != nil {
			t.Fatal(err)
		}
		stored := map[time.Time]float64{}
		for rows.Next() {
			var tm time.Time
			var v float64
			if err := rows.Scan(&tm, &v); err != nil {
				t.Fatal(err)
			}
			stored[tm.UTC()] = v
		}
		if err := rows.Err(); err != nil {
			t.Fatal(err)
		}
		if len(stored) != len(model) {
			t.Errorf("round %d: %d actuals stored, want %d", round, len(stored), len(model))
		}
		for tm, v := range model {
			if stored[tm] != v {
				t.Errorf("round %d: stored %v at %v, want %v", round, stored[tm], tm, v)
			}
		}
	}
}

// WriteForecasts likewise first copies a batch as all new and, on a
// conflict, merges it with the stored vectors; the batch after a conflict
// reads first. Each round's acknowledgement is worked out by hand from
// method.md §3, and the stored vectors are checked at the end.
func TestForecastsCountsOnEveryWritePath(t *testing.T) {
	t.Parallel()
	s := storetest.Store(t)
	ctx := ctxT(t)
	mustSeries(t, s, "q", "1h", 2)
	h := time.Hour
	vec := func(k int, vals ...float64) store.ForecastVector {
		return store.ForecastVector{Series: "q", Model: "m", Origin: t0.Add(time.Duration(k) * h), Values: vals}
	}
	for round, tc := range []struct {
		batch               []store.ForecastVector
		actual              time.Duration // > 0: an actual at t0+actual is stored before the batch
		accepted, dup, late int64
	}{
		{batch: []store.ForecastVector{vec(0, 1, 2), vec(1, 1, 2)}, accepted: 4},           // all new
		{batch: []store.ForecastVector{vec(0, 1, 5), vec(2, 3, 3)}, accepted: 3, dup: 1},   // re-issue and new: conflict
		{batch: []store.ForecastVector{vec(3, 1, 1)}, accepted: 2},                         // new, read first after the conflict
		{batch: []store.ForecastVector{vec(4, 9, 9)}, actual: 5 * h, accepted: 1, late: 1}, // new, lead 1's actual known
		{batch: []store.ForecastVector{vec(3, 1, 8)}, dup: 1, late: 1},                     // re-issue of a lead whose actual is known
	} {
		if tc.actual > 0 {
			if _, err := s.WriteActuals(ctx, []store.Actual{{Series: "q", Time: t0.Add(tc.actual), Value: 0}}, 0); err != nil {
				t.Fatal(err)
			}
		}
		got, err := s.WriteForecasts(ctx, tc.batch, 0)
		if err != nil {
			t.Fatalf("round %d: %v", round, err)
		}
		if got.Accepted != tc.accepted || got.Duplicate != tc.dup || got.Late != tc.late || got.Rejected != 0 {
			t.Errorf("round %d: ack %+v, want accepted %d duplicate %d late %d", round, got, tc.accepted, tc.dup, tc.late)
		}
	}
	want := map[int][]float64{0: {1, 5}, 1: {1, 2}, 2: {3, 3}, 3: {1, 1}, 4: {9, 9}}
	wantLate := map[int][]bool{4: {true, false}}
	rows, err := s.Pool().Query(ctx, `SELECT origin, vals, late FROM forecasts`)
	if err != nil {
		t.Fatal(err)
	}
	n := 0
	for rows.Next() {
		var o time.Time
		var vals []float64
		var late []bool
		if err := rows.Scan(&o, &vals, &late); err != nil {
			t.Fatal(err)
		}
		k := int(o.Sub(t0) / h)
		if !slices.Equal(vals, want[k]) || !slices.Equal(late, wantLate[k]) {
			t.Errorf("origin %d: stored %v late %v, want %v late %v", k, vals, late, want[k], wantLate[k])
		}
		n++
	}
	if err := rows.Err(); err != nil || n != len(want) {
		t.Errorf("%d vectors stored (%v), want %d", n, err, len(want))
	}
}
