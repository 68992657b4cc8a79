package scoring

import (
	"errors"
	"testing"
	"time"
)

func TestTrainingScale(t *testing.T) {
	t.Parallel()
	st := MustParseStep("1h", nil)
	first := mustTime(t, "2026-01-01T00:00:00Z")
	at := func(h int) time.Time { return first.Add(time.Duration(h) * time.Hour) }
	// method.md's example (4, 6, 5, 7) given out of order, a later value ignored.
	ts := []time.Time{at(0), at(-3), at(-1), at(-2), at(5)}
	ys := []float64{7, 4, 5, 6, 1000}
	scale, used, ignored, err := TrainingScale(st, first, ts, ys, 1)
	if err != nil || used != 4 || ignored != 1 || !relClose(scale, 5.0/3, 1e-15) {
		t.Errorf("scale %v used %d ignored %d err %v; want 5/3, 4, 1", scale, used, ignored, err)
	}
	_, _, _, err = TrainingScale(st, first, []time.Time{at(-1).Add(time.Minute)}, []float64{1}, 1)
	var off *OffGridError
	if !errors.As(err, &off) || off.Index != 0 {
		t.Errorf("off-grid: %v", err)
	}
	if s, used, _, err := TrainingScale(st, first, nil, nil, 1); err != nil || used != 0 || Defined(s) {
		t.Errorf("no history: %v %d %v", s, used, err)
	}
}
