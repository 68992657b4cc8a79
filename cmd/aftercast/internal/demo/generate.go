package demo

import (
	"math"
	"math/rand/v2"
	"time"
)

// The physics of the invented town.
const (
	heatingLimit = 17.0 // °C: above it buildings need no heat
	maxErrLead   = 80   // hours of forecast error drawn per weather run (a stale run reaches lead 48+25)
)

// generator holds the hourly series of one scenario while it is built.
// Hour i is t0 + i hours; every origin is on that grid, since origins are
// at 05:00 local time and the step is a fixed hour.
type generator struct {
	seed uint64
	p    Params
	loc  *time.Location
	t0   time.Time
	n    int // hours

	origins []int // hour index of origin g: backtest, production, tail
	hour    []float64
	weekend []bool
	doy     []float64
	cold    []float64 // 0 in late July, 1 in late January: the annual cycle

	temp, teff [][]float64 // per substation: outdoor temperature, effective temperature
	load       [][]float64 // true load
	meter      [][]float64 // what the meter reports
	persist    [][]float64 // G: the forecast error shared by successive runs
	run        [][][]float64
	meterFrom  int // hour from which the faulty meter reads high
}

// rng returns the random stream of one component, so that each component
// is the same whatever else changes.
func (g *generator) rng(component, index uint64) *rand.Rand {
	return rand.New(rand.NewPCG(g.seed, component<<32|index))
}

// Random stream components.
const (
	streamAnomaly uint64 = iota + 1
	streamLocal
	streamPersistRegional
	streamPersistLocal
	streamRunRegional
	streamRunLocal
	streamLoad
	streamProcess
)

// ar1 fills x with a stationary AR(1) series of standard deviation sd whose
// 24-hour autocorrelation is r24.
func ar1(r *rand.Rand, x []float64, r24, sd float64) {
	phi := perHour(r24)
	innov := sd * math.Sqrt(1-phi*phi)
	prev := sd * r.NormFloat64()
	for i := range x {
		if i > 0 {
			prev = phi*prev + innov*r.NormFloat64()
		}
		x[i] = prev
	}
}

func newGenerator(seed uint64, p Params, loc *time.Location) *generator {
	g := &generator{seed: seed, p: p, loc: loc}
	first := 1 - BacktestOrigins // production day of the first backtest origin
	g.t0 = ProductionOrigin(loc, first-TrainingDays)
	for d := first; d <= ProductionDays+TailDays; d++ {
		g.origins = append(g.origins, g.index(ProductionOrigin(loc, d)))
	}
	g.n = g.origins[len(g.origins)-1] + 1
	g.meterFrom = g.index(ProductionOrigin(loc, MeterFaultDay))

	g.hour, g.weekend, g.doy, g.cold = make([]float64, g.n), make([]bool, g.n), make([]float64, g.n), make([]float64, g.n)
	for i := range g.n {
		lt := g.at(i).In(loc)
		g.hour[i] = float64(lt.Hour())
		g.weekend[i] = lt.Weekday() == time.Saturday || lt.Weekday() == time.Sunday
		g.doy[i] = float64(lt.YearDay())
		g.cold[i] = (1 - season(g.doy[i])) / 2
	}
	g.weather()
	g.loads()
	g.errors()
	return g
}

func (g *generator) at(i int) time.Time { return g.t0.Add(time.Duration(i) * time.Hour) }

func (g *generator) index(t time.Time) int { return int(t.Sub(g.t0) / time.Hour) }

// weather makes each substation's outdoor temperature: an annual cycle
// (coldest in late January), a daily cycle stronger in summer, a regional
// weather anomaly that persists for days, and a small local one.
func (g *generator) weather() {
	regional := make([]float64, g.n)
	ar1(g.rng(streamAnomaly, 0), regional, g.p.AnomalyDay24, g.p.AnomalySD)
	local := make([]float64, g.n)
	for s := range substations {
		ar1(g.rng(streamLocal, uint64(s)), local, g.p.LocalDay24, g.p.LocalSD)
		t, e := make([]float64, g.n), make([]float64, g.n)
		for i := range g.n {
			c := season(g.doy[i])
			amp := 2.6 + 1.4*c
			t[i] = 7.8 + 7.5*c + amp*math.Cos(2*math.Pi*(g.hour[i]-15)/24) + regional[i] + local[i]
			if i == 0 {
				e[i] = t[i]
			} else {
				e[i] = e[i-1] + g.p.EffAlpha*(t[i]-e[i-1])
			}
		}
		g.temp, g.teff = append(g.temp, t), append(g.teff, e)
	}
}

// season is the annual cycle at a day of the year: −1 in late January,
// +1 in late July.
func season(doy float64) float64 { return -math.Cos(2 * math.Pi * (doy - 25) / 365.25) }

