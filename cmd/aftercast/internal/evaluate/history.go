package evaluate

import (
	"errors"
	"fmt"
	"io"
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
		err := rd.Next()
		if errors.Is(err, io.EOF) {
			break
		}
		if err != nil && !errors.Is(err, records.ErrRow) {
			return nil, err
		}
		var s string
		var t time.Time
		var v float64
		if err == nil { // else a row refused on its own (records.ErrRow)
			s, err = rd.Required(cSeries)
		}
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
// the first origin (method.md §2). Later points are not training data and
// are ignored.
func (h history) scale(step scoring.Step, firstOrigin time.Time, season int) (float64, error) {
	ts, ys := make([]time.Time, len(h.points)), make([]float64, len(h.points))
	for i, p := range h.points {
		ts[i], ys[i] = p.t, p.v
	}
	scale, _, _, err := scoring.TrainingScale(step, firstOrigin, ts, ys, season)
	var off *scoring.OffGridError
	if errors.As(err, &off) {
		return 0, &records.LineError{File: h.file, Line: h.points[off.Index].line,
			Err: fmt.Errorf("training actual at %s is not on the %s grid that ends at the first origin %s", off.Time.Format(time.RFC3339), step, firstOrigin.Format(time.RFC3339))}
	}
	return scale, err
}
