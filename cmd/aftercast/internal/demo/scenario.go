package demo

import (
	"fmt"
	"math"
	"time"
)

// The scenario's fixed settings.
const (
	// Model is the name the forecaster's vectors and backtest carry.
	Model = "heatcurve-v2"
	// Zone is the utility's time zone: origins are at 05:00 local time.
	Zone = "Europe/Copenhagen"
	// Step, Horizon, Season and Unit are the settings of every series.
	Step    = "1h"
	Horizon = 48
	Season  = 24
	Unit    = "MW"
	// FirstDecisionLead and LastDecisionLead bound the decision leads: from
	// a 05:00 origin, leads 25–48 are 06:00 the next day to 05:00 the day
	// after, the gas day for which fuel is nominated.
	FirstDecisionLead = 25
	LastDecisionLead  = 48

	// OriginHour is the local hour of every origin: the last hourly meter
	// reading the forecaster may use.
	OriginHour = 5
	// BacktestOrigins is the number of daily backtest origins, the year
	// immediately before production.
	BacktestOrigins = 365
	// TrainingDays of hourly actuals before the first backtest origin
	// (and including it) give the MASE scale.
	TrainingDays = 28
	// ProductionDays is the number of production origins: from
	// FirstProductionDate in November through the coldest weeks (late
	// January) to the end of February.
	ProductionDays = 120
	// TailDays of actuals follow the last production origin, so that its
	// longest lead is scored too.
	TailDays = 2

	// MeterFaultDay is the production day from whose origin on the meter
	// of MeterFaultSeries reads MeterFactor times the true load.
	MeterFaultDay = 35
	MeterFactor   = 1.08
	// StaleFeedDay is the production day from which the forecaster of
	// StaleFeedSeries gets the previous day's temperature forecast.
	StaleFeedDay = 50

	// DefaultSeed is the seed the demo uses unless told otherwise: among
	// the first 200 seeds, one of the 20 that tell the whole story under
	// error scale auto, both faults caught as told and no chance
	// series-level alarm on a healthy substation (in 99 of the 200 a
	// healthy substation paged by chance within the 120 days). Under
	// absolute it shows what 103 of the 200 show: no healthy substation's
	// series level can be judged, the plain pooled backtest errors
	// following the season (K_eff < 30); in 195 of the 200 the plain band
	// pages or cannot judge 4 or more of the 6 (TestSeedSurvey;
	// TestDefaultSeedTellsTheStory keeps it so).
	DefaultSeed = 110
)

// FirstProductionDate is the local date of production day 1 (a Monday;
// nothing depends on the weekday). Every date of the scenario follows from
// it and ProductionOrigin: the backtest is the BacktestOrigins days before
// it, the training actuals the TrainingDays before those.
var FirstProductionDate = civilDate{2026, time.November, 2}

type civilDate struct {
	year  int
	month time.Month
	day   int
}

// Fault is what goes wrong with a substation during production.
type Fault int

// The faults of the scenario.
const (
	NoFault   Fault = iota
	MeterHigh       // a replaced meter reads 8% high from MeterFaultDay
	StaleFeed       // the temperature forecast arrives a day late from StaleFeedDay
)

func (f Fault) String() string {
	switch f {
	case NoFault:
		return "healthy"
	case MeterHigh:
		return fmt.Sprintf("meter replaced on day %d reads %.0f%% high", MeterFaultDay, (MeterFactor-1)*100)
	case StaleFeed:
		return fmt.Sprintf("temperature forecast a day stale from day %d", StaleFeedDay)
	}
	return fmt.Sprintf("Fault(%d)", int(f))
}

// profile says how the load of a kind of district follows the clock.
type profile int

const (
	residential profile = iota // morning and evening peaks, later on weekends
	mixed                      // homes and shops
	commercial                 // offices: working hours, low weekends
	campus                     // hospital and labs: nearly flat
)

// Substation is one substation of the invented utility: the settings of its
// series and the parameters of its load.
type Substation struct {
	Key   string  // series key
	Fault Fault   // what goes wrong in production
	Base  float64 // MW of hot water and network losses, all year
	K     float64 // MW per °C of heating degree (17 °C − effective outdoor temperature)
	// Noise is the standard deviation of the unexplained hourly load as a
	// share of the load the model explains: what moves it (occupancy,
	// windows and ventilation, wind and sun the model does not know) moves
	// a cold day's load by more MW than a mild day's.
	Noise float64
	// Process is the standard deviation (MW) of a process load the model
	// does not know, the same in every season.
	Process float64
	kind    profile
}

// substations is the invented utility. MeterFaultSeries and
// StaleFeedSeries name the two that fail. The unexplained load is 5–8% of
// the load; kalkbro's industrial laundry adds process heat the model does
// not know.
var substations = []Substation{
	{Key: "dh/aaskrog", Base: 1.6, K: 0.30, Noise: 0.065, kind: residential},
	{Key: "dh/birkedal", Base: 2.4, K: 0.44, Noise: 0.065, kind: residential},
	{Key: "dh/engtoft", Base: 1.9, K: 0.36, Noise: 0.060, kind: mixed},
	{Key: "dh/fjordhavn", Base: 1.2, K: 0.28, Noise: 0.070, kind: commercial},
	{Key: "dh/kalkbro", Base: 2.8, K: 0.50, Noise: 0.080, Process: 0.50, kind: mixed, Fault: MeterHigh},
	{Key: "dh/lyngmark", Base: 2.0, K: 0.48, Noise: 0.060, kind: residential, Fault: StaleFeed},
	{Key: "dh/moseled", Base: 3.1, K: 0.34, Noise: 0.050, kind: campus},
	{Key: "dh/stenvig", Base: 1.4, K: 0.26, Noise: 0.065, kind: residential},
}

