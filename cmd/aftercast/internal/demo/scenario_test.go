package demo

import (
	"math"
	"reflect"
	"regexp"
	"testing"
	"time"
)

func generate(t *testing.T, seed uint64) *Scenario {
	t.Helper()
	sc, err := Generate(seed)
	if err != nil {
		t.Fatal(err)
	}
	return sc
}

func TestGenerateIsDeterministic(t *testing.T) {
	t.Parallel()
	a, b, c := generate(t, DefaultSeed), generate(t, DefaultSeed), generate(t, DefaultSeed+1)
	if !reflect.DeepEqual(a.Training, b.Training) || !reflect.DeepEqual(a.Backtest, b.Backtest) || !reflect.DeepEqual(a.Days, b.Days) {
		t.Error("two scenarios of the same seed differ")
	}
	if reflect.DeepEqual(a.Backtest, c.Backtest) || reflect.DeepEqual(a.Days, c.Days) {
		t.Error("the scenarios of two seeds are equal")
	}
}

func TestSeriesAndShape(t *testing.T) {
	t.Parallel()
	sc := generate(t, DefaultSeed)
	key := regexp.MustCompile(`^[A-Za-z0-9_.:/-]{1,200}$`)
	if len(sc.Substations) != 8 {
		t.Fatalf("%d substations, want 8", len(sc.Substations))
	}
	faults := map[Fault]string{}
	for _, s := range sc.Substations {
		if !key.MatchString(s.Key) {
			t.Errorf("series key %q is not a valid key", s.Key)
		}
		if s.Fault != NoFault {
			faults[s.Fault] = s.Key
		}
	}
	if faults[MeterHigh] != MeterFaultSeries || faults[StaleFeed] != StaleFeedSeries || len(faults) != 2 {
		t.Errorf("faults %v, want the meter on %s and the stale feed on %s", faults, MeterFaultSeries, StaleFeedSeries)
	}
	if got, want := len(sc.Backtest), 8*BacktestOrigins*Horizon; got != want {
		t.Errorf("%d backtest rows, want %d", got, want)
	}
	for i, r := range sc.Backtest {
		h := i%Horizon + 1
		if !r.Target.Equal(r.Origin.Add(time.Duration(h) * time.Hour)) {
			t.Fatalf("backtest row %d: target %v is not origin %v + %d h", i, r.Target, r.Origin, h)
		}
		if math.IsNaN(r.Forecast) || math.IsNaN(r.Actual) || r.Actual <= 0 {
			t.Fatalf("backtest row %d: forecast %v, actual %v", i, r.Forecast, r.Actual)
		}
	}
	// Training actuals: hourly, 28 days up to and including the first
	// backtest origin (a day may have 23 or 25 hours).
	first := sc.Backtest[0].Origin
	per := len(sc.Training) / len(sc.Substations)
	if want := int(first.Sub(ProductionOrigin(sc.Location, 1-BacktestOrigins-TrainingDays))/time.Hour) + 1; per != want {
		t.Errorf("%d training actuals per series, want %d", per, want)
	}
	if last := sc.Training[per-1].Time; !last.Equal(first) {
		t.Errorf("training actuals end at %v, want the first backtest origin %v", last, first)
	}
	if got := len(sc.Days); got != ProductionDays+TailDays {
		t.Errorf("%d days, want %d", got, ProductionDays+TailDays)
	}
	for _, d := range sc.Days {
		want := 0
		if d.N <= ProductionDays {
			want = len(sc.Substations)
		}
		if len(d.Forecasts) != want {
			t.Errorf("day %d: %d forecast vectors, want %d", d.N, len(d.Forecasts), want)
		}
		for _, f := range d.Forecasts {
			if len(f.Values) != Horizon || !f.Origin.Equal(d.Origin) {
				t.Errorf("day %d: vector of %s has %d values from %v", d.N, f.Series, len(f.Values), f.Origin)
			}
		}
	}
}

