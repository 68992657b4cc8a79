package scoring

import (
	"errors"
	"testing"
	"time"
)

func mustTime(t *testing.T, s string) time.Time {
	t.Helper()
	v, err := time.Parse(time.RFC3339, s)
	if err != nil {
		t.Fatal(err)
	}
	return v
}

func mustLoc(t *testing.T, name string) *time.Location {
	t.Helper()
	loc, err := time.LoadLocation(name)
	if err != nil {
		t.Fatal(err)
	}
	return loc
}

func TestParseStep(t *testing.T) {
	t.Parallel()
	good := []string{"15m", "30m", "1h", "24h", "90s", "1h30m", "1d", "7d", "1w", "2w", "1mo", "3mo", "1y"}
	for _, s := range good {
		st, err := ParseStep(s, nil)
		if err != nil {
			t.Errorf("ParseStep(%q): %v", s, err)
			continue
		}
		if st.String() != s {
			t.Errorf("ParseStep(%q).String() = %q", s, st.String())
		}
	}
	bad := []string{"", "0m", "-1h", "1.5d", "0d", "d", "mo", "1m3", "500ms", "1x", "01d", "+1d", "1 h"}
	for _, s := range bad {
		if _, err := ParseStep(s, nil); err == nil {
			t.Errorf("ParseStep(%q): want error", s)
		}
	}
}

func TestLeadFixed(t *testing.T) {
	t.Parallel()
	st := MustParseStep("30m", nil)
	o := mustTime(t, "2026-03-29T00:30:00Z")
	cases := []struct {
		target  string
		lead    int
		wantErr error
	}{
		{"2026-03-29T01:00:00Z", 1, nil},
		{"2026-03-29T02:30:00+01:00", 2, nil}, // any offset: the same instant as 01:30Z
		{"2026-03-31T00:30:00Z", 96, nil},
		{"2026-03-29T01:10:00Z", 0, ErrOffGrid},
		{"2026-03-29T00:30:00Z", 0, ErrLeadTooLow},
		{"2026-03-28T23:30:00Z", 0, ErrLeadTooLow},
	}
	for _, c := range cases {
		h, err := st.Lead(o, mustTime(t, c.target))
		if c.wantErr != nil {
			if !errors.Is(err, c.wantErr) {
				t.Errorf("Lead(%s): err = %v, want %v", c.target, err, c.wantErr)
			}
			continue
		}
		if err != nil || h != c.lead {
			t.Errorf("Lead(%s) = %d, %v; want %d", c.target, h, err, c.lead)
		}
	}
}

// Europe/Brussels leaves UTC+1 for UTC+2 at 2026-03-29 02:00 local and goes
// back at 2026-10-25 03:00 local (EU rule: last Sunday of March/October).
func TestLeadCalendarDaysAcrossDST(t *testing.T) {
	t.Parallel()
	bru := mustLoc(t, "Europe/Brussels")
	day := MustParseStep("1d", bru)
	cases := []struct {
		name           string
		origin, target string
		lead           int
		hours          float64
	}{
		{"spring forward: a 23-hour day", "2026-03-28T05:00:00+01:00", "2026-03-29T05:00:00+02:00", 1, 23},
		{"fall back: a 25-hour day", "2026-10-24T05:00:00+02:00", "2026-10-25T05:00:00+01:00", 1, 25},
		{"a week over spring", "2026-03-25T05:00:00+01:00", "2026-04-01T05:00:00+02:00", 7, 7*24 - 1},
		{"a week over autumn", "2026-10-21T05:00:00+02:00", "2026-10-28T05:00:00+01:00", 7, 7*24 + 1},
	}
	for _, c := range cases {
		o, tg := mustTime(t, c.origin), mustTime(t, c.target)
		if got := tg.Sub(o).Hours(); got != c.hours {
			t.Fatalf("%s: fixture spans %v hours, want %v", c.name, got, c.hours)
		}
		h, err := day.Lead(o, tg)
		if err != nil || h != c.lead {
			t.Errorf("%s: Lead = %d, %v; want %d", c.name, h, err, c.lead)
		}
		if got := day.Add(o, c.lead); !got.Equal(tg) {
			t.Errorf("%s: Add(origin, %d) = %s, want %s", c.name, c.lead, got, tg)
		}
		// The same instants are off a fixed 24h grid.
		if _, err := MustParseStep("24h", bru).Lead(o, tg); !errors.Is(err, ErrOffGrid) {
			t.Errorf("%s: 24h step: err = %v, want ErrOffGrid", c.name, err)
		}
	}
	// 24 hours after 05:00 on the eve of spring-forward is 06:00 local: off the daily grid.
	o := mustTime(t, "2026-03-28T05:00:00+01:00")
	if _, err := day.Lead(o, o.Add(24*time.Hour)); !errors.Is(err, ErrOffGrid) {
		t.Errorf("origin+24h across spring-forward: err = %v, want ErrOffGrid", err)
	}
	// A 2-day step: lead counts steps, odd day counts are off grid.
	two := MustParseStep("2d", bru)
	if h, err := two.Lead(o, mustTime(t, "2026-04-01T05:00:00+02:00")); err != nil || h != 2 {
		t.Errorf("2d step over 4 days: %d, %v", h, err)
	}
	if _, err := two.Lead(o, mustTime(t, "2026-03-29T05:00:00+02:00")); !errors.Is(err, ErrOffGrid) {
		t.Errorf("2d step over 1 day: err = %v, want ErrOffGrid", err)
	}
}

