package push

import (
	"slices"
	"sort"
)

// Lines remembers the CSV line of every point sent in a stream, so that
// the server's rejections, which name a point by its position (vector
// index and lead for forecasts, index for actuals), can be reported by
// line. It stores runs rather than one entry per point: the points of a
// vector whose rows are consecutive lines with consecutive leads make one
// run, and so do single-point items on consecutive lines, so that a
// well-ordered file of millions of rows costs a few runs per vector.
//
// Points must be added in stream order: ascending index, and ascending
// lead within an index. The zero value is empty and ready to use.
type Lines struct {
	runs []run
}

// run is n points from (index, lead) on line, each one line after the
// last: along the leads of one vector, or (across) along the indexes for
// one lead.
type run struct {
	index  int64
	lead   int32
	across bool
	n      int32
	line   int
}

func (r run) contains(index int64, lead int32) (int, bool) {
	if r.across {
		if lead == r.lead && index >= r.index && index < r.index+int64(r.n) {
			return r.line + int(index-r.index), true
		}
		return 0, false
	}
	if index == r.index && lead >= r.lead && lead < r.lead+r.n {
		return r.line + int(lead-r.lead), true
	}
	return 0, false
}

// Add records that the point (index, lead) came from line.
func (l *Lines) Add(index int64, lead int32, line int) {
	if k := len(l.runs); k > 0 {
		r := &l.runs[k-1]
		if r.n < 1<<30 && line == r.line+int(r.n) {
			switch {
			case (r.n == 1 || !r.across) && index == r.index && lead == r.lead+r.n:
				r.across = false
				r.n++
				return
			case (r.n == 1 || r.across) && lead == r.lead && index == r.index+int64(r.n):
				r.across = true
				r.n++
				return
			}
		}
	}
	l.runs = append(l.runs, run{index: index, lead: lead, n: 1, line: line})
}

// find is the position of the last run starting at or before (index,
// lead), or -1.
func (l *Lines) find(index int64, lead int32) int {
	return sort.Search(len(l.runs), func(k int) bool {
		r := l.runs[k]
		return index < r.index || index == r.index && lead < r.lead
	}) - 1
}

// Line is the line of the point (index, lead).
func (l *Lines) Line(index int64, lead int32) (int, bool) {
	if i := l.find(index, lead); i >= 0 {
		return l.runs[i].contains(index, lead)
	}
	return 0, false
}

// Item is the lines of every point of the item at index, ascending.
func (l *Lines) Item(index int64) []int {
	var out []int
	i := max(l.find(index, 0), 0)
	for ; i < len(l.runs) && l.runs[i].index <= index; i++ {
		r := l.runs[i]
		switch {
		case r.across:
			if line, ok := r.contains(index, r.lead); ok {
				out = append(out, line)
			}
		case r.index == index:
			for k := range int(r.n) {
				out = append(out, r.line+k)
			}
		}
	}
	slices.Sort(out)
	return out
}
