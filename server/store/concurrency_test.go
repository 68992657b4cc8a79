package store_test

import (
	"context"
	"math"
	"math/rand/v2"
	"slices"
	"sync"
	"testing"
	"time"

	"github.com/jackc/pgx/v5/pgxpool"

	"github.com/aftercast/aftercast/scoring"
	"github.com/aftercast/aftercast/server/store"
	"github.com/aftercast/aftercast/server/store/storetest"
)

// concReplicas returns two Stores over separate pools on one database, as
// two `serve` processes would have.
func concReplicas(t *testing.T) (*store.Store, *store.Store) {
	t.Helper()
	url := storetest.URL(t)
	open := func() *store.Store {
		cfg, err := pgxpool.ParseConfig(url)
		if err != nil {
			t.Fatal(err)
		}
		cfg.MaxConns = 6
		pool, err := pgxpool.NewWithConfig(context.Background(), cfg)
		if err != nil {
			t.Fatal(err)
		}
		t.Cleanup(pool.Close)
		return store.New(pool, store.Limits{})
	}
	return open(), open()
}

// concVectors makes one vector per (series, model, origin), dense or sparse,
// with H leads of an hourly series.
func concVectors(rng *rand.Rand, keys, models []string, origins, horizon int) []store.ForecastVector {
	var out []store.ForecastVector
	for _, k := range keys {
		for _, m := range models {
			for o := range origins {
				vals := make([]float64, horizon)
				sparse := rng.IntN(3) == 0
				for i := range vals {
					vals[i] = float64(rng.IntN(400)) / 4
					if sparse && i > 0 && rng.IntN(3) == 0 {
						vals[i] = math.NaN()
					}
				}
				out = append(out, store.ForecastVector{Series: k, Model: m, Origin: t0.Add(time.Duration(o) * time.Hour), Values: vals})
			}
		}
	}
	return out
}

// concActuals makes one actual for every target the vectors can reach.
func concActuals(rng *rand.Rand, keys []string, origins, horizon int) []store.Actual {
	var out []store.Actual
	for _, k := range keys {
		for i := 1; i < origins+horizon; i++ {
			out = append(out, store.Actual{Series: k, Time: t0.Add(time.Duration(i) * time.Hour), Value: float64(rng.IntN(400)) / 4})
		}
	}
	return out
}

func concPoints(vs []store.ForecastVector) int64 {
	var n int64
	for _, v := range vs {
		for _, x := range v.Values {
			if !math.IsNaN(x) {
				n++
			}
		}
	}
	return n
}

// concSplit cuts items into `parts` consecutive slices, each extended by
// `overlap` of the next one's items, so that neighbours push some items
// twice.
func concSplit[T any](items []T, parts int, overlap float64) [][]T {
	var out [][]T
	n := len(items)
	for p := range parts {
		lo, hi := p*n/parts, (p+1)*n/parts
		hi = min(n, hi+int(overlap*float64(n/parts)))
		out = append(out, items[lo:hi])
	}
	return out
}

// concBatches cuts items into batches of 1..maxSize.
func concBatches[T any](rng *rand.Rand, items []T, maxSize int) [][]T {
	var out [][]T
	for len(items) > 0 {
		k := min(len(items), 1+rng.IntN(maxSize))
		out = append(out, items[:k])
		items = items[k:]
	}
	return out
}

func concShuffled[T any](rng *rand.Rand, items []T) []T {
	out := slices.Clone(items)
	rng.Shuffle(len(out), func(i, j int) { out[i], out[j] = out[j], out[i] })
	return out
}

func concCloneVectors(vs []store.ForecastVector) []store.ForecastVector {
	out := slices.Clone(vs)
	for i := range out {
		out[i].Values = slices.Clone(out[i].Values)
	}
	return out
}

// concExpected scores, per (series, model), every forecast point whose
// target has an actual: what the store must report once everything is in
// and nothing was late.
func concExpected(vs []store.ForecastVector, as []store.Actual) map[[2]string][]scoring.Pair {
	act := map[string]map[int64]float64{}
	for _, a := range as {
		if act[a.Series] == nil {
			act[a.Series] = map[int64]float64{}
		}
		act[a.Series][a.Time.UnixNano()] = a.Value
	}
	sorted := slices.Clone(vs)
	slices.SortFunc(sorted, func(a, b store.ForecastVector) int { return a.Origin.Compare(b.Origin) })
	out := map[[2]string][]scoring.Pair{}
	for _, v := range sorted {
		k := [2]string{v.Series, v.Model}
		for i, x := range v.Values {
			if math.IsNaN(x) {
				continue
			}
			if y, ok := act[v.Series][v.Origin.Add(time.Duration(i+1)*time.Hour).UnixNano()]; ok {
				out[k] = append(out[k], scoring.Pair{Lead: i + 1, Actual: y, Forecast: x})
			}
		}
	}
	return out
}