// Origins are at 05:00 local time every day, so across a DST change the
// gap between two origins is 23 or 25 hours, still on the hourly grid;
// from any origin, lead 25 is 06:00 the next day except across the change
// (the fixed 1h step counts hours, not clock times).
func TestOriginsAreAtFiveLocal(t *testing.T) {
	t.Parallel()
	sc := generate(t, DefaultSeed)
	var origins []time.Time
	for i := 0; i < len(sc.Backtest); i += Horizon {
		if sc.Backtest[i].Series != sc.Substations[0].Key {
			break
		}
		origins = append(origins, sc.Backtest[i].Origin)
	}
	for _, d := range sc.Days {
		origins = append(origins, d.Origin)
	}
	gaps := map[time.Duration][]string{}
	for i, o := range origins {
		lt := o.In(sc.Location)
		if lt.Hour() != OriginHour || lt.Minute() != 0 || lt.Second() != 0 {
			t.Fatalf("origin %d is %v, not %02d:00 local", i, lt, OriginHour)
		}
		if i == 0 {
			continue
		}
		gap := o.Sub(origins[i-1])
		gaps[gap] = append(gaps[gap], lt.Format("2006-01-02"))
		// Lead 25 from the previous origin is an hour after this one:
		// 06:00, or 07:00 / 05:00 when summer time began / ended between.
		prev := origins[i-1].In(sc.Location)
		want := 6 + int((24*time.Hour-gap)/time.Hour)
		if next := prev.Add(FirstDecisionLead * time.Hour).In(sc.Location); next.Hour() != want {
			t.Errorf("lead %d from %v is %v, want %02d:00", FirstDecisionLead, prev, next, want)
		}
	}
	// The gaps follow the zone's changes of offset: summer time begins
	// (23 hours) and ends (25) once each in the year of backtest origins.
	want := map[time.Duration][]string{}
	for i := 1; i < len(origins); i++ {
		_, before := origins[i-1].In(sc.Location).Zone()
		lt := origins[i].In(sc.Location)
		if _, after := lt.Zone(); after != before {
			gap := 24*time.Hour - time.Duration(after-before)*time.Second
			want[gap] = append(want[gap], lt.Format("2006-01-02"))
		}
	}
	for gap, days := range want {
		if !reflect.DeepEqual(gaps[gap], days) {
			t.Errorf("gaps of %v before the origins of %v, want %v", gap, gaps[gap], days)
		}
	}
	if len(gaps) != 3 || len(want[23*time.Hour]) == 0 || len(want[25*time.Hour]) == 0 {
		t.Errorf("gaps between origins: %v, want 23, 24 and 25 hours", gaps)
	}
	if n, ok := sc.DayOf(origins[len(origins)-1]); !ok || n != ProductionDays+TailDays {
		t.Errorf("DayOf(last origin) = %d, %v", n, ok)
	}
	if _, ok := sc.DayOf(origins[5].Add(time.Hour)); ok {
		t.Error("DayOf takes 06:00 for an origin")
	}
}

// The meter reads true until the origin of MeterFaultDay and MeterFactor
// times the truth from then on, on its substation only.
func TestMeterFaultStartsOnItsDay(t *testing.T) {
	t.Parallel()
	sc := generate(t, DefaultSeed)
	from := ProductionOrigin(sc.Location, MeterFaultDay)
	for _, d := range sc.Days {
		for _, a := range d.Actuals {
			s := index(sc, a.Series)
			want := sc.TrueLoad(s, a.Time)
			if a.Series == MeterFaultSeries && !a.Time.Before(from) {
				want *= MeterFactor
			}
			if math.Abs(a.Value-want) > 1e-12*want {
				t.Fatalf("day %d: %s at %v reads %v, want %v", d.N, a.Series, a.Time, a.Value, want)
			}
		}
	}
	for _, r := range sc.Backtest {
		if y := sc.TrueLoad(index(sc, r.Series), r.Target); r.Actual != y {
			t.Fatalf("backtest actual of %s at %v is %v, want the true %v", r.Series, r.Target, r.Actual, y)
		}
	}
}

