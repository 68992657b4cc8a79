package scoring

import (
	"errors"
	"testing"
	"time"
)

func TestStepGuess(t *testing.T) {
	t.Parallel()
	bru := mustLoc(t, "Europe/Brussels")
	cases := []struct {
		name  string
		loc   *time.Location
		times []string
		want  string
	}{
		{"half-hourly", nil, []string{"2026-01-01T00:00:00Z", "2026-01-01T00:30:00Z", "2026-01-01T02:00:00Z"}, "30m"},
		{"hourly with gaps", nil, []string{"2026-01-01T00:00:00Z", "2026-01-01T03:00:00Z", "2026-01-01T05:00:00Z"}, "1h"},
		{"daily in UTC", nil, []string{"2026-01-01T05:00:00Z", "2026-01-02T05:00:00Z", "2026-01-04T05:00:00Z"}, "1d"},
		{"daily over spring-forward", bru, []string{"2026-03-27T05:00:00+01:00", "2026-03-28T05:00:00+01:00", "2026-03-30T05:00:00+02:00"}, "1d"},
		{"weekly", nil, []string{"2026-01-01T00:00:00Z", "2026-01-08T00:00:00Z", "2026-01-22T00:00:00Z"}, "1w"},
		{"monthly", nil, []string{"2026-01-01T00:00:00Z", "2026-02-01T00:00:00Z", "2026-05-01T00:00:00Z"}, "1mo"},
		{"quarterly", nil, []string{"2026-01-01T00:00:00Z", "2026-04-01T00:00:00Z", "2026-10-01T00:00:00Z"}, "3mo"},
		{"yearly", nil, []string{"2020-01-01T00:00:00Z", "2021-01-01T00:00:00Z", "2023-01-01T00:00:00Z"}, "1y"},
	}
	for _, c := range cases {
		g := NewStepGuess(c.loc)
		for _, s := range c.times {
			g.Observe(mustTime(t, s))
		}
		st, err := g.Step()
		if err != nil || st.String() != c.want {
			t.Errorf("%s: %v, %v; want %s", c.name, st, err, c.want)
		}
	}
	g := NewStepGuess(nil)
	g.Observe(mustTime(t, "2026-01-01T00:00:00Z"))
	g.Observe(mustTime(t, "2026-01-01T01:00:00Z"))
	if _, err := g.Step(); !errors.Is(err, ErrStepUnknown) {
		t.Errorf("two times: err = %v, want ErrStepUnknown", err)
	}
}
