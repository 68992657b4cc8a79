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
