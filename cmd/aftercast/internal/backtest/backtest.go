// Package backtest reads the files of `aftercast baseline import` — backtest
// rows (series,origin_time,target_time,forecast,actual) and, optionally,
// training actuals (series,time,value) — checks every row on its own, and
// cuts what it read into the messages of one
// BaselineService.ImportBaseline stream. It remembers the line of every row
// it keeps, so that the server's field violations, which name rows by their
// index in the stream ("rows[1234].target_time"), are reported by file and
// line.
//
// An import is atomic, so nothing is sent unless every row reads: the rows
// are held in memory (about 50 bytes each), which also lets a failed stream
// be sent again without reading the input again. It does no network I/O.
package backtest

import (
	"errors"
	"fmt"
	"io"
	"strconv"
	"strings"
	"time"
	"unicode/utf8"

	aftercastv1 "github.com/aftercast/aftercast/api/aftercast/v1"
	"github.com/aftercast/aftercast/cmd/aftercast/internal/records"
	"google.golang.org/protobuf/proto"
	"google.golang.org/protobuf/types/known/timestamppb"
)

// Columns are the columns a backtest file must have, in any order.
var Columns = []string{"series", "origin_time", "target_time", "forecast", "actual"}

// TrainingColumns are the columns a training-actuals file must have.
var TrainingColumns = []string{"series", "time", "value"}

// MaxListed is how many unreadable rows a BadRows error lists.
const MaxListed = 100

// Import is what one `baseline import` sends: backtest rows and training
// actuals, in file order, each with its line. The zero value is empty and
// ready to use.
type Import struct {
	series   []string
	index    map[string]int32
	rows     []row
	training []actual
	// files names the backtest file (0) and the training file (1).
	files [2]string
}

type row struct {
	series           int32
	line             int32
	origin, target   time.Time
	forecast, actual float64
}

type actual struct {
	series int32
	line   int32
	time   time.Time
	value  float64
}

// Rows is the number of backtest rows read.
func (im *Import) Rows() int { return len(im.rows) }

// TrainingActuals is the number of training actuals read.
func (im *Import) TrainingActuals() int { return len(im.training) }

// Series is the number of distinct series named by the backtest rows and
// training actuals.
func (im *Import) Series() int { return len(im.series) }

func (im *Import) seriesIndex(key string) int32 {
	if i, ok := im.index[key]; ok {
		return i
	}
	if im.index == nil {
		im.index = make(map[string]int32)
	}
	key = strings.Clone(key) // it outlives the input chunk
	i := int32(len(im.series))
	im.series = append(im.series, key)
	im.index[key] = i
	return i
}

// BadRows is the error of a file with rows that cannot be read.
type BadRows struct {
	File string
	// N counts the unreadable rows; Rows counts all data rows.
	N, Rows int
	// List holds the first MaxListed errors, each naming its file:line.
	List []error
}

func (e *BadRows) Error() string {
	var b strings.Builder
	fmt.Fprintf(&b, "%d of %d rows of %s cannot be read:", e.N, e.Rows, e.File)
	for _, err := range e.List {
		fmt.Fprintf(&b, "\n  %v", err)
	}
	if e.N > len(e.List) {
		fmt.Fprintf(&b, "\n  (and %d more)", e.N-len(e.List))
	}
	return b.String()
}

func (e *BadRows) add(err error) {
	e.N++
	if len(e.List) < MaxListed {
		e.List = append(e.List, err)
	}
}

// ReadBacktest reads a backtest file; file names it in errors. It returns
// a *BadRows error when some rows cannot be read (those are not kept), and
// other errors (a missing column, unreadable input) as they come.
func (im *Import) ReadBacktest(r io.Reader, file string) error {
	rd, err := records.NewReader(r, file, Columns...)
	if err != nil {
		return err
	}
	im.files[0] = file
	cs, co, ct, cf, ca := rd.Column("series"), rd.Column("origin_time"), rd.Column("target_time"), rd.Column("forecast"), rd.Column("actual")
	return eachRow(rd, file, func() error {
		var r row
		s, err := rd.Required(cs)
		if err == nil {
			r.origin, err = rd.Time(co)
		}
		if err == nil {
			r.target, err = rd.Time(ct)
		}
		if err == nil {
			r.forecast, err = rd.Float(cf)
		}
		if err == nil {
			r.actual, err = rd.Float(ca)
		}
		if err == nil {
			r.line, err = line(rd)
		}
		if err != nil {
			return err
		}
		r.series = im.seriesIndex(s)
		im.rows = append(im.rows, r)
		return nil
	})
}

// ReadTraining reads a training-actuals file, with errors as ReadBacktest.
func (im *Import) ReadTraining(r io.Reader, file string) error {
	rd, err := records.NewReader(r, file, TrainingColumns...)
	if err != nil {
		return err
	}
	im.files[1] = file
	cs, ct, cv := rd.Column("series"), rd.Column("time"), rd.Column("value")
	return eachRow(rd, file, func() error {
		var a actual
		s, err := rd.Required(cs)
		if err == nil {
			a.time, err = rd.Time(ct)
		}
		if err == nil {
			a.value, err = rd.Float(cv)
		}
		if err == nil {
			a.line, err = line(rd)
		}
		if err != nil {
			return err
		}
		a.series = im.seriesIndex(s)
		im.training = append(im.training, a)
		return nil
	})
}

