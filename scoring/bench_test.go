package scoring

import (
	"math/rand/v2"
	"testing"
	"time"
)

func BenchmarkAccumulatorAdd(b *testing.B) {
	r := rand.New(rand.NewPCG(1, 1))
	ps := randomPairs(r, 4096)
	var a Accumulator
	b.ReportAllocs()
	for i := 0; b.Loop(); i++ {
		p := ps[i&4095]
		a.Add(p[0], p[1])
	}
	b.ReportMetric(float64(b.N)/b.Elapsed().Seconds(), "pairs/s")
}

func BenchmarkTabulatorAdd48Leads(b *testing.B) {
	r := rand.New(rand.NewPCG(1, 1))
	ps := randomPairs(r, 4096)
	var t Tabulator
	b.ReportAllocs()
	for i := 0; b.Loop(); i++ {
		p := ps[i&4095]
		t.Add(1+i%48, p[0], p[1])
	}
	b.ReportMetric(float64(b.N)/b.Elapsed().Seconds(), "pairs/s")
}

func BenchmarkStepLeadCalendarDay(b *testing.B) {
	st := MustParseStep("1d", nil)
	o := time.Date(2026, 3, 20, 5, 0, 0, 0, time.UTC)
	tg := st.Add(o, 7)
	for b.Loop() {
		if _, err := st.Lead(o, tg); err != nil {
			b.Fatal(err)
		}
	}
}

// yearPairs is a year of hourly origins with leads 1..48 (420 480 pairs)
// starting at origin index first, iid N(0,1) errors.
func yearPairs(r *rand.Rand, first, origins int) []Pair {
	t0 := time.Date(2026, 1, 1, 0, 0, 0, 0, time.UTC)
	ps := make([]Pair, 0, origins*48)
	for k := first; k < first+origins; k++ {
		o := t0.Add(time.Duration(k) * time.Hour)
		for h := 1; h <= 48; h++ {
			ps = append(ps, Pair{Origin: o, Lead: h, Forecast: 100, Actual: 100 + r.NormFloat64()})
		}
	}
	return ps
}

// BenchmarkReplayYearHourly replays one year of hourly origins, H = 48,
// from the initial state, with checkpoints every 30 origins as the
// evaluator keeps them: 8760 × 49 evaluations. Reports evaluations/s.
func BenchmarkReplayYearHourly(b *testing.B) {
	r := rand.New(rand.NewPCG(3, 3))
	dec := make([]int, 24)
	for i := range dec {
		dec[i] = 25 + i
	}
	ref := NewReference(yearPairs(r, -400, 400), ReferenceSpec{Horizon: 48, Decision: dec, Window: DriftWindow})
	ps := yearPairs(r, 0, 8760)
	b.ReportAllocs()
	var evals int
	for b.Loop() {
		res, err := Replay(ref, Checkpoint{}, ps, ReplayOptions{CheckpointEvery: DriftWindow})
		if err != nil {
			b.Fatal(err)
		}
		evals = res.Evaluations
	}
	b.ReportMetric(float64(evals)*float64(b.N)/b.Elapsed().Seconds(), "evaluations/s")
	b.ReportMetric(b.Elapsed().Seconds()/float64(b.N), "s/year")
}

// BenchmarkPrepareReference prepares a 48-lead baseline of 400 origins
// (bands of every window size up to 30 for 49 quantities): the cost of a
// cache miss in the evaluator.
func BenchmarkPrepareReference(b *testing.B) {
	r := rand.New(rand.NewPCG(4, 4))
	back := yearPairs(r, -400, 400)
	dec := []int{25, 26, 27, 28}
	b.ReportAllocs()
	for b.Loop() {
		NewReference(back, ReferenceSpec{Horizon: 48, Decision: dec, Window: DriftWindow})
	}
}
