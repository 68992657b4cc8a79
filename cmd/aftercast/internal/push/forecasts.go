package push

import (
	"cmp"
	"errors"
	"fmt"
	"io"
	"slices"
	"strings"
	"time"

	aftercastv1 "github.com/aftercast/aftercast/api/aftercast/v1"
	"github.com/aftercast/aftercast/cmd/aftercast/internal/records"
	"github.com/aftercast/aftercast/scoring"
	"google.golang.org/protobuf/types/known/timestamppb"
)

// ForecastColumns are the columns a forecasts file must have; an
// issued_at column is optional.
var ForecastColumns = []string{"series", "origin_time", "target_time", "forecast"}

// SeriesInfo is what the lead of a forecast row needs of its series.
type SeriesInfo struct {
	Step    scoring.Step
	Horizon int
}

// SeriesCache asks for each series once. It outlives one reading of a
// file, so that a retried push does not ask again.
type SeriesCache struct {
	fetch func(key string) (SeriesInfo, bool, error)
	known map[string]seriesEntry
}

type seriesEntry struct {
	info  SeriesInfo
	found bool
}

// NewSeriesCache makes a cache over fetch, which returns found = false
// for a series that does not exist (its rows are rejected) and an error
// for a failure that stops the push. Errors are not cached.
func NewSeriesCache(fetch func(key string) (info SeriesInfo, found bool, err error)) *SeriesCache {
	return &SeriesCache{fetch: fetch, known: make(map[string]seriesEntry)}
}

func (c *SeriesCache) get(key string) (SeriesInfo, bool, error) {
	if e, ok := c.known[key]; ok {
		return e.info, e.found, nil
	}
	info, found, err := c.fetch(key)
	if err != nil {
		return SeriesInfo{}, false, err
	}
	c.known[strings.Clone(key)] = seriesEntry{info, found}
	return info, found, nil
}

// DefaultMaxOpen is how many forecast vectors Forecasts holds open while
// it groups rows: enough for every series of a file sorted by origin, or
// every origin of a file sorted by target within a few days.
const DefaultMaxOpen = 10_000

// Forecasts reads a forecasts CSV and groups its rows into forecast
// vectors by (series, origin), holding at most maxOpen vectors: when one
// more opens, the oldest is sent. A row that arrives for a vector already
// sent starts a new vector for the same origin; the server merges vectors
// of one origin, so the result is the same as one vector, and a later
// value for the same lead wins there as it would in file order. Within an
// open vector an exact repeat of a row is counted as a duplicate and a
// different value for the same lead is rejected.
type Forecasts struct {
	rd                                      *records.Reader
	series, origin, target, forecast, issue records.Column
	model                                   string
	cache                                   *SeriesCache
	maxOpen                                 int

	open  map[vectorKey]*vector
	queue []vectorKey // open vectors, oldest first
	eof   bool

	// Rows counts the data rows read.
	Rows int64
	// Duplicates counts rows that repeat an earlier row of their vector
	// exactly; they are not sent again.
	Duplicates int64
	// Rejected lists the rows that are not sent, with the reason.
	Rejected Rejections
	// Vectors and Points count what Next has returned.
	Vectors, Points int64
	// Lines maps (vector index, lead) of what Next returned to lines.
	Lines Lines
}

type vectorKey struct {
	series string
	sec    int64
	nsec   int
}

type vector struct {
	series    string
	origin    time.Time
	issue     time.Time
	issueLine int
	points    []point
}

type point struct {
	lead  int32
	value float64
	line  int
}

// NewForecasts reads the header of a forecasts file. file names it in
// errors; model is the model every vector is sent for.
func NewForecasts(r io.Reader, file, model string, cache *SeriesCache, maxOpen int) (*Forecasts, error) {
	rd, err := records.NewReader(r, file, ForecastColumns...)
	if err != nil {
		return nil, err
	}
	return &Forecasts{
		rd: rd, series: rd.Column("series"), origin: rd.Column("origin_time"), target: rd.Column("target_time"),
		forecast: rd.Column("forecast"), issue: rd.Column("issued_at"),
		model: model, cache: cache, maxOpen: max(maxOpen, 1), open: make(map[vectorKey]*vector),
	}, nil
}

// Next returns the next vector to send, io.EOF after the last. Its index
// in the stream is the number of vectors returned before it. An error
// other than io.EOF (unreadable input, a failed series lookup) ends the
// reading.
func (f *Forecasts) Next() (*aftercastv1.Forecast, error) {
	for !f.eof && len(f.open) <= f.maxOpen {
		if err := f.read(); err != nil {
			return nil, err
		}
	}
	if len(f.queue) == 0 {
		return nil, io.EOF
	}
	k := f.queue[0]
	f.queue = f.queue[1:]
	v := f.open[k]
	delete(f.open, k)
	return f.emit(v), nil
}