// TestTwoReplicas pushes the same forecasts, then the same actuals, from two
// replicas at once — several goroutines each, overlapping slices, different
// orders, batches mixing shared series with each replica's own — and checks
// that nothing fails or deadlocks, that every distinct point is accepted
// exactly once across both, and that the final accuracy is the offline one.
func TestTwoReplicas(t *testing.T) {
	t.Parallel()
	s1, s2 := concReplicas(t)
	ctx, cancel := context.WithTimeout(context.Background(), 90*time.Second)
	defer cancel()
	const (
		goroutines = 3
		origins    = 30
		horizon    = 24
	)
	rng := rand.New(rand.NewPCG(1, 2))
	shared := []string{"shared-a", "shared-b", "shared-c"}
	own := [2][]string{{"own1-a", "own1-b"}, {"own2-a", "own2-b"}}
	replicas := [2]*store.Store{s1, s2}

	// Both replicas create the shared series at once: idempotent.
	var wg sync.WaitGroup
	for r, s := range replicas {
		wg.Go(func() {
			for _, k := range append(slices.Clone(shared), own[r]...) {
				if _, _, err := s.CreateSeries(ctx, store.Series{Key: k, Step: "1h", Horizon: horizon}); err != nil {
					t.Errorf("replica %d: creating %s: %v", r+1, k, err)
				}
			}
		})
	}
	wg.Wait()
	if t.Failed() {
		return
	}

	models := []string{"m1", "m2"}
	sharedF := concVectors(rng, shared, models, origins, horizon)
	ownF := [2][]store.ForecastVector{concVectors(rng, own[0], models, origins, horizon), concVectors(rng, own[1], models, origins, horizon)}
	sharedA := concActuals(rng, shared, origins, horizon)
	ownA := [2][]store.Actual{concActuals(rng, own[0], origins, horizon), concActuals(rng, own[1], origins, horizon)}

	// Each replica pushes the shared set plus its own, shuffled its own way,
	// split over its goroutines with 30% overlap (so a replica also repeats
	// itself), each part in its own random order and mixed batches.
	type totals struct {
		sync.Mutex
		ack    store.Ack
		pushed int64
	}
	run := func(phase string, push func(s *store.Store, rng *rand.Rand, r, g int, tot *totals)) *totals {
		tot := new(totals)
		var wg sync.WaitGroup
		for r, s := range replicas {
			for g := range goroutines {
				rng := rand.New(rand.NewPCG(uint64(10*r+g), 7))
				wg.Go(func() { push(s, rng, r, g, tot) })
			}
		}
		done := make(chan struct{})
		go func() { wg.Wait(); close(done) }()
		select {
		case <-done:
		case <-time.After(2 * time.Minute):
			t.Fatalf("%s: writers still blocked after 2 minutes (deadlock?)", phase)
		}
		return tot
	}

	fTot := run("forecasts", func(s *store.Store, rng *rand.Rand, r, g int, tot *totals) {
		all := concShuffled(rand.New(rand.NewPCG(uint64(r), 3)), append(slices.Clone(sharedF), ownF[r]...))
		part := concShuffled(rng, concSplit(all, goroutines, 0.3)[g])
		for _, b := range concBatches(rng, part, 40) {
			b = concCloneVectors(b)
			ack, err := s.WriteForecasts(ctx, b, 0)
			if err != nil {
				t.Errorf("replica %d: WriteForecasts: %v", r+1, err)
				return
			}
			tot.Lock()
			tot.ack.Add(ack)
			tot.pushed += concPoints(b)
			tot.Unlock()
		}
	})
	if t.Failed() {
		return
	}
	distinctF := concPoints(sharedF) + concPoints(ownF[0]) + concPoints(ownF[1])
	if fTot.ack.Accepted != distinctF || fTot.ack.Late != 0 || fTot.ack.Rejected != 0 || fTot.ack.Accepted+fTot.ack.Duplicate != fTot.pushed {
		t.Errorf("forecasts: ack %+v for %d points pushed; want exactly %d accepted (distinct points), the rest duplicates",
			fTot.ack, fTot.pushed, distinctF)
	}

	aTot := run("actuals", func(s *store.Store, rng *rand.Rand, r, g int, tot *totals) {
		all := concShuffled(rand.New(rand.NewPCG(uint64(r), 5)), append(slices.Clone(sharedA), ownA[r]...))
		part := concShuffled(rng, concSplit(all, goroutines, 0.3)[g])
		for _, b := range concBatches(rng, part, 60) {
			ack, err := s.WriteActuals(ctx, slices.Clone(b), 0)
			if err != nil {
				t.Errorf("replica %d: WriteActuals: %v", r+1, err)
				return
			}
			tot.Lock()
			tot.ack.Add(ack)
			tot.pushed += int64(len(b))
			tot.Unlock()
		}
	})
	if t.Failed() {
		return
	}
	distinctA := int64(len(sharedA) + len(ownA[0]) + len(ownA[1]))
	if aTot.ack.Accepted != distinctA || aTot.ack.Revised != 0 || aTot.ack.Rejected != 0 || aTot.ack.Accepted+aTot.ack.Duplicate != aTot.pushed {
		t.Errorf("actuals: ack %+v for %d pushed; want exactly %d accepted, the rest duplicates", aTot.ack, aTot.pushed, distinctA)
	}

	// The final accuracy, read from either replica, is the offline one.
	want := concExpected(slices.Concat(sharedF, ownF[0], ownF[1]), slices.Concat(sharedA, ownA[0], ownA[1]))
	for k, pairs := range want {
		for r, s := range replicas {
			res, err := s.Accuracy(ctx, k[0], k[1], store.Selection{}, math.NaN())
			if err != nil {
				t.Fatalf("replica %d: accuracy of %v: %v", r+1, k, err)
			}
			if res.Late != 0 {
				t.Errorf("replica %d, %v: %d late pairs, want none", r+1, k, res.Late)
			}
			if d := propTableDiff(res.Table, scoring.Tabulate(pairs, math.NaN())); d != "" {
				t.Errorf("replica %d, %v: %s", r+1, k, d)
			}
		}
	}
}

