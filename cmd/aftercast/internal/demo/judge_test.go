package demo

import (
	"flag"
	"fmt"
	"slices"
	"strings"
	"testing"
	"time"

	"github.com/aftercast/aftercast/scoring"
)

// The service judges drift; these tests judge the scenario offline with
// the very functions of package scoring the service's evaluator calls
// (scoring.NewReference prepares the baseline, scoring.Replay feeds the
// detectors one evaluation per production origin in origin order, per lead
// and pooled over the decision leads, method.md §4–5), so that the story
// the demo tells can be checked without a database, and seeds surveyed
// quickly. The demo itself reads the states the service judged.

// offlineEvent is one state change found offline.
type offlineEvent struct {
	lead   int // 0: series level
	day    int // production day of the origin
	from   scoring.State
	to     scoring.State
	metric scoring.Metric
}

// offlineResult is what the offline replay finds for one substation.
type offlineResult struct {
	series   string
	final    scoring.State // series level at the end
	events   []offlineEvent
	keff     map[int]float64 // K_eff(|e|) per lead, 0 = pooled
	b        map[int]float64 // the fitted exponent b̂ per lead, 0 = pooled
	unusable []int           // leads (0 = pooled) whose baseline is not usable
}

func (r offlineResult) seriesAlarms() []offlineEvent {
	var out []offlineEvent
	for _, e := range r.events {
		if e.lead == 0 && e.to == scoring.StateDegraded {
			out = append(out, e)
		}
	}
	return out
}

// leadAlarms lists the leads that entered degraded on metric ("" = any).
func (r offlineResult) leadAlarms(metric scoring.Metric) []int {
	var leads []int
	for _, e := range r.events {
		if e.lead > 0 && e.to == scoring.StateDegraded && (metric == "" || e.metric == metric) && !slices.Contains(leads, e.lead) {
			leads = append(leads, e.lead)
		}
	}
	slices.Sort(leads)
	return leads
}

// judgeOffline judges every substation of sc under an error scale mode:
// its backtest as the baseline, its production days replayed in origin
// order.
func judgeOffline(sc *Scenario, mode scoring.ScaleMode) ([]offlineResult, error) {
	dec := make([]int, 0, 24)
	for _, h := range DecisionLeads() {
		dec = append(dec, int(h))
	}
	// Actuals as the service will know them: the production meter
	// readings (every forecast reached it before the actuals it scores).
	type key struct {
		series string
		unix   int64
	}
	actual := map[key]float64{}
	for _, d := range sc.Days {
		for _, a := range d.Actuals {
			actual[key{a.Series, a.Time.Unix()}] = a.Value
		}
	}
	var out []offlineResult
	for s, ss := range sc.Substations {
		res := offlineResult{series: ss.Key, keff: map[int]float64{}, b: map[int]float64{}}
		var backtest []scoring.Pair
		for _, r := range sc.Backtest[s*BacktestOrigins*Horizon : (s+1)*BacktestOrigins*Horizon] {
			backtest = append(backtest, scoring.Pair{Origin: r.Origin, Lead: int(r.Target.Sub(r.Origin) / time.Hour),
				Actual: r.Actual, Forecast: r.Forecast})
		}
		ref := scoring.NewReference(backtest, scoring.ReferenceSpec{Horizon: Horizon, Decision: dec, Window: scoring.DriftWindow,
			MASEScale: scoring.NoScale, Mode: mode})
		for h := 0; h <= Horizon; h++ {
			l := ref.Lead(h)
			if l == nil {
				return nil, fmt.Errorf("%s: no backtest for lead %d (0 = pooled)", ss.Key, h)
			}
			res.keff[h] = l.Verdict.KEff
			res.b[h] = l.Scale.B
			if !l.Verdict.Usable {
				res.unusable = append(res.unusable, h)
			}
		}
		var pairs []scoring.Pair
		for _, d := range sc.Days[:ProductionDays] {
			f := d.Forecasts[s]
			for h := 1; h <= Horizon; h++ {
				t := f.Origin.Add(timeHours(h))
				y, ok := actual[key{ss.Key, t.Unix()}]
				if !ok {
					return nil, fmt.Errorf("no actual for %s at %v", ss.Key, t)
				}
				pairs = append(pairs, scoring.Pair{Origin: f.Origin, Lead: h, Actual: y, Forecast: f.Values[h-1]})
			}
		}
		rep, err := scoring.Replay(ref, scoring.Checkpoint{}, pairs, scoring.ReplayOptions{})
		if err != nil {
			return nil, fmt.Errorf("%s: %w", ss.Key, err)
		}
		for _, c := range rep.History {
			day, ok := sc.DayOf(c.Origin)
			if !ok {
				return nil, fmt.Errorf("%s: transition at %v, which is no production origin", ss.Key, c.Origin)
			}
			res.events = append(res.events, offlineEvent{c.Lead, day, c.From, c.To, c.Metric})
		}
		if rep.Status[0].Lead != 0 {
			return nil, fmt.Errorf("%s: the replay's first status is of lead %d, not the series", ss.Key, rep.Status[0].Lead)
		}
		res.final = rep.Status[0].State()
		out = append(out, res)
	}
	return out, nil
}