func TestLeadMonthsAndYears(t *testing.T) {
	t.Parallel()
	mo := MustParseStep("1mo", nil)
	cases := []struct {
		origin, target string
		lead           int
		offGrid        bool
	}{
		{"2026-01-01T00:00:00Z", "2026-02-01T00:00:00Z", 1, false},
		{"2026-01-01T00:00:00Z", "2027-01-01T00:00:00Z", 12, false},
		{"2026-01-31T00:00:00Z", "2026-02-28T00:00:00Z", 1, false}, // clamped to month end
		{"2026-01-31T00:00:00Z", "2026-03-31T00:00:00Z", 2, false}, // counted from the origin, no drift
		{"2026-01-31T00:00:00Z", "2026-03-03T00:00:00Z", 0, true},  // Go's AddDate overflow is not our grid
		{"2026-01-01T00:00:00Z", "2026-02-02T00:00:00Z", 0, true},
		{"2026-01-01T00:00:00Z", "2026-02-01T01:00:00Z", 0, true},
	}
	for _, c := range cases {
		h, err := mo.Lead(mustTime(t, c.origin), mustTime(t, c.target))
		if c.offGrid {
			if !errors.Is(err, ErrOffGrid) {
				t.Errorf("%s→%s: err = %v, want ErrOffGrid", c.origin, c.target, err)
			}
			continue
		}
		if err != nil || h != c.lead {
			t.Errorf("%s→%s: %d, %v; want %d", c.origin, c.target, h, err, c.lead)
		}
	}
	q := MustParseStep("3mo", nil)
	if _, err := q.Lead(mustTime(t, "2026-01-01T00:00:00Z"), mustTime(t, "2026-03-01T00:00:00Z")); !errors.Is(err, ErrOffGrid) {
		t.Errorf("3mo step over 2 months: err = %v, want ErrOffGrid", err)
	}
	y := MustParseStep("1y", nil)
	if h, err := y.Lead(mustTime(t, "2024-02-29T00:00:00Z"), mustTime(t, "2025-02-28T00:00:00Z")); err != nil || h != 1 {
		t.Errorf("1y from a leap day: %d, %v", h, err)
	}
}

func TestCheckLead(t *testing.T) {
	t.Parallel()
	if err := CheckLead(1, 48); err != nil {
		t.Error(err)
	}
	if err := CheckLead(48, 48); err != nil {
		t.Error(err)
	}
	if err := CheckLead(0, 48); !errors.Is(err, ErrLeadTooLow) {
		t.Errorf("lead 0: %v", err)
	}
	if err := CheckLead(49, 48); !errors.Is(err, ErrBeyondH) {
		t.Errorf("lead 49: %v", err)
	}
}

