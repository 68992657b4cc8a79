package scoring

import (
	"errors"
	"fmt"
	"strconv"
	"time"
)

// StepGuess infers a series' step from the origins and targets it has
// seen: the largest step that puts every one of them on a single grid.
// Calendar candidates are judged in the given zone: when every time has the
// same local clock time, whole days fit (and are preferred over a fixed
// duration, since they also fit across DST changes); when every time also
// has the same day of the month, whole months fit. The zero value is not
// usable; create one with [NewStepGuess].
type StepGuess struct {
	loc   *time.Location
	first time.Time
	seen  int

	gcd      time.Duration // of |t − first| over all times
	sameTime bool          // same local clock time as first
	dayGCD   int           // of civil-day differences
	sameDay  bool          // same local day of month as first
	monGCD   int           // of month differences
}

// NewStepGuess starts a guess for calendar steps in loc (nil = UTC).
func NewStepGuess(loc *time.Location) *StepGuess {
	if loc == nil {
		loc = time.UTC
	}
	return &StepGuess{loc: loc, sameTime: true, sameDay: true}
}

// Observe adds one origin or target time.
func (g *StepGuess) Observe(t time.Time) {
	g.seen++
	if g.seen == 1 {
		g.first = t
		return
	}
	d := t.Sub(g.first)
	if d < 0 {
		d = -d
	}
	g.gcd = gcdDur(g.gcd, d)
	if !g.sameTime {
		return
	}
	a, b := g.first.In(g.loc), t.In(g.loc)
	if a.Hour() != b.Hour() || a.Minute() != b.Minute() || a.Second() != b.Second() || a.Nanosecond() != b.Nanosecond() {
		g.sameTime = false
		return
	}
	g.dayGCD = gcdInt(g.dayGCD, abs(civilDays(b)-civilDays(a)))
	if g.sameDay && a.Day() == b.Day() {
		g.monGCD = gcdInt(g.monGCD, abs((b.Year()-a.Year())*12+int(b.Month())-int(a.Month())))
	} else {
		g.sameDay = false
	}
}

// ErrStepUnknown is returned by [StepGuess.Step] when the times seen do not
// settle the step.
var ErrStepUnknown = errors.New("step cannot be inferred")

// Step returns the inferred step.
func (g *StepGuess) Step() (Step, error) {
	if g.seen < 3 || g.gcd == 0 {
		return Step{}, fmt.Errorf("%w: fewer than three times, or all equal", ErrStepUnknown)
	}
	switch {
	case g.sameTime && g.sameDay && g.monGCD > 0:
		if g.monGCD%12 == 0 {
			return ParseStep(strconv.Itoa(g.monGCD/12)+"y", g.loc)
		}
		return ParseStep(strconv.Itoa(g.monGCD)+"mo", g.loc)
	case g.sameTime && g.dayGCD > 0:
		if g.dayGCD%7 == 0 {
			return ParseStep(strconv.Itoa(g.dayGCD/7)+"w", g.loc)
		}
		return ParseStep(strconv.Itoa(g.dayGCD)+"d", g.loc)
	}
	if g.gcd%time.Second != 0 {
		return Step{}, fmt.Errorf("%w: times are not whole seconds apart", ErrStepUnknown)
	}
	return ParseStep(formatDuration(g.gcd), g.loc)
}

// formatDuration writes d in the largest single unit that divides it, so
// that an inferred step reads as a person would write it ("30m", "24h").
func formatDuration(d time.Duration) string {
	switch {
	case d%time.Hour == 0:
		return strconv.FormatInt(int64(d/time.Hour), 10) + "h"
	case d%time.Minute == 0:
		return strconv.FormatInt(int64(d/time.Minute), 10) + "m"
	default:
		return strconv.FormatInt(int64(d/time.Second), 10) + "s"
	}
}

func gcdDur(a, b time.Duration) time.Duration {
	for b != 0 {
		a, b = b, a%b
	}
	return a
}

func gcdInt(a, b int) int {
	for b != 0 {
		a, b = b, a%b
	}
	return a
}

func abs(x int) int {
	if x < 0 {
		return -x
	}
	return x
}