// eachRow calls parse on every data row of rd. A row that the reader
// (records.ErrRow) or parse refuses is gathered into a *BadRows returned
// at the end, so one pass reports every bad row of the file rather than
// the first.
func eachRow(rd *records.Reader, file string, parse func() error) error {
	bad := &BadRows{File: file}
	for {
		err := rd.Next()
		if errors.Is(err, io.EOF) {
			break
		}
		if err != nil && !errors.Is(err, records.ErrRow) {
			return err
		}
		bad.Rows++
		if err == nil {
			err = parse()
		}
		if err != nil {
			bad.add(err)
		}
	}
	if bad.N > 0 {
		return bad
	}
	return nil
}

func line(rd *records.Reader) (int32, error) {
	if rd.Line() > 1<<31-1 {
		return 0, rd.Errorf("file has more lines than this client counts")
	}
	return int32(rd.Line()), nil
}

// Messages returns the stream's messages one by one, then io.EOF: first
// the backtest rows in file order, then the training actuals, at most
// batch items and about maxBytes encoded per message. The model is named
// in the first message only; a model name that is not UTF-8 (which no
// message can carry) is the first call's error. Each call of Messages
// starts the stream anew, so a failed stream can be sent again.
func (im *Import) Messages(model string, batch, maxBytes int) func() (*aftercastv1.ImportBaselineRequest, error) {
	batch = max(batch, 1)
	nextRow, nextTraining, first := 0, 0, true
	return func() (*aftercastv1.ImportBaselineRequest, error) {
		if first && !utf8.ValidString(model) {
			return nil, fmt.Errorf("model %q is not valid UTF-8", model)
		}
		if nextRow == len(im.rows) && nextTraining == len(im.training) && !first {
			return nil, io.EOF
		}
		req := &aftercastv1.ImportBaselineRequest{}
		if first {
			req.Model, first = model, false
		}
		size := proto.Size(req)
		for nextRow < len(im.rows) && len(req.Rows) < batch {
			r := im.rows[nextRow]
			m := &aftercastv1.BacktestRow{Series: im.series[r.series], OriginTime: timestamppb.New(r.origin),
				TargetTime: timestamppb.New(r.target), Forecast: r.forecast, Actual: r.actual}
			n := proto.Size(m) + 4 // field tag and length
			if len(req.Rows) > 0 && size+n > maxBytes {
				return req, nil
			}
			req.Rows, size = append(req.Rows, m), size+n
			nextRow++
		}
		if len(req.Rows) > 0 {
			return req, nil
		}
		for nextTraining < len(im.training) && len(req.TrainingActuals) < batch {
			a := im.training[nextTraining]
			m := &aftercastv1.TrainingActual{Series: im.series[a.series], Time: timestamppb.New(a.time), Value: a.value}
			n := proto.Size(m) + 4
			if len(req.TrainingActuals) > 0 && size+n > maxBytes {
				return req, nil
			}
			req.TrainingActuals, size = append(req.TrainingActuals, m), size+n
			nextTraining++
		}
		return req, nil
	}
}

// Locate maps the field of a server's field violation to the row it names:
// "rows[1234].target_time" becomes where = "backtest.csv:1236" and
// sub = "target_time" (empty for "rows[1234]"). ok is false for a field
// that names no row this import sent, such as "model".
func (im *Import) Locate(field string) (where, sub string, ok bool) {
	for k, prefix := range [2]string{"rows[", "training_actuals["} {
		rest, found := strings.CutPrefix(field, prefix)
		if !found {
			continue
		}
		num, rest, found := strings.Cut(rest, "]")
		if !found {
			return "", "", false
		}
		i, err := strconv.Atoi(num)
		if err != nil || i < 0 {
			return "", "", false
		}
		var line int32
		switch {
		case k == 0 && i < len(im.rows):
			line = im.rows[i].line
		case k == 1 && i < len(im.training):
			line = im.training[i].line
		default:
			return "", "", false
		}
		if rest != "" && !strings.HasPrefix(rest, ".") {
			return "", "", false
		}
		return fmt.Sprintf("%s:%d", im.files[k], line), strings.TrimPrefix(rest, "."), true
	}
	return "", "", false
}

// Describe is a field violation for people: "backtest.csv:1236:
// target_time: reason" for a row of the import, "field: reason" otherwise.
func (im *Import) Describe(field, reason string) string {
	where, sub, ok := im.Locate(field)
	switch {
	case !ok:
		if field == "" {
			return reason
		}
		return field + ": " + reason
	case sub == "":
		return where + ": " + reason
	}
	return where + ": " + sub + ": " + reason
}