// loads makes the true load of each substation and its meter readings:
// the load model at the true effective temperature, times one plus the
// unexplained share (so the unexplained MW grow with the load, as they do
// in a real network: a cold day's load swings by more MW than a mild
// day's), plus any process load.
func (g *generator) loads() {
	process := make([]float64, g.n)
	for s, ss := range substations {
		noise := make([]float64, g.n)
		ar1(g.rng(streamLoad, uint64(s)), noise, g.p.LoadNoiseDay24, ss.Noise)
		clear(process)
		if ss.Process > 0 {
			ar1(g.rng(streamProcess, uint64(s)), process, g.p.LoadNoiseDay24, ss.Process)
		}
		y, m := make([]float64, g.n), make([]float64, g.n)
		for i := range g.n {
			y[i] = g.model(s, i, g.teff[s][i])*(1+noise[i]) + process[i]
			m[i] = y[i]
			if ss.Fault == MeterHigh && i >= g.meterFrom {
				m[i] *= MeterFactor
			}
		}
		g.load, g.meter = append(g.load, y), append(g.meter, m)
	}
}

// model is the load of substation s at hour i for an effective outdoor
// temperature: the hot-water base and the heating term, each following
// the district's clock. The forecaster knows it exactly; what it does not
// know is the weather and the unexplained load.
func (g *generator) model(s, i int, teff float64) float64 {
	ss := &substations[s]
	water, heat := clock(ss.kind, g.hour[i], g.weekend[i])
	return ss.Base*water + ss.K*math.Max(0, heatingLimit-teff)*heat
}

// expectedModel is the load model's expectation when the effective
// temperature is uncertain, normal around teff with standard deviation sd:
// the heating degrees max(0, limit − T) are convex in T, so plugging in
// the forecast temperature alone would over-forecast whenever the
// temperature is near the heating limit.
func (g *generator) expectedModel(s, i int, teff, sd float64) float64 {
	if sd <= 0 {
		return g.model(s, i, teff)
	}
	ss := &substations[s]
	water, heat := clock(ss.kind, g.hour[i], g.weekend[i])
	z := (heatingLimit - teff) / sd
	degrees := sd*math.Exp(-z*z/2)/math.Sqrt(2*math.Pi) + (heatingLimit-teff)*0.5*math.Erfc(-z/math.Sqrt2)
	return ss.Base*water + ss.K*degrees*heat
}

// clock returns the hot-water and heating multipliers of a district kind
// at a local hour.
func clock(k profile, h float64, weekend bool) (water, heat float64) {
	morning := 7.0
	if weekend {
		morning = 9
	}
	switch k {
	case residential:
		water = 1 + 0.5*bump(h, morning, 1.5) + 0.35*bump(h, 19, 2) - 0.35*bump(h, 3, 3)
		heat = 1 + 0.15*bump(h, morning-0.5, 1.5) - 0.12*bump(h, 2, 2.5)
	case mixed:
		water = 1 + 0.3*bump(h, morning, 1.5) + 0.25*bump(h, 12, 3) + 0.2*bump(h, 19, 2) - 0.3*bump(h, 3, 3)
		heat = 1 + 0.1*bump(h, morning, 2) - 0.08*bump(h, 2, 3)
	case commercial:
		if weekend {
			return 0.75, 0.85
		}
		open := plateau(h, 7.5, 17.5)
		water = 0.8 + 0.45*open
		heat = 0.85 + 0.35*plateau(h, 6.5, 17)
	case campus:
		water = 1 + 0.15*bump(h, 10, 4)
		heat = 1
	}
	return water, heat
}

// bump is a bell of width w hours around hour c, on the 24-hour circle.
func bump(h, c, w float64) float64 {
	d := math.Mod(h-c+36, 24) - 12
	return math.Exp(-0.5 * d * d / (w * w))
}

// plateau is about 1 between hours a and b, 0 outside, with soft edges.
func plateau(h, a, b float64) float64 {
	return 1/(1+math.Exp(-(h-a)/0.7)) - 1/(1+math.Exp(-(h-b)/0.7))
}

