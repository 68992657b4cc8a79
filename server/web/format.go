package web

import (
	"fmt"
	"math"
	"slices"
	"strconv"
	"strings"
	"time"

	"github.com/aftercast/aftercast/scoring"
	"github.com/aftercast/aftercast/server/store"
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

// onsetView says when a state began, in data time: the origin at which the
// replay entered it (method.md §5), how many judged origins ago that was
// and what entered it. The wall clock appears only as when aftercast
// noticed.
type onsetView struct {
	Origin     stamp  // the onset origin; not Valid for the state the production period started in
	OriginText string // "05:00 UTC origin of 14 Oct"
	Lasted     string // ", 12 origins ago"
	Entered    string // "on ME: −3.1 below the alarm band's lower end −2.4"; empty without a metric
	Noticed    stamp  // when aftercast announced the state (wall clock, UTC, to the minute)
}

// Text is the onset as one line, for a chart's tooltip: "since the 05:00
// UTC origin of 14 Oct, 12 origins ago; on MAE: 2.3 above the alarm limit
// 1.9".
func (v onsetView) Text() string {
	s := "since the start of production"
	if v.Origin.Valid {
		s = "since the " + v.OriginText + v.Lasted
	}
	if v.Entered != "" {
		s += "; " + v.Entered
	}
	return s
}

func onsetOf(st store.DriftStatus, loc *time.Location, now time.Time) onsetView {
	if loc == nil {
		loc = time.UTC
	}
	// Wall-clock times are in UTC, as the server clock in the page
	// header, and to the minute.
	v := onsetView{Origin: stampOf(st.Onset, loc, now, false), Noticed: stampOf(st.Noticed.Truncate(time.Minute), time.UTC, now, true)}
	if v.Origin.Valid {
		v.OriginText = originText(st.Onset, loc, now)
		// OriginsSinceOnset counts the evaluations after the onset's own
		// (scoring.LeadState.EvaluationsSinceOnset: Evals − OnsetEval), so
		// it is how many judged origins ago the onset was.
		switch k := st.Snapshot.OriginsSinceOnset; k {
		case 0:
			v.Lasted = ", the latest origin judged"
		case 1:
			v.Lasted = ", 1 origin ago"
		default:
			v.Lasted = fmt.Sprintf(", %d origins ago", k)
		}
	}
	sn := st.Snapshot
	if sn.EnteredMetric != "" && sn.EnteredValue != nil && sn.EnteredLimit != nil {
		v.Entered = enteredText(st.State, sn.EnteredMetric, *sn.EnteredValue, *sn.EnteredLimit)
		// A level-scaled quantity (method.md §4a) was judged against the
		// backtest's limit at the forecast levels of that window.
		if sn.LevelScale != nil {
			v.Entered += " " + thatWindowsLevels
		}
	}
	return v
}

// thatWindowsLevels qualifies a limit a past window was judged against
// when errors scale with level: the limit is the backtest's at the
// forecast levels of that window, not a fixed number.
const thatWindowsLevels = "at that window's levels"

// bhatText prints a fitted exponent b̂ as the command line does: two
// significant digits.
func bhatText(b float64) string { return strconv.FormatFloat(b, 'g', 2, 64) }

// levelWords says, beside an expectation adjusted to the window's levels
// (method.md §4a), what it was adjusted from: "backtest average 4.100;
// errors scale with level, b̂ = 0.93". backtest is the plain backtest MAE
// (nil: not known); b the quantity's b̂ (0: not known).
func levelWords(backtest *float64, b float64) string {
	s := "errors scale with level"
	if b > 0 {
		s += ", b̂ = " + bhatText(b)
	}
	if backtest != nil {
		s = "backtest average " + num(*backtest) + "; " + s
	}
	return s
}

// maeAgainst words a window MAE beside what the backtest expects of it:
// "4.300 (expected 4.100, 95% band 3.200 – 5.100, alarm limit 5.900)";
// when the expectation is adjusted to the window's levels, "4.300
// (expected 4.900 at these levels, 95% band …, alarm limit …; backtest
// average 4.100; errors scale with level, b̂ = 0.93)". b is the
// quantity's b̂ (0: not known).
func maeAgainst(sn store.Snapshot, b float64) string {
	s := fmt.Sprintf("%s (expected %s", numPtr(sn.MAE), numPtr(sn.MAEExpected))
	if sn.LevelScale != nil {
		s += " at these levels"
	}
	s += fmt.Sprintf(", 95%% band %s, alarm limit %s", rangeOf(sn.MAEBandLower, sn.MAEBandUpper), numPtr(sn.MAEAlarmLimit))
	if sn.LevelScale != nil {
		s += "; " + levelWords(sn.BacktestMAE, b)
	}
	return s + ")"
}

// errorScaleText words a series' error scale mode (method.md §4a) and,
// when a baseline is active, the b̂ of its pooled decision-lead quantity
// (pooled nil: none): a short value for the settings line and a longer
// explanation for the baseline card (empty without a baseline). unit is
// the series' unit, which φ is in.
func errorScaleText(mode scoring.ScaleMode, pooled *scoring.LeadReference, unit string) (short, long string) {
	if mode == scoring.ScaleAbsolute {
		return "absolute", "absolute: errors are judged as they are, whatever the level; expectations and bands are the backtest's plain ones"
	}
	short = "auto"
	if pooled == nil {
		return short, ""
	}
	if b := pooled.Scale.B; b > 0 {
		return short + " (errors scale with level, b̂ = " + bhatText(b) + ")",
			fmt.Sprintf("auto: errors scale with level, b̂ = %s on the decision leads (φ = %s). Errors are judged divided by max(|forecast|, φ)^b̂; "+
				"the expectation, 95%% band and alarm limit beside a live window are the backtest's at that window's forecast levels, "+
				"and the window MAE and the backtest average stay plain averages. "+
				"Scaling corrects an error scale that follows the level; it does not correct errors that change for other reasons.",
				bhatText(b), strings.TrimSpace(num(pooled.Scale.Phi)+" "+unit))
	}
	return short + " (b̂ = 0)", "auto: b̂ = 0 on the decision leads (the level hardly varies, or the errors do not grow with it), " +
		"so errors are judged as they are and the expectations are the backtest's plain ones"
}

// originText names an origin in its series' zone as people say it: "05:00
// UTC origin of 14 Oct", with the year when it is not the current one.
func originText(t time.Time, loc *time.Location, now time.Time) string {
	t = t.In(loc)
	clock := "15:04"
	if t.Second() != 0 || t.Nanosecond() != 0 {
		clock = "15:04:05"
	}
	day := "2 Jan"
	if t.Year() != now.In(loc).Year() {
		day = "2 Jan 2006"
	}
	return t.Format(clock) + " " + t.Format("MST") + " origin of " + t.Format(day)
}

// enteredText says what entered a state: the metric, its window value and
// the limit it crossed, "on ME: −3.1 below the alarm band's lower end −2.4".
func enteredText(s scoring.State, m scoring.Metric, value, limit float64) string {
	return "on " + metricLabel(m) + ": " + num(value) + " " + relation(s, m, value, limit) + " " + num(limit)
}

// relation says how the value that entered state s stands to the limit it
// crossed. Degraded is entered beyond an alarm level (method.md §4); the
// other states at a bound of the 95% band, which bound the stored records
// do not always say (an event re-judged names the state announced before,
// not the one the replay left), so neither does the text.
func relation(s scoring.State, m scoring.Metric, value, limit float64) string {
	switch {
	case s == scoring.StateDegraded && m == scoring.MetricMAE:
		return "above the alarm limit"
	case s == scoring.StateDegraded && value < limit:
		return "below the alarm band's lower end"
	case s == scoring.StateDegraded:
		return "above the alarm band's upper end"
	case m == scoring.MetricME || s == scoring.StateWithin:
		// Only leaving degraded names ME: back within its 95% band.
		return "back within the 95% bound"
	case s == scoring.StateImproved:
		return "below the 95% bound"
	}
	return "against"
}

// causeLabel words an event's cause for people.
func causeLabel(c scoring.Cause) (label, title string) {
	switch c {
	case scoring.CauseData:
		return "new data", "origins judged for the first time"
	case scoring.CauseRevision:
		return "revision", "origins judged before, judged again on revised or filled-in data"
	case scoring.CauseBaseline:
		return "new baseline", "the production period judged again against a new baseline"
	case "":
		return "—", ""
	}
	return string(c), ""
}

// chanceView is the fleet's expected chance pages (method.md §5): what a
// page is worth before anyone trusts one.
type chanceView struct {
	Rows      int    // (series, model) that can page: forecasts and a baseline not judged insufficient
	PerWeek   string // "0.4"
	Every     string // "one every 3.8 weeks"; empty at one a week or more
	RunLength int    // scoring.ChanceRunLength
}

// chanceOf sums scoring.ChancePagesPerWeek over the origin intervals of the
// rows that can page.
func chanceOf(intervals []time.Duration) chanceView {
	v := chanceView{RunLength: scoring.ChanceRunLength}
	var sum float64
	for _, d := range intervals {
		if p := scoring.ChancePagesPerWeek(d); p > 0 {
			sum += p
			v.Rows++
		}
	}
	if sum == 0 {
		return v
	}
	v.PerWeek = sig2(sum)
	if weeks := 1 / sum; weeks > 1 {
		if years := weeks * 7 / 365.25; years >= 1 {
			v.Every = "one every " + sig2(years) + " years"
		} else {
			v.Every = "one every " + sig2(weeks) + " weeks"
		}
	}
	return v
}

// sig2 prints a positive x to two significant digits (whole numbers from
// 10 on), without trailing zeros: 0.015, 0.4, 1.5, 12.
func sig2(x float64) string {
	d := max(0, 1-int(math.Floor(math.Log10(x))))
	s := strconv.FormatFloat(x, 'f', d, 64)
	if strings.Contains(s, ".") {
		s = strings.TrimRight(strings.TrimRight(s, "0"), ".")
	}
	return s
}