// Series keys of the faulty substations.
const (
	MeterFaultSeries = "dh/kalkbro"
	StaleFeedSeries  = "dh/lyngmark"
)

// Params are the weather and forecast-error parameters of the generator.
// The demo uses [DefaultParams]; [GenerateWith] takes others, for
// experiments.
type Params struct {
	// Regional weather anomaly: AR(1) per hour, its 24-hour
	// autocorrelation and standard deviation (°C).
	AnomalyDay24, AnomalySD float64
	// Local anomaly of each substation's area.
	LocalDay24, LocalSD float64
	// Temperature forecast error standard deviation at lead L hours:
	// (ErrSD0 + ErrSDPerHour·L)·(1 + ErrWinter·c) (°C), where c is 0 in
	// late July and 1 in late January, following the annual cycle of the
	// target's date: winter temperature forecasts err more (stable,
	// inversion-prone air over cold or snow-covered ground), and while
	// buildings heat every degree of error costs Substation.K MW, so the
	// weather-driven load error grows in the cold.
	ErrSD0, ErrSDPerHour, ErrWinter float64
	// The forecast error is √w·G + √(1−w)·H: G persists across forecast
	// runs (same target, errors of successive runs agree), H is new each
	// run; Day24 values are their 24-hour autocorrelations along the
	// target time, and Regional the share of each that all substations
	// have in common.
	ErrPersistShare, ErrPersistDay24, ErrRunDay24, ErrRegional float64
	// BlendPerHour is λ: the forecaster corrects the weather forecast by
	// the outdoor temperature measured at the origin, the correction
	// fading as λ^L.
	BlendPerHour float64
	// LoadNoiseDay24 is the 24-hour autocorrelation of the load the model
	// does not explain, AR(1) per hour (each substation has its own
	// share of the load, Substation.Noise, and process load,
	// Substation.Process).
	LoadNoiseDay24 float64
	// EffAlpha is the weight of the newest hour in the effective
	// temperature that buildings respond to (an exponential average).
	EffAlpha float64
}

// DefaultParams are the parameters of the demo.
var DefaultParams = Params{
	AnomalyDay24: 0.70, AnomalySD: 3.0,
	LocalDay24: 0.10, LocalSD: 0.5,
	ErrSD0: 0.10, ErrSDPerHour: 0.028, ErrWinter: 0.5,
	ErrPersistShare: 0.5, ErrPersistDay24: 0.35, ErrRunDay24: 0.15, ErrRegional: 0.5,
	BlendPerHour:   0.95,
	LoadNoiseDay24: 0.02,
	EffAlpha:       0.2,
}

// Point is one hourly value of a series: a meter reading.
type Point struct {
	Series string
	Time   time.Time
	Value  float64
}

// BacktestRow is one pair of the backtest: the forecast the model would
// have made from Origin for Target, and the actual.
type BacktestRow struct {
	Series           string
	Origin, Target   time.Time
	Forecast, Actual float64
}

// Forecast is one forecast vector: Values[h-1] is the forecast for lead h.
type Forecast struct {
	Series string
	Origin time.Time
	Values []float64
}

// Day is one production day as the producer sees it at its origin: the
// meter readings that arrived since the previous origin, then the
// forecasts of this origin (none for the tail days after production).
type Day struct {
	N         int       // production day, from 1
	Origin    time.Time // 05:00 local
	Actuals   []Point   // times in (previous origin, Origin]
	Forecasts []Forecast
}

// Scenario is a generated demo.
type Scenario struct {
	Seed        uint64
	Params      Params
	Location    *time.Location
	Substations []Substation
	Training    []Point       // hourly, TrainingDays up to and including the first backtest origin
	Backtest    []BacktestRow // BacktestOrigins origins × Horizon leads per substation, by series then origin then lead
	Days        []Day         // ProductionDays days with forecasts, then TailDays with actuals only

	// truth is the true load per substation and hour, for tests.
	truth [][]float64
	t0    time.Time
}

// DecisionLeads are the decision leads of every series.
func DecisionLeads() []int32 {
	out := make([]int32, 0, LastDecisionLead-FirstDecisionLead+1)
	for h := FirstDecisionLead; h <= LastDecisionLead; h++ {
		out = append(out, int32(h))
	}
	return out
}

// Substations lists the substations of the scenario in key order.
func Substations() []Substation { return append([]Substation(nil), substations...) }

// ProductionOrigin is the origin of production day n (1-based; 0 is the
// last backtest origin, negative days are earlier ones) in loc.
func ProductionOrigin(loc *time.Location, n int) time.Time {
	d := FirstProductionDate
	return time.Date(d.year, d.month, d.day+n-1, OriginHour, 0, 0, 0, loc)
}

// Generate makes the scenario of a seed with the default parameters.
func Generate(seed uint64) (*Scenario, error) { return GenerateWith(seed, DefaultParams) }

// GenerateWith makes the scenario of a seed with the given parameters.
func GenerateWith(seed uint64, p Params) (*Scenario, error) {
	loc, err := time.LoadLocation(Zone)
	if err != nil {
		return nil, fmt.Errorf("time zone %s: %w", Zone, err)
	}
	g := newGenerator(seed, p, loc)
	return g.scenario(), nil
}

// hourly AR(1) coefficient whose 24-hour autocorrelation is r.
func perHour(r24 float64) float64 { return math.Pow(r24, 1.0/24) }
