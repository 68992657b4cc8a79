package evaluate

import (
	"errors"
	"fmt"
	"io"
	"math"
	"strings"
	"time"

	"github.com/aftercast/aftercast/cmd/aftercast/internal/records"
	"github.com/aftercast/aftercast/scoring"
)

type histPoint struct {
	t    time.Time
	v    float64
	line int
}

// history holds one series' training actuals, kept with their lines so
// that a point off the series' grid can be named.
type history struct {
	file   string
	points []histPoint
}

// readHistory reads a `series,time,value` file of training actuals.
func readHistory(path string) (map[string]history, error) {
	f, rd, err := open(path, "series", "time", "value")
	if err != nil {
		return nil, err
	}
	defer f.Close()
	out := make(map[string]history)
	seen := make(map[string]map[int64]float64)
	var errs []error
	cSeries, cTime, cValue := rd.Column("series"), rd.Column("time"), rd.Column("value")
	for len(errs) < maxErrors {
		if err := rd.Next(); err == io.EOF {
			break
		} else if err != nil {
			return nil, err
		}
		s, err := rd.Required(cSeries)
		var t time.Time
		var v float64
		if err == nil {
			t, err = rd.Time(cTime)
		}
		if err == nil {
			v, err = rd.Float(cValue)
		}
		if err != nil {
			errs = append(errs, err)
			continue
		}
		if seen[s] == nil {
			s = strings.Clone(s) // a map key outlives the input chunk
			seen[s] = make(map[int64]float64)
		}
		if prev, ok := seen[s][t.UnixNano()]; ok {
			if prev != v {
				errs = append(errs, rd.Errorf("series %s: two values for %s: %v here, %v earlier", s, t.Format(time.RFC3339), v, prev))
			}
			continue
		}
		seen[s][t.UnixNano()] = v
		h := out[s]
		h.file = path
		h.points = append(h.points, histPoint{t, v, rd.Line()})
		out[s] = h
	}
	if len(errs) > 0 {
		return nil, errors.Join(errs...)
	}
	return out, nil
}

// scale is the MASE scale from the training actuals up to and including
// the first origin (method.md §2), on the series' grid ending there. Later
// points are not training data and are ignored.
func (h history) scale(step scoring.Step, firstOrigin time.Time, season int) (float64, error) {
	back := make(map[int]float64) // steps before firstOrigin → value
	maxBack := 0
	for _, p := range h.points {
		if p.t.After(firstOrigin) {
			continue
		}
		k := 0
		if p.t.Before(firstOrigin) {
			var err error
			if k, err = step.Lead(p.t, firstOrigin); err != nil {
				return 0, &records.LineError{File: h.file, Line: p.line,
					Err: fmt.Errorf("training actual at %s is not on the %s grid that ends at the first origin %s", p.t.Format(time.RFC3339), step, firstOrigin.Format(time.RFC3339))}
			}
		}
		back[k] = p.v
		maxBack = max(maxBack, k)
	}
	y := make([]float64, maxBack+1)
	for i := range y {
		v, ok := back[maxBack-i]
		if !ok {
			v = math.NaN()
		}
		y[i] = v
	}
	return scoring.MASEScale(y, season), nil
}
