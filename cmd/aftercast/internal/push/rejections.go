package push

import (
	"cmp"
	"fmt"
	"math"
	"slices"

	"github.com/aftercast/aftercast/scoring"
)

// Rejection is one rejected row, or several rows rejected together (the
// rows of a forecast vector the server rejected whole), with the reason.
type Rejection struct {
	Lines  []int // ascending; empty when the server named a point this client did not send
	Reason string
}

// String is "line N: reason", "lines 2-25,30: reason" for several rows.
func (r Rejection) String() string {
	switch len(r.Lines) {
	case 0:
		return r.Reason
	case 1:
		return fmt.Sprintf("line %d: %s", r.Lines[0], r.Reason)
	}
	return fmt.Sprintf("lines %s: %s", scoring.FormatLeads(r.Lines), r.Reason)
}

// MaxListed is how many rejections a Rejections keeps to print, as the
// server lists its first 1000: a file of bad rows must not fill memory.
const MaxListed = 1000

// Rejections counts rejected rows and keeps the first MaxListed of them.
type Rejections struct {
	List []Rejection
	// N counts every rejected row, listed or not.
	N int64
	// Truncated is set when a rejection was counted but not listed.
	Truncated bool
}

func (rs *Rejections) add(line int, format string, args ...any) {
	rs.N++
	if len(rs.List) >= MaxListed {
		rs.Truncated = true
		return
	}
	rs.List = append(rs.List, Rejection{Lines: []int{line}, Reason: fmt.Sprintf(format, args...)})
}

// SortByLine orders rejections by their first line; rejections without a
// line come last.
func SortByLine(rs []Rejection) {
	first := func(r Rejection) int {
		if len(r.Lines) == 0 {
			return math.MaxInt
		}
		return r.Lines[0]
	}
	slices.SortStableFunc(rs, func(a, b Rejection) int { return cmp.Compare(first(a), first(b)) })
}