// storyProblems says how the outcome differs from the story the demo
// tells: no healthy substation ever raises a series-level alarm; the meter
// one ends degraded, its first series-level alarm after the fault and on
// ME, with ME events at nearly every lead (a lead already degraded by a
// chance MAE excursion shows no new event); the stale-feed one ends
// degraded, its first series-level alarm after the fault, with more
// alarmed leads among 25–48 than among 1–24. Empty when the story holds.
func storyProblems(rs []offlineResult) []string {
	var out []string
	for i, r := range rs {
		alarms := r.seriesAlarms()
		switch substations[i].Fault {
		case NoFault:
			for _, e := range alarms {
				out = append(out, fmt.Sprintf("%s: healthy but series-level %s (%s) on day %d", r.series, e.to, e.metric, e.day))
			}
		case MeterHigh, StaleFeed:
			day, metric := MeterFaultDay, scoring.MetricME
			if substations[i].Fault == StaleFeed {
				day, metric = StaleFeedDay, ""
			}
			switch {
			case r.final != scoring.StateDegraded:
				out = append(out, fmt.Sprintf("%s: %v, but ends %s", r.series, substations[i].Fault, r.final))
			case alarms[0].day < day:
				out = append(out, fmt.Sprintf("%s: series-level alarm on day %d, before the fault", r.series, alarms[0].day))
			case metric != "" && alarms[0].metric != metric:
				out = append(out, fmt.Sprintf("%s: first series-level alarm on %s, not %s", r.series, alarms[0].metric, metric))
			}
			if metric == scoring.MetricME {
				if n := len(r.leadAlarms(scoring.MetricME)); n < 40 {
					out = append(out, fmt.Sprintf("%s: ME alarms at only %d of %d leads", r.series, n, Horizon))
				}
				continue
			}
			short, long := 0, 0
			for _, h := range r.leadAlarms("") {
				if h < FirstDecisionLead {
					short++
				} else {
					long++
				}
			}
			if long <= short {
				out = append(out, fmt.Sprintf("%s: %d short and %d long leads alarmed", r.series, short, long))
			}
		}
		if len(r.unusable) > 0 {
			out = append(out, fmt.Sprintf("%s: unusable baseline at leads %v", r.series, r.unusable))
		}
	}
	return out
}

// healthyAlarmed counts the healthy substations that raised a
// series-level alarm.
func healthyAlarmed(rs []offlineResult) int {
	n := 0
	for i, r := range rs {
		if substations[i].Fault == NoFault && len(r.seriesAlarms()) > 0 {
			n++
		}
	}
	return n
}

func healthyCount() int {
	n := 0
	for _, s := range substations {
		if s.Fault == NoFault {
			n++
		}
	}
	return n
}

// plainFailed counts the healthy substations whose series level the plain
// band of error scale absolute fails in the winter: they raised a
// series-level alarm, or their pooled backtest quantity, whose errors
// follow the season, leaves K_eff < 30 and the series level unjudged
// (insufficient_baseline).
func plainFailed(rs []offlineResult) (alarmed, unjudged int) {
	for i, r := range rs {
		switch {
		case substations[i].Fault != NoFault:
		case len(r.seriesAlarms()) > 0:
			alarmed++
		case slices.Contains(r.unusable, 0):
			unjudged++
		}
	}
	return alarmed, unjudged
}

// absoluteProblems says how the outcome under error scale absolute
// differs from what the demo says of it: the plain band, which averages
// the backtest's summer and winter, fails most healthy substations at the
// series level in the winter (they page, or cannot be judged at all).
func absoluteProblems(rs []offlineResult) []string {
	alarmed, unjudged := plainFailed(rs)
	if of := healthyCount(); 2*(alarmed+unjudged) <= of {
		return []string{fmt.Sprintf("error scale absolute: of %d healthy substations only %d raised a series-level alarm and %d were not judged", of, alarmed, unjudged)}
	}
	return nil
}

func logResults(t *testing.T, mode scoring.ScaleMode, rs []offlineResult) {
	t.Helper()
	for _, r := range rs {
		t.Logf("%-8s %-13s final %-9s series alarms %v, ME-alarmed leads %v, MAE-alarmed leads %v; b̂ pooled %.2f, K_eff pooled %.0f, lead 48 %.0f",
			mode, r.series, r.final, r.seriesAlarms(), scoring.FormatLeads(r.leadAlarms(scoring.MetricME)), scoring.FormatLeads(r.leadAlarms(scoring.MetricMAE)),
			r.b[0], r.keff[0], r.keff[48])
	}
}

