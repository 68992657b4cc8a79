package scoring

import (
	"errors"
	"fmt"
	"strconv"
	"strings"
	"time"
)

// Errors returned by [Step.Lead] and [CheckLead]. Callers match them with
// errors.Is to tell an off-grid target from an out-of-range lead.
var (
	ErrOffGrid    = errors.New("target is not on the origin's step grid")
	ErrLeadTooLow = errors.New("lead is below 1")
	ErrBeyondH    = errors.New("lead is beyond the horizon")
)

// maxFixedStep bounds fixed steps so that lead arithmetic cannot overflow;
// longer intervals are calendar steps (1y).
const maxFixedStep = 8784 * time.Hour

type stepUnit int

const (
	unitFixed stepUnit = iota
	unitDay
	unitMonth
)

// Step is a series' sampling interval: a fixed duration ("15m", "1h",
// "24h") or a calendar step ("1d", "2w", "1mo", "1y") counted in the
// calendar of a time zone, so that a daily step across a DST change is 23 or
// 25 hours long. The zero Step is invalid.
type Step struct {
	text   string
	unit   stepUnit
	fixed  time.Duration // unitFixed
	count  int           // days (unitDay) or months (unitMonth) per step
	loc    *time.Location
	anchor time.Time // where the grid starts: see [Step.OnGrid]
}

// ParseStep parses a step. Fixed steps use Go duration syntax restricted to
// whole seconds ("15m", "1h30m", "24h"); calendar steps are N followed by d,
// w, mo or y. loc is the zone whose calendar the calendar steps follow; nil
// means UTC. Fixed steps ignore loc: an hour is an hour in every zone.
func ParseStep(s string, loc *time.Location) (Step, error) {
	if loc == nil {
		loc = time.UTC
	}
	st := Step{text: s, loc: loc}
	for _, u := range []struct {
		suffix string
		unit   stepUnit
		mult   int
	}{{"mo", unitMonth, 1}, {"y", unitMonth, 12}, {"w", unitDay, 7}, {"d", unitDay, 1}} {
		num, ok := strings.CutSuffix(s, u.suffix)
		if !ok {
			continue
		}
		n, err := strconv.Atoi(num)
		if err != nil || n < 1 || n > 1000 || num != strconv.Itoa(n) {
			return Step{}, fmt.Errorf("step %q: want a positive whole number before %q", s, u.suffix)
		}
		st.unit, st.count = u.unit, n*u.mult
		st.anchor = DefaultAnchor(st)
		return st, nil
	}
	d, err := time.ParseDuration(s)
	if err != nil {
		return Step{}, fmt.Errorf("step %q: want a duration such as 15m, 1h or 24h, or a calendar step such as 1d, 1w, 1mo, 1y", s)
	}
	if d < time.Second || d%time.Second != 0 || d > maxFixedStep {
		return Step{}, fmt.Errorf("step %q: want a whole number of seconds from 1s to %s", s, maxFixedStep)
	}
	st.unit, st.fixed = unitFixed, d
	st.anchor = DefaultAnchor(st)
	return st, nil
}

// DefaultAnchor is where the grid of a step starts unless its series sets
// its own: local midnight of Monday 3 January 2000 for week steps, so that
// weeks start on Mondays, and local midnight of 1 January 2000 otherwise,
// in the step's zone. A recent date, because zones change their offsets:
// an anchor in the zone's present offset puts an hourly grid on the local
// hour (Asia/Kolkata's hours are at :30 UTC).
func DefaultAnchor(s Step) time.Time {
	day := 1
	if s.unit == unitDay && s.count%7 == 0 {
		day = 3
	}
	return time.Date(2000, time.January, day, 0, 0, 0, 0, s.loc)
}

// WithAnchor returns s with its grid starting at a instead.
func (s Step) WithAnchor(a time.Time) Step {
	s.anchor = a
	return s
}

// Anchor is where the step's grid starts.
func (s Step) Anchor() time.Time { return s.anchor }

// OnGrid reports whether t is anchor + k·step for a whole k (method.md §1):
// for fixed steps a whole number of steps of elapsed time from the anchor;
// for calendar steps the anchor's local clock time on a date a whole number
// of steps from the anchor's (for months, the anchor's day of the month,
// clamped to the month's last day). Origins and actual times must lie on
// it: anything else can never pair.
func (s Step) OnGrid(t time.Time) bool {
	switch s.unit {
	case unitFixed:
		return t.Sub(s.anchor)%s.fixed == 0
	case unitDay:
		days := civilDays(t.In(s.loc)) - civilDays(s.anchor.In(s.loc))
		return floorMod(days, s.count) == 0 && s.Add(s.anchor, days/s.count).Equal(t)
	default:
		l, a := t.In(s.loc), s.anchor.In(s.loc)
		months := (l.Year()-a.Year())*12 + int(l.Month()) - int(a.Month())
		return floorMod(months, s.count) == 0 && s.Add(s.anchor, months/s.count).Equal(t)
	}
}

