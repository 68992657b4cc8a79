package web

import (
	"fmt"
	"math"
	"slices"
	"strconv"
	"strings"
	"time"

	"github.com/aftercast/aftercast/scoring"
)

// stateView is a drift state as the pages show it: always as words, with
// a symbol and a colour class beside them, never by colour alone.
type stateView struct {
	Name   string // the state as stored, "insufficient_data"
	Label  string // for people, "insufficient data"
	Symbol string // ▲ worse, ▼ better, ● as promised, ○ not judged
	Class  string // CSS class: degraded, improved, within, insufficient, none
}

// severity orders states for the overview: what needs a look first.
func severity(s scoring.State) int {
	switch s {
	case scoring.StateDegraded:
		return 0
	case scoring.StateInsufficientBaseline:
		return 1
	case scoring.StateInsufficientData:
		return 2
	case scoring.StateImproved:
		return 3
	case scoring.StateWithin:
		return 4
	}
	return 5
}

func viewState(s scoring.State) stateView {
	switch s {
	case scoring.StateDegraded:
		return stateView{Name: string(s), Label: "degraded", Symbol: "▲", Class: "degraded"}
	case scoring.StateImproved:
		return stateView{Name: string(s), Label: "improved", Symbol: "▼", Class: "improved"}
	case scoring.StateWithin:
		return stateView{Name: string(s), Label: "within", Symbol: "●", Class: "within"}
	case scoring.StateInsufficientData:
		return stateView{Name: string(s), Label: "insufficient data", Symbol: "○", Class: "insufficient"}
	case scoring.StateInsufficientBaseline:
		return stateView{Name: string(s), Label: "insufficient baseline", Symbol: "○", Class: "insufficient"}
	case "":
		return stateView{Label: "—", Class: "none"}
	}
	return stateView{Name: string(s), Label: strings.ReplaceAll(string(s), "_", " "), Symbol: "?", Class: "none"}
}

// noState is shown where a (series, model) has no drift state: why.
func noState(label string) stateView {
	return stateView{Label: label, Symbol: "○", Class: "none"}
}

// compactLeads writes sorted leads as ranges, "1-3, 7, 25-48", in the
// syntax the pairs filter accepts.
func compactLeads(leads []int) string {
	ls := slices.Clone(leads)
	slices.Sort(ls)
	ls = slices.Compact(ls)
	var b strings.Builder
	for i := 0; i < len(ls); {
		j := i
		for j+1 < len(ls) && ls[j+1] == ls[j]+1 {
			j++
		}
		if b.Len() > 0 {
			b.WriteString(", ")
		}
		if j == i {
			b.WriteString(strconv.Itoa(ls[i]))
		} else {
			fmt.Fprintf(&b, "%d-%d", ls[i], ls[j])
		}
		i = j + 1
	}
	return b.String()
}

// parseLeads reads "1-24,48" (spaces allowed) into leads within 1..horizon.
func parseLeads(s string, horizon int) ([]int, error) {
	var out []int
	for part := range strings.SplitSeq(s, ",") {
		part = strings.TrimSpace(part)
		if part == "" {
			continue
		}
		lo, hi, isRange := strings.Cut(part, "-")
		a, err := strconv.Atoi(strings.TrimSpace(lo))
		if err != nil {
			return nil, fmt.Errorf("%q is not a lead or a range like 1-24", part)
		}
		b := a
		if isRange {
			if b, err = strconv.Atoi(strings.TrimSpace(hi)); err != nil {
				return nil, fmt.Errorf("%q is not a lead or a range like 1-24", part)
			}
		}
		if a < 1 || b > horizon || a > b {
			return nil, fmt.Errorf("%q is outside 1-%d", part, horizon)
		}
		for h := a; h <= b; h++ {
			out = append(out, h)
		}
	}
	slices.Sort(out)
	return slices.Compact(out), nil
}

// timeLayouts are what the filter fields accept; those without a zone
// are read as UTC.
var timeLayouts = []string{time.RFC3339Nano, "2006-01-02T15:04:05", "2006-01-02T15:04", "2006-01-02 15:04:05", "2006-01-02 15:04", "2006-01-02"}