// errors draws the temperature forecast error processes: per substation a
// component G along target time that successive weather runs share, and
// per run a component H over its leads; each part regional (common to all
// substations) and local.
func (g *generator) errors() {
	c := g.p.ErrRegional
	a, b := math.Sqrt(c), math.Sqrt(1-c)
	regional := make([]float64, g.n)
	ar1(g.rng(streamPersistRegional, 0), regional, g.p.ErrPersistDay24, 1)
	for s := range substations {
		local := make([]float64, g.n)
		ar1(g.rng(streamPersistLocal, uint64(s)), local, g.p.ErrPersistDay24, 1)
		for i := range local {
			local[i] = a*regional[i] + b*local[i]
		}
		g.persist = append(g.persist, local)
	}
	runs := len(g.origins)
	g.run = make([][][]float64, len(substations))
	rr := make([]float64, maxErrLead)
	rl := make([]float64, maxErrLead)
	for s := range substations {
		g.run[s] = make([][]float64, runs)
	}
	for r := range runs {
		ar1(g.rng(streamRunRegional, uint64(r)), rr, g.p.ErrRunDay24, 1)
		for s := range substations {
			ar1(g.rng(streamRunLocal, uint64(r)<<8|uint64(s)), rl, g.p.ErrRunDay24, 1)
			h := make([]float64, maxErrLead)
			for l := range h {
				h[l] = a*rr[l] + b*rl[l]
			}
			g.run[s][r] = h
		}
	}
}

// errSD is the standard deviation (°C) of the temperature forecast for
// hour i at a lead of so many hours: it grows with the lead, and is
// larger in winter (Params.ErrWinter).
func (g *generator) errSD(lead, i int) float64 {
	return (g.p.ErrSD0 + g.p.ErrSDPerHour*float64(lead)) * (1 + g.p.ErrWinter*g.cold[i])
}

// weatherForecast is the temperature forecast for hour i of substation s
// from the weather run made at origin r.
func (g *generator) weatherForecast(s, r, i int) float64 {
	lead := i - g.origins[r]
	w := g.p.ErrPersistShare
	u := math.Sqrt(w)*g.persist[s][i] + math.Sqrt(1-w)*g.run[s][r][lead]
	return g.temp[s][i] + g.errSD(lead, i)*u
}

// forecast is the forecaster's vector for substation s from origin o using
// the weather run of origin r (o, or o−1 when the feed is stale): the
// weather forecast corrected by the temperature measured at the origin,
// averaged into an effective temperature, put through the load model, plus
// the load residual seen at the origin, fading.
func (g *generator) forecast(s, o, r int) []float64 {
	i0 := g.origins[o]
	lambda := g.p.BlendPerHour
	correction := g.temp[s][i0] - g.weatherForecast(s, r, i0)
	te := g.teff[s][i0]
	out := make([]float64, Horizon)
	lf := 1.0
	for h := 1; h <= Horizon; h++ {
		i := i0 + h
		lf *= lambda
		te += g.p.EffAlpha * (g.weatherForecast(s, r, i) + lf*correction - te)
		sd := g.errSD(h, i) * (1 - lf)
		out[h-1] = g.expectedModel(s, i, te, sd)
	}
	return out
}

func (g *generator) scenario() *Scenario {
	sc := &Scenario{Seed: g.seed, Params: g.p, Location: g.loc, Substations: Substations(), truth: g.load, t0: g.t0}
	first := g.origins[0]
	for s, ss := range substations {
		for i := 0; i <= first; i++ {
			sc.Training = append(sc.Training, Point{Series: ss.Key, Time: g.at(i), Value: g.meter[s][i]})
		}
	}
	for s, ss := range substations {
		for o := range BacktestOrigins {
			v := g.forecast(s, o, o)
			i0 := g.origins[o]
			for h := 1; h <= Horizon; h++ {
				sc.Backtest = append(sc.Backtest, BacktestRow{Series: ss.Key, Origin: g.at(i0), Target: g.at(i0 + h),
					Forecast: v[h-1], Actual: g.meter[s][i0+h]})
			}
		}
	}
	for n := 1; n <= ProductionDays+TailDays; n++ {
		o := BacktestOrigins - 1 + n
		i0 := g.origins[o]
		day := Day{N: n, Origin: g.at(i0)}
		for s, ss := range substations {
			for i := g.origins[o-1] + 1; i <= i0; i++ {
				day.Actuals = append(day.Actuals, Point{Series: ss.Key, Time: g.at(i), Value: g.meter[s][i]})
			}
		}
		if n <= ProductionDays {
			for s, ss := range substations {
				r := o
				if ss.Fault == StaleFeed && n >= StaleFeedDay {
					r = o - 1
				}
				day.Forecasts = append(day.Forecasts, Forecast{Series: ss.Key, Origin: day.Origin, Values: g.forecast(s, o, r)})
			}
		}
		sc.Days = append(sc.Days, day)
	}
	return sc
}

// TrueLoad is the load substation s really drew at t (what a correct meter
// reads); NaN outside the scenario's hours. For tests.
func (sc *Scenario) TrueLoad(s int, t time.Time) float64 {
	i := int(t.Sub(sc.t0) / time.Hour)
	if i < 0 || i >= len(sc.truth[s]) || !sc.t0.Add(time.Duration(i)*time.Hour).Equal(t) {
		return math.NaN()
	}
	return sc.truth[s][i]
}