// GridNear describes the grid points around t, for a refusal: "the nearest
// are 2026-01-01T05:00:00Z and 2026-01-01T06:00:00Z".
func (s Step) GridNear(t time.Time) (before, after time.Time) {
	var k int
	switch s.unit {
	case unitFixed:
		k = int(t.Sub(s.anchor) / s.fixed)
		if t.Before(s.anchor) {
			k--
		}
	case unitDay:
		k = floorDiv(civilDays(t.In(s.loc))-civilDays(s.anchor.In(s.loc)), s.count)
	default:
		l, a := t.In(s.loc), s.anchor.In(s.loc)
		k = floorDiv((l.Year()-a.Year())*12+int(l.Month())-int(a.Month()), s.count)
	}
	before = s.Add(s.anchor, k)
	for before.After(t) {
		k--
		before = s.Add(s.anchor, k)
	}
	after = s.Add(s.anchor, k+1)
	for !after.After(t) {
		k++
		before, after = after, s.Add(s.anchor, k+1)
	}
	return before, after
}

// MustParseStep is ParseStep for steps known to be valid, as in tests and
// examples; it panics on error.
func MustParseStep(s string, loc *time.Location) Step {
	st, err := ParseStep(s, loc)
	if err != nil {
		panic(err)
	}
	return st
}

// String returns the step as it was written.
func (s Step) String() string { return s.text }

// IsZero reports whether s is the zero (invalid) Step.
func (s Step) IsZero() bool { return s.text == "" }

// Location returns the zone of the step's calendar.
func (s Step) Location() *time.Location { return s.loc }

// Calendar reports whether the step is counted in calendar days or months
// rather than a fixed duration.
func (s Step) Calendar() bool { return s.unit != unitFixed }

// Add returns t moved by k steps (k may be negative). Calendar steps keep the
// local clock time; a month step keeps the day of month, clamped to the
// month's last day (Jan 31 + 1mo = Feb 28), always counted from t itself so
// that the grid does not drift.
func (s Step) Add(t time.Time, k int) time.Time {
	switch s.unit {
	case unitFixed:
		return t.Add(time.Duration(k) * s.fixed)
	case unitDay:
		l := t.In(s.loc)
		return time.Date(l.Year(), l.Month(), l.Day()+k*s.count, l.Hour(), l.Minute(), l.Second(), l.Nanosecond(), s.loc)
	default:
		l := t.In(s.loc)
		months := int(l.Month()) - 1 + k*s.count
		y := l.Year() + floorDiv(months, 12)
		m := time.Month(floorMod(months, 12) + 1)
		d := min(l.Day(), daysIn(y, m))
		return time.Date(y, m, d, l.Hour(), l.Minute(), l.Second(), l.Nanosecond(), s.loc)
	}
}

// Lead returns the number of steps from origin to target. It fails with
// ErrOffGrid when target is not origin plus a whole number of steps, and
// with ErrLeadTooLow when target is not after origin. The horizon is checked
// separately by [CheckLead].
func (s Step) Lead(origin, target time.Time) (int, error) {
	var k int
	switch s.unit {
	case unitFixed:
		d := target.Sub(origin)
		if d%s.fixed != 0 {
			return 0, fmt.Errorf("%w: %s after the origin is not a multiple of %s", ErrOffGrid, d, s.text)
		}
		k = int(d / s.fixed)
	case unitDay:
		o, t := origin.In(s.loc), target.In(s.loc)
		days := civilDays(t) - civilDays(o)
		k = floorDiv(days, s.count)
		if floorMod(days, s.count) != 0 || !s.Add(origin, k).Equal(target) {
			return 0, s.offGrid(origin, target)
		}
	default:
		o, t := origin.In(s.loc), target.In(s.loc)
		months := (t.Year()-o.Year())*12 + int(t.Month()) - int(o.Month())
		k = floorDiv(months, s.count)
		if floorMod(months, s.count) != 0 || !s.Add(origin, k).Equal(target) {
			return 0, s.offGrid(origin, target)
		}
	}
	if k < 1 {
		return k, fmt.Errorf("%w: target %s is %d steps of %s from origin %s", ErrLeadTooLow,
			target.Format(time.RFC3339), k, s.text, origin.Format(time.RFC3339))
	}
	return k, nil
}

func (s Step) offGrid(origin, target time.Time) error {
	return fmt.Errorf("%w: target %s is not a whole number of %s steps (in %s) from origin %s",
		ErrOffGrid, target.Format(time.RFC3339), s.text, s.loc, origin.Format(time.RFC3339))
}

// CheckLead reports whether lead h lies in 1..horizon.
func CheckLead(h, horizon int) error {
	if h < 1 {
		return fmt.Errorf("%w: %d", ErrLeadTooLow, h)
	}
	if h > horizon {
		return fmt.Errorf("%w: lead %d > horizon %d", ErrBeyondH, h, horizon)
	}
	return nil
}

// civilDays numbers the calendar date of t (in t's own zone) so that
// consecutive dates differ by one, whatever the day's length in hours.
func civilDays(t time.Time) int {
	return int(time.Date(t.Year(), t.Month(), t.Day(), 0, 0, 0, 0, time.UTC).Unix() / 86400)
}

func daysIn(y int, m time.Month) int {
	return time.Date(y, m+1, 0, 0, 0, 0, 0, time.UTC).Day()
}

func floorDiv(a, b int) int {
	q := a / b
	if (a%b != 0) && ((a < 0) != (b < 0)) {
		q--
	}
	return q
}

func floorMod(a, b int) int { return a - floorDiv(a, b)*b }