func parseTime(s string) (time.Time, error) {
	s = strings.TrimSpace(s)
	if s == "" {
		return time.Time{}, nil
	}
	for _, l := range timeLayouts {
		if t, err := time.ParseInLocation(l, s, time.UTC); err == nil {
			return t, nil
		}
	}
	return time.Time{}, fmt.Errorf("%q is not a time like 2025-03-01T00:00Z or 2025-03-01", s)
}

// stamp is a time as the pages print it: to the minute (to the second when
// it has seconds) in loc, with the offset.
// The zero stamp is no time at all (Valid false).
type stamp struct {
	Valid bool
	Text  string // 2025-03-01 00:00 +01:00
	ISO   string // RFC 3339, for <time datetime>
	Ago   string // "3 h ago", "in 2 d"; empty when not asked for
	For   string // "3 h": how long until now; empty when not asked for
}

func stampOf(t time.Time, loc *time.Location, now time.Time, ago bool) stamp {
	if t.IsZero() {
		return stamp{}
	}
	if loc == nil {
		loc = time.UTC
	}
	t = t.In(loc)
	layout := "2006-01-02 15:04"
	if t.Second() != 0 || t.Nanosecond() != 0 {
		layout = "2006-01-02 15:04:05"
	}
	s := stamp{Valid: true, Text: t.Format(layout) + " " + zoneText(t), ISO: t.Format(time.RFC3339)}
	if ago {
		s.Ago, s.For = relative(now.Sub(t)), duration(max(now.Sub(t), 0))
	}
	return s
}

func zoneText(t time.Time) string {
	_, off := t.Zone()
	if off == 0 {
		return "UTC"
	}
	return t.Format("-07:00")
}

// relative says how long ago d was ("in …" for a negative d).
func relative(d time.Duration) string {
	if d < 0 {
		return "in " + duration(-d)
	}
	return duration(d) + " ago"
}

// duration prints a non-negative span in its two largest units that
// matter: "under a minute", "5 min", "3 h 12 min", "2 d 4 h", "15 d".
func duration(d time.Duration) string {
	switch {
	case d < time.Minute:
		return "under a minute"
	case d < time.Hour:
		return fmt.Sprintf("%d min", int(d/time.Minute))
	case d < 24*time.Hour:
		h, m := int(d/time.Hour), int(d%time.Hour/time.Minute)
		if m > 0 && h < 10 {
			return fmt.Sprintf("%d h %d min", h, m)
		}
		return fmt.Sprintf("%d h", h)
	}
	days, h := int(d/(24*time.Hour)), int(d%(24*time.Hour)/time.Hour)
	if h > 0 && days < 10 {
		return fmt.Sprintf("%d d %d h", days, h)
	}
	return fmt.Sprintf("%d d", days)
}

// num formats a metric value for people: four significant digits (none
// dropped, so that a column lines up), a true minus sign, "—" when
// undefined.
func num(x float64) string {
	var s string
	switch a := math.Abs(x); {
	case math.IsNaN(x) || math.IsInf(x, 0):
		return "—"
	case a == 0:
		return "0"
	case a >= 1000:
		s = strconv.FormatFloat(x, 'f', 0, 64)
	default:
		s = strconv.FormatFloat(x, 'f', min(3-int(math.Floor(math.Log10(a))), 6), 64)
	}
	if strings.HasPrefix(s, "-") {
		s = "−" + s[1:]
	}
	return s
}

// numPtr is num of an optional value.
func numPtr(p *float64) string {
	if p == nil {
		return "—"
	}
	return num(*p)
}

func val(p *float64) float64 {
	if p == nil {
		return math.NaN()
	}
	return *p
}

// metricLabel names a drift metric for people.
func metricLabel(m scoring.Metric) string {
	switch m {
	case scoring.MetricMAE:
		return "MAE"
	case scoring.MetricME:
		return "ME"
	case "":
		return "—"
	}
	return string(m)
}

func leadLabel(h int) string {
	if h == 0 {
		return "series"
	}
	return "lead " + strconv.Itoa(h)
}