// The stale substation's forecasts equal what a fresh weather forecast
// gives until StaleFeedDay and differ from then on; the others never do.
// From then on its errors grow mostly at the long leads: the forecaster
// corrects the weather forecast by the temperature measured at the origin,
// and that correction fades over the first day.
func TestStaleFeedStartsOnItsDay(t *testing.T) {
	t.Parallel()
	loc, err := time.LoadLocation(Zone)
	if err != nil {
		t.Fatal(err)
	}
	g := newGenerator(DefaultSeed, DefaultParams, loc)
	sc := g.scenario()
	var fresh, stale [2]float64 // sum |e| at leads 1–6 and 25–48, stale days only
	for _, d := range sc.Days[:ProductionDays] {
		o := BacktestOrigins - 1 + d.N
		for s, f := range d.Forecasts {
			want := g.forecast(s, o, o)
			isStale := sc.Substations[s].Fault == StaleFeed && d.N >= StaleFeedDay
			if reflect.DeepEqual(f.Values, want) == isStale {
				t.Fatalf("day %d, %s: forecast from a stale feed %v, want %v", d.N, f.Series, !isStale, isStale)
			}
			if !isStale {
				continue
			}
			for h := 1; h <= Horizon; h++ {
				y := sc.TrueLoad(s, f.Origin.Add(time.Duration(h)*time.Hour))
				k := 0
				switch {
				case h <= 6:
				case h >= FirstDecisionLead:
					k = 1
				default:
					continue
				}
				fresh[k] += math.Abs(y - want[h-1])
				stale[k] += math.Abs(y - f.Values[h-1])
			}
		}
	}
	short, long := stale[0]/fresh[0], stale[1]/fresh[1]
	t.Logf("stale feed, days %d–%d: MAE ×%.2f at leads 1–6, ×%.2f at leads 25–48 of what a fresh feed gives", StaleFeedDay, ProductionDays, short, long)
	if long < 1.3 || short > 1.15 {
		t.Errorf("stale feed: MAE ×%.2f at leads 1–6 and ×%.2f at leads 25–48; want most growth at the long leads", short, long)
	}
}

// Forecast errors grow with lead in the backtest of every substation.
func TestErrorsGrowWithLead(t *testing.T) {
	t.Parallel()
	sc := generate(t, DefaultSeed)
	for s, ss := range sc.Substations {
		var mae [Horizon + 1]float64
		for o := range BacktestOrigins {
			for h := 1; h <= Horizon; h++ {
				r := sc.Backtest[(s*BacktestOrigins+o)*Horizon+h-1]
				mae[h] += math.Abs(r.Actual-r.Forecast) / BacktestOrigins
			}
		}
		if !(mae[1] < mae[24] && mae[24] < mae[48]) {
			t.Errorf("%s: backtest MAE at leads 1, 24, 48 = %.3f, %.3f, %.3f; want growing", ss.Key, mae[1], mae[24], mae[48])
		}
	}
}

func index(sc *Scenario, key string) int {
	for i, s := range sc.Substations {
		if s.Key == key {
			return i
		}
	}
	panic("no substation " + key)
}

// Forecast errors grow with the heat load, as real heat-demand errors do:
// in the backtest of every substation the decision-lead MAE of the winter
// origins (December to February) is well above that of the summer ones
// (June to August), and so is the load.
func TestErrorsGrowWithTheLoad(t *testing.T) {
	t.Parallel()
	sc := generate(t, DefaultSeed)
	for s, ss := range sc.Substations {
		var mae, load, n [2]float64 // summer, winter
		for o := range BacktestOrigins {
			k := 0
			switch sc.Backtest[(s*BacktestOrigins+o)*Horizon].Origin.In(sc.Location).Month() {
			case time.June, time.July, time.August:
			case time.December, time.January, time.February:
				k = 1
			default:
				continue
			}
			for h := FirstDecisionLead; h <= LastDecisionLead; h++ {
				r := sc.Backtest[(s*BacktestOrigins+o)*Horizon+h-1]
				mae[k] += math.Abs(r.Actual - r.Forecast)
				load[k] += r.Actual
				n[k]++
			}
		}
		m, l := mae[1]/n[1]/(mae[0]/n[0]), load[1]/n[1]/(load[0]/n[0])
		t.Logf("%-13s winter/summer: load ×%.2f, MAE ×%.2f", ss.Key, l, m)
		if m < 1.5 {
			t.Errorf("%s: winter MAE ×%.2f of summer's (load ×%.2f); want errors that grow with the load", ss.Key, m, l)
		}
	}
}
