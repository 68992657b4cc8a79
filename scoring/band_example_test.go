package scoring_test

import (
	"fmt"
	"math"

	"github.com/aftercast/aftercast/scoring"
)

// Build a lead's baseline from its backtest errors (in origin order), judge
// it usable, and get the MAE band for a full live window of 30 origins and
// for a filling window of 10.
func ExampleSummary_Band() {
	e := make([]float64, 365)
	for t := range e {
		e[t] = math.Sin(1.7*float64(t)) + 0.5*math.Cos(0.3*float64(t))
	}
	abs := scoring.Summarize(scoring.Quantities(scoring.MetricMAE, e), 1)
	fmt.Println(scoring.Usability(abs).Usable, abs.K)
	for _, b := range abs.Bands(scoring.MetricMAE, 30, 10) {
		fmt.Printf("n=%d: MAE %.3f, 95%% band [%.3f, %.3f], alarm above %.3f\n", b.N, b.Expected, b.Lower, b.Upper, b.AlarmUpper)
	}
	// Output:
	// true 365
	// n=30: MAE 0.675, 95% band [0.609, 0.745], alarm above 0.768
	// n=10: MAE 0.675, 95% band [0.565, 0.795], alarm above 0.836
}

// Feed a detector one evaluation per newly scored origin; it reports each
// change of state with what caused it.
func ExampleDetector() {
	mae := scoring.Band{Metric: scoring.MetricMAE, Lower: 0.6, Upper: 1.0, AlarmLower: math.Inf(-1), AlarmUpper: 1.2, KEff: 300}
	me := scoring.Band{Metric: scoring.MetricME, Lower: -0.3, Upper: 0.3, AlarmLower: -0.5, AlarmUpper: 0.5, KEff: 340}
	var d scoring.Detector
	for _, w := range []struct {
		n       int
		mae, me float64
	}{
		{14, 0.8, 0.1}, {30, 1.3, 0.2}, {30, 0.9, 0.1}, {30, 0.9, 0.0}, {30, 0.8, 0.0},
	} {
		if tr := d.Observe(scoring.Evaluation{N: w.n, MAE: w.mae, ME: w.me, MAEBand: mae, MEBand: me}); tr.Changed {
			fmt.Println(tr)
		}
	}
	// Output:
	// insufficient_data→within n=14
	// within→degraded n=30 mae=1.3 limit=1.2 k_eff=300
	// degraded→within n=30 mae=0.8 limit=1 k_eff=300
}