// The default seed tells the demo's story under error scale auto, and
// under absolute the plain band fails most healthy substations at the
// series level.
func TestDefaultSeedTellsTheStory(t *testing.T) {
	t.Parallel()
	sc, err := Generate(DefaultSeed)
	if err != nil {
		t.Fatal(err)
	}
	rs, err := judgeOffline(sc, scoring.ScaleAuto)
	if err != nil {
		t.Fatal(err)
	}
	logResults(t, scoring.ScaleAuto, rs)
	if p := storyProblems(rs); len(p) > 0 {
		t.Errorf("seed %d does not tell the demo's story under error scale auto:\n%s", DefaultSeed, strings.Join(p, "\n"))
	}
	for _, r := range rs {
		if r.b[0] <= 0 {
			t.Errorf("%s: b̂ pooled %v: the backtest's errors do not grow with the level", r.series, r.b[0])
		}
	}
	abs, err := judgeOffline(sc, scoring.ScaleAbsolute)
	if err != nil {
		t.Fatal(err)
	}
	logResults(t, scoring.ScaleAbsolute, abs)
	if p := absoluteProblems(abs); len(p) > 0 {
		t.Errorf("seed %d: %s", DefaultSeed, strings.Join(p, "\n"))
	}
}

var survey = flag.Int("survey", 0, "judge this many seeds offline and report which tell the story")

// TestSeedSurvey is the seed search behind DefaultSeed, run on demand:
//
//	go test ./cmd/aftercast/internal/demo -run TestSeedSurvey -v -survey 20
//
// Per seed it judges the scenario under error scale auto (the story:
// both faults caught, no healthy substation alarmed) and absolute (how
// many healthy substations page).
func TestSeedSurvey(t *testing.T) {
	t.Parallel()
	if *survey == 0 {
		t.Skip("run with -survey N")
	}
	healthyAlarm, story, both, unjudgedSum := 0, 0, 0, 0
	var autoPages, absPages, absHist []int
	absHist = make([]int, healthyCount()+1)
	for seed := uint64(1); seed <= uint64(*survey); seed++ {
		sc, err := Generate(seed)
		if err != nil {
			t.Fatal(err)
		}
		rs, err := judgeOffline(sc, scoring.ScaleAuto)
		if err != nil {
			t.Fatal(err)
		}
		abs, err := judgeOffline(sc, scoring.ScaleAbsolute)
		if err != nil {
			t.Fatal(err)
		}
		p := storyProblems(rs)
		alarmed := healthyAlarmed(rs)
		absAlarmed, unjudged := plainFailed(abs)
		autoPages, absPages = append(autoPages, alarmed), append(absPages, absAlarmed)
		absHist[absAlarmed+unjudged]++
		unjudgedSum += unjudged
		if alarmed > 0 {
			healthyAlarm++
		}
		if len(p) == 0 {
			story++
			if len(absoluteProblems(abs)) == 0 {
				both++
			}
		}
		first := func(r offlineResult) string {
			if a := r.seriesAlarms(); len(a) > 0 {
				return fmt.Sprintf("day %d (%s)", a[0].day, a[0].metric)
			}
			return "none"
		}
		leadsAuto, leadsAbs := 0, 0
		for i := range abs {
			if substations[i].Fault == NoFault {
				leadsAuto += len(rs[i].leadAlarms(""))
				leadsAbs += len(abs[i].leadAlarms(""))
			}
		}
		t.Logf("seed %3d: auto: healthy alarmed %d, their leads alarmed %d, meter fault first alarm %s, stale feed first alarm %s, %d problems %v; "+
			"absolute: healthy alarmed %d, not judged %d, their leads alarmed %d, meter %s, stale %s",
			seed, alarmed, leadsAuto, first(rs[4]), first(rs[5]), len(p), p, absAlarmed, unjudged, leadsAbs, first(abs[4]), first(abs[5]))
	}
	sum := func(xs []int) int {
		n := 0
		for _, x := range xs {
			n += x
		}
		return n
	}
	t.Logf("auto: %d of %d seeds had a healthy substation raise a series-level alarm (%d of %d healthy series); %d tell the whole story",
		healthyAlarm, *survey, sum(autoPages), *survey*healthyCount(), story)
	t.Logf("absolute: of %d healthy series %d raised a series-level alarm and %d were not judged at the series level (pooled K_eff < 30); "+
		"seeds by healthy substations alarmed or not judged (0..%d): %v; %d seeds tell the story under auto and fail most healthy ones under absolute",
		*survey*healthyCount(), sum(absPages), unjudgedSum, healthyCount(), absHist, both)
}

func timeHours(h int) time.Duration { return time.Duration(h) * time.Hour }