func FuzzParseStep(f *testing.F) {
	for _, s := range []string{"15m", "1h", "24h", "1d", "2w", "1mo", "1y", "0d", "1.5h", "-1h", "9999999999d"} {
		f.Add(s)
	}
	origin := time.Date(2026, 3, 28, 5, 0, 0, 0, time.UTC)
	f.Fuzz(func(t *testing.T, s string) {
		st, err := ParseStep(s, time.UTC)
		if err != nil {
			return
		}
		if st.String() != s {
			t.Fatalf("String() = %q, want %q", st.String(), s)
		}
		// Whatever parses must round-trip origin → target → lead.
		for _, k := range []int{1, 2, 7} {
			tg := st.Add(origin, k)
			h, err := st.Lead(origin, tg)
			if err != nil || h != k {
				t.Fatalf("step %q: Lead(Add(origin, %d)) = %d, %v", s, k, h, err)
			}
		}
	})
}

func TestOnGrid(t *testing.T) {
	t.Parallel()
	cph, _ := time.LoadLocation("Europe/Copenhagen")
	kol, _ := time.LoadLocation("Asia/Kolkata")
	at := func(s string) time.Time {
		t, err := time.Parse(time.RFC3339, s)
		if err != nil {
			panic(err)
		}
		return t
	}
	for _, c := range []struct {
		step   string
		loc    *time.Location
		anchor string // "" for the default
		t      string
		on     bool
	}{
		{"1h", nil, "", "2026-03-01T05:00:00Z", true},
		{"1h", nil, "", "2026-03-01T05:30:00Z", false},
		{"1h", nil, "", "1900-01-01T00:00:00Z", true},
		{"15m", nil, "", "2026-03-01T05:45:00Z", true},
		{"15m", nil, "", "2026-03-01T05:45:01Z", false},
		{"1h", kol, "", "2026-03-01T05:00:00+05:30", true}, // the local hour, :30 UTC
		{"1h", kol, "", "2026-03-01T05:00:00Z", false},
		{"24h", nil, "", "2026-03-01T00:00:00Z", true},
		{"24h", nil, "", "2026-03-01T05:00:00Z", false},
		{"1d", cph, "", "2026-03-29T00:00:00+01:00", true}, // the spring-forward day
		{"1d", cph, "", "2026-03-30T00:00:00+02:00", true},
		{"1d", cph, "", "2026-03-30T00:00:00Z", false},
		{"1d", cph, "2000-01-01T05:00:00+01:00", "2026-07-01T05:00:00+02:00", true}, // an anchor at 05:00 local
		{"1d", cph, "2000-01-01T05:00:00+01:00", "2026-07-01T00:00:00+02:00", false},
		{"2d", nil, "", "2000-01-03T00:00:00Z", true},
		{"2d", nil, "", "2000-01-04T00:00:00Z", false},
		{"1w", nil, "", "2026-03-02T00:00:00Z", true}, // a Monday
		{"1w", nil, "", "2026-03-05T00:00:00Z", false},
		{"1mo", cph, "", "2026-11-01T00:00:00+01:00", true},
		{"1mo", cph, "", "2026-11-02T00:00:00+01:00", false},
		{"1y", nil, "", "2027-01-01T00:00:00Z", true},
		{"1y", nil, "", "2027-02-01T00:00:00Z", false},
		{"3mo", nil, "", "2026-04-01T00:00:00Z", true},
		{"3mo", nil, "", "2026-05-01T00:00:00Z", false},
	} {
		st := MustParseStep(c.step, c.loc)
		if c.anchor != "" {
			st = st.WithAnchor(at(c.anchor))
		}
		tt := at(c.t)
		if got := st.OnGrid(tt); got != c.on {
			t.Errorf("%s in %v, anchor %v: OnGrid(%s) = %v, want %v", c.step, st.Location(), st.Anchor(), c.t, got, c.on)
		}
		before, after := st.GridNear(tt)
		if !st.OnGrid(before) || !st.OnGrid(after) || before.After(tt) || !after.After(tt) || !st.Add(before, 1).Equal(after) {
			t.Errorf("%s: GridNear(%s) = %s, %s: not the grid points around it", c.step, c.t, before, after)
		}
		if c.on && !before.Equal(tt) {
			t.Errorf("%s: GridNear(%s) starts at %s, want the time itself", c.step, c.t, before)
		}
	}
}