// concBatch is one write as it happened, for the serial-order check.
type concBatch struct {
	worker     int
	start, end time.Time // monotonic readings around the call
}

// TestTwoReplicasForecastsVersusActuals has one replica push forecasts while
// the other pushes the actuals of the same series. Every forecast point is
// then either scored or late, the acknowledgements add up (accepted + late =
// points), and the late flags are consistent with a serial order of the
// batches that respects real time: a pair is late exactly when its actual's
// batch came first, and the "came first" relation has no cycle.
func TestTwoReplicasForecastsVersusActuals(t *testing.T) {
	t.Parallel()
	sf, sa := concReplicas(t)
	ctx, cancel := context.WithTimeout(context.Background(), 90*time.Second)
	defer cancel()
	const (
		goroutines = 3
		origins    = 40
		horizon    = 12
	)
	keys := []string{"race-a", "race-b", "race-c", "race-d"}
	for _, k := range keys {
		if _, _, err := sf.CreateSeries(ctx, store.Series{Key: k, Step: "1h", Horizon: horizon}); err != nil {
			t.Fatal(err)
		}
	}
	rng := rand.New(rand.NewPCG(3, 4))
	models := []string{"m1", "m2"}
	vs := concVectors(rng, keys, models, origins, horizon)
	as := concActuals(rng, keys, origins, horizon)
	// Roughly in time order, as live feeds would be, so that the race is
	// real: forecasts and actuals for the same hours arrive together.
	slices.SortStableFunc(vs, func(a, b store.ForecastVector) int { return a.Origin.Compare(b.Origin) })
	slices.SortStableFunc(as, func(a, b store.Actual) int { return a.Time.Compare(b.Time) })

	type fKey struct {
		series, model string
		origin        int64
	}
	type aKey struct {
		series string
		time   int64
	}
	var (
		mu       sync.Mutex
		batches  []concBatch
		fBatchOf = map[fKey]int{}
		aBatchOf = map[aKey]int{}
		fAck     store.Ack
		aAck     store.Ack
		wg       sync.WaitGroup
	)
	record := func(worker int, start time.Time) int {
		mu.Lock()
		defer mu.Unlock()
		batches = append(batches, concBatch{worker: worker, start: start, end: time.Now()})
		return len(batches) - 1
	}
	for g := range goroutines {
		// Forecast writers on one replica: interleaved slices of the vectors.
		wg.Go(func() {
			rng := rand.New(rand.NewPCG(uint64(g), 11))
			var mine []store.ForecastVector
			for i := g; i < len(vs); i += goroutines {
				mine = append(mine, vs[i])
			}
			for _, b := range concBatches(rng, mine, 8) {
				start := time.Now()
				ack, err := sf.WriteForecasts(ctx, concCloneVectors(b), 0)
				if err != nil {
					t.Errorf("forecast writer %d: %v", g, err)
					return
				}
				id := record(g, start)
				mu.Lock()
				fAck.Add(ack)
				for _, v := range b {
					fBatchOf[fKey{v.Series, v.Model, v.Origin.UnixNano()}] = id
				}
				mu.Unlock()
			}
		})
		// Actual writers on the other.
		wg.Go(func() {
			rng := rand.New(rand.NewPCG(uint64(g), 13))
			var mine []store.Actual
			for i := g; i < len(as); i += goroutines {
				mine = append(mine, as[i])
			}
			for _, b := range concBatches(rng, mine, 8) {
				start := time.Now()
				ack, err := sa.WriteActuals(ctx, slices.Clone(b), 0)
				if err != nil {
					t.Errorf("actual writer %d: %v", g, err)
					return
				}
				id := record(goroutines+g, start)
				mu.Lock()
				aAck.Add(ack)
				for _, a := range b {
					aBatchOf[aKey{a.Series, a.Time.UnixNano()}] = id
				}
				mu.Unlock()
			}
		})
	}
	done := make(chan struct{})
	go func() { wg.Wait(); close(done) }()
	select {
	case <-done:
	case <-time.After(2 * time.Minute):
		t.Fatal("writers still blocked after 2 minutes (deadlock?)")
	}
	if t.Failed() {
		return
	}

	points := concPoints(vs)
	if fAck.Accepted+fAck.Late != points || fAck.Duplicate != 0 || fAck.Rejected != 0 {
		t.Errorf("forecasts: ack %+v, want accepted + late = %d points", fAck, points)
	}
	if aAck.Accepted != int64(len(as)) || aAck.Revised+aAck.Duplicate+aAck.Rejected != 0 {
		t.Errorf("actuals: ack %+v, want %d accepted", aAck, len(as))
	}

	// Precedence edges: real time (a batch that returned before another
	// started comes first) and, per pair, its late flag.
	n := len(batches)
	after := make([][]int, n)
	for i := range batches {
		for j := range batches {
			if batches[i].end.Before(batches[j].start) {
				after[i] = append(after[i], j)
			}
		}
	}
	var scored, late int64
	for _, k := range keys {
		for _, m := range models {
			res, err := sf.Accuracy(ctx, k, m, store.Selection{}, math.NaN())
			if err != nil {
				t.Fatal(err)
			}
			var tab []scoring.Pair
			var nLate int64
			tok := ""
			for {
				page, next, err := sa.Pairs(ctx, k, m, store.Selection{}, tok, 1000)
				if err != nil {
					t.Fatal(err)
				}
				for _, p := range page {
					fb := fBatchOf[fKey{k, m, p.Origin.UnixNano()}]
					ab := aBatchOf[aKey{k, p.Target.UnixNano()}]
					if p.Late {
						nLate++
						after[ab] = append(after[ab], fb)
					} else {
						tab = append(tab, scoring.Pair{Lead: p.Lead, Actual: p.Actual, Forecast: p.Forecast})
						after[fb] = append(after[fb], ab)
					}
				}
				if next == "" {
					break
				}
				tok = next
			}
			if res.Late != nLate {
				t.Errorf("%s/%s: accuracy says %d late, the pairs %d", k, m, res.Late, nLate)
			}
			if d := propTableDiff(res.Table, scoring.Tabulate(tab, math.NaN())); d != "" {
				t.Errorf("%s/%s: accuracy is not the score of the non-late pairs: %s", k, m, d)
			}
			scored += res.Table.Overall.N
			late += res.Late
		}
	}
	// Every target has an actual, so every point is a pair: scored or late.
	if scored+late != points || late != fAck.Late {
		t.Errorf("%d scored + %d late pairs, want %d points; %d acknowledged late", scored, late, points, fAck.Late)
	}
	t.Logf("%d batches; %d pairs scored, %d late", n, scored, late)
	if cycle := concCycle(after); cycle != nil {
		t.Errorf("late flags admit no serial order of the batches: cycle %v", cycle)
	}
}

// concCycle returns a cycle of the directed graph, nil when it has none.
func concCycle(after [][]int) []int {
	const (
		white = iota
		grey
		black
	)
	color := make([]int, len(after))
	parent := make([]int, len(after))
	var cycle []int
	var visit func(u int) bool
	visit = func(u int) bool {
		color[u] = grey
		for _, v := range after[u] {
			switch color[v] {
			case grey:
				cycle = []int{v}
				for w := u; w != v; w = parent[w] {
					cycle = append(cycle, w)
				}
				slices.Reverse(cycle)
				return true
			case white:
				parent[v] = u
				if visit(v) {
					return true
				}
			}
		}
		color[u] = black
		return false
	}
	for u := range after {
		if color[u] == white && visit(u) {
			return cycle
		}
	}
	return nil
}
