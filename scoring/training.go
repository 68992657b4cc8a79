package scoring

import (
	"fmt"
	"math"
	"time"
)

// OffGridError names a training actual that is not on the series' grid.
type OffGridError struct {
	Index int // position in the input slices
	Time  time.Time
}

func (e *OffGridError) Error() string {
	return fmt.Sprintf("training actual at %s is not on the step grid that ends at the first origin", e.Time.Format(time.RFC3339))
}

// TrainingScale is the MASE scale of method.md §2 from training actuals
// given as parallel slices of times and values, in any order: the actuals
// up to and including firstOrigin, placed on the step grid that ends there,
// with gaps skipped by [MASEScale]. Later actuals are not training data and
// are counted in ignored. A time off the grid is an *OffGridError.
func TrainingScale(step Step, firstOrigin time.Time, ts []time.Time, ys []float64, season int) (scale float64, used, ignored int, err error) {
	back := make(map[int]float64, len(ts)) // steps before firstOrigin → value
	maxBack := 0
	for i, t := range ts {
		if t.After(firstOrigin) {
			ignored++
			continue
		}
		k := 0
		if t.Before(firstOrigin) {
			if k, err = step.Lead(t, firstOrigin); err != nil {
				return math.NaN(), 0, 0, &OffGridError{Index: i, Time: t}
			}
		}
		back[k] = ys[i]
		maxBack = max(maxBack, k)
	}
	if len(back) == 0 {
		return math.NaN(), 0, ignored, nil
	}
	y := make([]float64, maxBack+1)
	for i := range y {
		v, ok := back[maxBack-i]
		if !ok {
			v = math.NaN()
		}
		y[i] = v
	}
	return MASEScale(y, season), len(back), ignored, nil
}
