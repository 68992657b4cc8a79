package push

import (
	"cmp"
	"errors"
	"fmt"
	"io"
	"strings"

	aftercastv1 "github.com/aftercast/aftercast/api/aftercast/v1"
	"github.com/aftercast/aftercast/cmd/aftercast/internal/records"
	"google.golang.org/protobuf/types/known/timestamppb"
)

// ActualColumns are the columns an actuals file must have.
var ActualColumns = []string{"series", "time", "value"}

// Actuals reads an actuals CSV row by row. Whether the series exists is
// left to the server, whose rejections Lines maps back to rows.
type Actuals struct {
	rd                  *records.Reader
	series, time, value records.Column

	// Rows counts the data rows read.
	Rows int64
	// Rejected lists the rows that are not sent, with the reason.
	Rejected Rejections
	// Sent counts what Next has returned.
	Sent int64
	// Lines maps the stream index of what Next returned (lead 0) to lines.
	Lines Lines
}

// NewActuals reads the header of an actuals file; file names it in errors.
func NewActuals(r io.Reader, file string) (*Actuals, error) {
	rd, err := records.NewReader(r, file, ActualColumns...)
	if err != nil {
		return nil, err
	}
	return &Actuals{rd: rd, series: rd.Column("series"), time: rd.Column("time"), value: rd.Column("value")}, nil
}

// Next returns the next actual to send, io.EOF after the last. Its index
// in the stream is the number of actuals returned before it. A row that is
// bad on its own is rejected and skipped; an error other than io.EOF
// (broken quoting, unreadable input) ends the reading.
func (a *Actuals) Next() (*aftercastv1.Actual, error) {
	rd := a.rd
	for {
		err := rd.Next()
		if err != nil && !errors.Is(err, records.ErrRow) {
			return nil, err
		}
		a.Rows++
		if err != nil {
			a.Rejected.add(rd.Line(), "%s", reason(err))
			continue
		}
		series, err := rd.Required(a.series)
		if err != nil {
			a.Rejected.add(rd.Line(), "%s", reason(err))
			continue
		}
		t, err := rd.Time(a.time)
		if err != nil {
			a.Rejected.add(rd.Line(), "%s", reason(err))
			continue
		}
		v, err := rd.Float(a.value)
		if err != nil {
			a.Rejected.add(rd.Line(), "%s", reason(err))
			continue
		}
		a.Lines.Add(a.Sent, 0, rd.Line())
		a.Sent++
		return &aftercastv1.Actual{Series: strings.Clone(series), Time: timestamppb.New(t), Value: v}, nil
	}
}

// Actual maps the server's rejection of an actual to its row.
func (l *Lines) Actual(r *aftercastv1.ActualRejection) Rejection {
	why := cmp.Or(r.GetReason(), r.GetField())
	if line, ok := l.Line(r.GetIndex(), 0); ok {
		return Rejection{Lines: []int{line}, Reason: why}
	}
	return Rejection{Reason: fmt.Sprintf("actual %d (not sent by this push): %s", r.GetIndex(), why)}
}