// read reads one row into its open vector, or rejects it.
func (f *Forecasts) read() error {
	rd := f.rd
	err := rd.Next()
	switch {
	case errors.Is(err, io.EOF):
		f.eof = true
		return nil
	case err != nil && !errors.Is(err, records.ErrRow):
		return err
	}
	f.Rows++
	line := rd.Line()
	if err != nil {
		f.Rejected.add(line, "%s", reason(err))
		return nil
	}
	series, err := rd.Required(f.series)
	if err != nil {
		f.Rejected.add(line, "%s", reason(err))
		return nil
	}
	origin, err := rd.Time(f.origin)
	if err != nil {
		f.Rejected.add(line, "%s", reason(err))
		return nil
	}
	target, err := rd.Time(f.target)
	if err != nil {
		f.Rejected.add(line, "%s", reason(err))
		return nil
	}
	value, err := rd.Float(f.forecast)
	if err != nil {
		f.Rejected.add(line, "%s", reason(err))
		return nil
	}
	var issue time.Time
	if strings.TrimSpace(rd.String(f.issue)) != "" {
		if issue, err = rd.Time(f.issue); err != nil {
			f.Rejected.add(line, "%s", reason(err))
			return nil
		}
	}
	info, found, err := f.cache.get(series)
	if err != nil {
		return err
	}
	if !found {
		f.Rejected.add(line, "series %q does not exist", series)
		return nil
	}
	lead, err := info.Step.Lead(origin, target)
	if err != nil {
		f.Rejected.add(line, "%v", err)
		return nil
	}
	if err := scoring.CheckLead(lead, info.Horizon); err != nil {
		f.Rejected.add(line, "%v", err)
		return nil
	}

	k := vectorKey{series, origin.Unix(), origin.Nanosecond()}
	v := f.open[k]
	if v == nil {
		k.series = strings.Clone(series)
		v = &vector{series: k.series, origin: origin}
		f.open[k] = v
		f.queue = append(f.queue, k)
	}
	if !issue.IsZero() {
		switch {
		case v.issue.IsZero():
			v.issue, v.issueLine = issue, line
		case !v.issue.Equal(issue):
			f.Rejected.add(line, "issued_at %s differs from %s at line %d for the same origin",
				issue.Format(time.RFC3339Nano), v.issue.Format(time.RFC3339Nano), v.issueLine)
			return nil
		}
	}
	v.points = append(v.points, point{int32(lead), value, line})
	return nil
}

// emit turns an open vector into a message, dense when its leads are
// 1..k, and records the lines of its points.
func (f *Forecasts) emit(v *vector) *aftercastv1.Forecast {
	slices.SortStableFunc(v.points, func(a, b point) int { return cmp.Compare(a.lead, b.lead) })
	kept := v.points[:0]
	for _, p := range v.points {
		if n := len(kept); n > 0 && kept[n-1].lead == p.lead {
			if prev := kept[n-1]; prev.value == p.value {
				f.Duplicates++
			} else {
				f.Rejected.add(p.line, "lead %d of origin %s already has the value %v from line %d",
					p.lead, v.origin.Format(time.RFC3339Nano), prev.value, prev.line)
			}
			continue
		}
		kept = append(kept, p)
	}

	fc := &aftercastv1.Forecast{Series: v.series, Model: f.model, OriginTime: timestamppb.New(v.origin)}
	if !v.issue.IsZero() {
		fc.IssueTime = timestamppb.New(v.issue)
	}
	// Leads are ascending without repeats, so they are 1..k exactly when
	// the last is k.
	if int(kept[len(kept)-1].lead) == len(kept) {
		vals := make([]float64, len(kept))
		for i, p := range kept {
			vals[i] = p.value
		}
		fc.Values = &aftercastv1.Forecast_Dense{Dense: &aftercastv1.DenseValues{Values: vals}}
	} else {
		pts := make([]*aftercastv1.LeadValue, len(kept))
		for i, p := range kept {
			pts[i] = &aftercastv1.LeadValue{Lead: p.lead, Value: p.value}
		}
		fc.Values = &aftercastv1.Forecast_Sparse{Sparse: &aftercastv1.SparseValues{Points: pts}}
	}
	for _, p := range kept {
		f.Lines.Add(f.Vectors, p.lead, p.line)
	}
	f.Vectors++
	f.Points += int64(len(kept))
	return fc
}

// reason is an input error without its file:line prefix, which the
// rejection list prints itself.
func reason(err error) string {
	if le, ok := errors.AsType[*records.LineError](err); ok {
		return le.Err.Error()
	}
	return err.Error()
}

// Forecast maps the server's rejection of a vector (lead 0) or of one
// point to the rows it came from.
func (l *Lines) Forecast(r *aftercastv1.ForecastRejection) Rejection {
	why := cmp.Or(r.GetReason(), r.GetField())
	if r.GetLead() == 0 {
		if lines := l.Item(r.GetIndex()); len(lines) > 0 {
			return Rejection{Lines: lines, Reason: why}
		}
	} else if line, ok := l.Line(r.GetIndex(), r.GetLead()); ok {
		return Rejection{Lines: []int{line}, Reason: why}
	}
	return Rejection{Reason: fmt.Sprintf("vector %d lead %d (not sent by this push): %s", r.GetIndex(), r.GetLead(), why)}
}
