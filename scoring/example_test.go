package scoring_test

import (
	"fmt"
	"time"

	"github.com/aftercast/aftercast/scoring"
)

// The worked example of method.md §2 at lead 1.
func Example() {
	step := scoring.MustParseStep("1h", nil)
	origin := time.Date(2026, 1, 1, 0, 0, 0, 0, time.UTC)
	var tab scoring.Tabulator
	for i, p := range [][2]float64{{10, 8}, {0, 1}, {5, 5}} {
		o := step.Add(origin, i)
		h, _ := step.Lead(o, step.Add(o, 1))
		tab.Add(h, p[0], p[1])
	}
	scale := scoring.MASEScale([]float64{4, 6, 5, 7}, 1)
	m := tab.Table(scale).Leads[0]
	fmt.Printf("lead %d: n=%d ME=%.4f MAE=%.4f RMSE=%.4f MAPE=%.1f%% (excluded %d) sMAPE=%.2f%% WAPE=%.1f%% MASE=%.2f\n",
		m.Lead, m.N, m.ME, m.MAE, m.RMSE, m.MAPE, m.MAPEExcluded, m.SMAPE, m.WAPE, m.MASE)
	// Output: lead 1: n=3 ME=0.3333 MAE=1.0000 RMSE=1.2910 MAPE=10.0% (excluded 1) sMAPE=74.07% WAPE=20.0% MASE=0.60
}

// A calendar day in Europe/Brussels is 23 hours long on the spring-forward Sunday.
func ExampleStep_Lead() {
	bru, _ := time.LoadLocation("Europe/Brussels")
	day := scoring.MustParseStep("1d", bru)
	origin := time.Date(2026, 3, 28, 5, 0, 0, 0, bru)
	target := time.Date(2026, 3, 29, 5, 0, 0, 0, bru)
	h, err := day.Lead(origin, target)
	fmt.Println(h, err, target.Sub(origin))
	// Output: 1 <nil> 23h0m0s
}
