package web

import (
	"fmt"
	"math"
	"strconv"
	"strings"
	"time"

	"github.com/aftercast/aftercast/scoring"
)

// px is an SVG coordinate; it prints with one decimal, never in exponent
// form, whatever the template does with it.
type px float64

func (p px) String() string { return strconv.FormatFloat(float64(p), 'f', 1, 64) }

// seg is a straight line.
type seg struct{ X1, Y1, X2, Y2 px }

// label is a piece of text in a chart.
type label struct {
	X, Y   px
	Text   string
	Anchor string // start, middle, end
	Class  string // tick, axis, strip
	Rotate bool   // read bottom to top (a y-axis title)
}

// strip is a shaded range of the x axis, such as the decision leads.
type strip struct {
	X, Y, W, H px
	Title      string
}

// marker is a symbol at a data point; its shape as well as its colour
// tells the state.
type marker struct {
	D, Class, Title string
}

// rule is a vertical mark at an x position, such as a drift event.
type rule struct {
	X, Y1, Y2 px
	Class     string
	Title     string
}

// legendItem is one key entry under a chart; Kind selects the swatch:
// "line" (a stroke with the class's dash pattern), "fill" or "marker".
type legendItem struct {
	Kind, Class, Label string
	D                  string // the marker's path, for Kind "marker"
}

// chart is an SVG chart ready to print: every coordinate is computed here,
// the template only lays the elements out. The path lists hold one "d"
// per unbroken segment (a gap in the data breaks a line).
type chart struct {
	ID, Title, Desc string
	W, H            px
	PlotX, PlotY    px
	PlotW, PlotH    px
	Grid, Axes      []seg
	Labels          []label
	Strips          []strip
	Band, Alarm     []string
	Expected, Live  []string
	Actual          []string
	Forecast        []string
	Rules           []rule
	Markers         []marker
	Legend          []legendItem
}

// frame is the plot area inside a chart's margins.
type frame struct {
	w, h                     float64
	left, top, right, bottom float64
}

func (f frame) plotW() float64 { return f.w - f.left - f.right }
func (f frame) plotH() float64 { return f.h - f.top - f.bottom }

// linear maps [d0, d1] onto [r0, r1].
type linear struct{ d0, d1, r0, r1 float64 }

func (s linear) at(v float64) float64 {
	if s.d1 == s.d0 {
		return (s.r0 + s.r1) / 2
	}
	return s.r0 + (v-s.d0)/(s.d1-s.d0)*(s.r1-s.r0)
}

func newChart(id, title, desc string, f frame) *chart {
	return &chart{ID: id, Title: title, Desc: desc, W: px(f.w), H: px(f.h),
		PlotX: px(f.left), PlotY: px(f.top), PlotW: px(f.plotW()), PlotH: px(f.plotH())}
}

// niceStep is a round step (1, 2, 2.5 or 5 times a power of ten) that cuts
// span into at most about n parts.
func niceStep(span float64, n int) float64 {
	if !(span > 0) {
		return 1
	}
	raw := span / float64(n)
	mag := math.Pow(10, math.Floor(math.Log10(raw)))
	for _, m := range []float64{1, 2, 2.5, 5} {
		if m*mag >= raw {
			return m * mag
		}
	}
	return 10 * mag
}

// decimals is how many decimals print every multiple of step exactly.
func decimals(step float64) int {
	for d := 0; d < 8; d++ {
		x := step * math.Pow(10, float64(d))
		if math.Abs(x-math.Round(x)) < 1e-9*math.Max(1, x) {
			return d
		}
	}
	return 8
}

// yAxis draws the value axis from 0 to a round top at or above hi, with
// its grid and labels, and returns the scale.
func (c *chart) yAxis(f frame, hi float64, title string) linear {
	if !(hi > 0) {
		hi = 1
	}
	step := niceStep(hi, 5)
	top := math.Ceil(hi/step-1e-9) * step
	y := linear{0, top, f.top + f.plotH(), f.top}
	dec := decimals(step)
	for v := 0.0; v <= top+step/2; v += step {
		py := px(y.at(v))
		c.Grid = append(c.Grid, seg{px(f.left), py, px(f.left + f.plotW()), py})
		c.Labels = append(c.Labels, label{X: px(f.left - 8), Y: py + 4, Text: strconv.FormatFloat(v, 'f', dec, 64), Anchor: "end", Class: "tick"})
	}
	c.Axes = append(c.Axes, seg{px(f.left), px(f.top), px(f.left), px(f.top + f.plotH())})
	cy := f.top + f.plotH()/2
	c.Labels = append(c.Labels, label{X: 16, Y: px(cy), Text: title, Anchor: "middle", Class: "axis", Rotate: true})
	return y
}

// xAxisLine draws the x axis line and its title.
func (c *chart) xAxisLine(f frame, title string) {
	base := px(f.top + f.plotH())
	c.Axes = append(c.Axes, seg{px(f.left), base, px(f.left + f.plotW()), base})
	c.Labels = append(c.Labels, label{X: px(f.left + f.plotW()/2), Y: px(f.h - 8), Text: title, Anchor: "middle", Class: "axis"})
}

func (c *chart) xTick(f frame, x float64, text string) {
	base := f.top + f.plotH()
	c.Axes = append(c.Axes, seg{px(x), px(base), px(x), px(base + 5)})
	c.Labels = append(c.Labels, label{X: px(x), Y: px(base + 19), Text: text, Anchor: "middle", Class: "tick"})
}

func defined(x float64) bool { return !math.IsNaN(x) && !math.IsInf(x, 0) }

// polylines turns points into path data, one path per run of defined
// values; a run of one point becomes a short level stroke of half-width
// lone so that it stays visible.
func polylines(xs, ys []float64, lone float64) []string {
	var out []string
	var b strings.Builder
	run := 0
	flush := func(i int) {
		if run == 1 {
			x, y := xs[i-1], ys[i-1]
			b.Reset()
			fmt.Fprintf(&b, "M%s %sL%s %s", px(x-lone), px(y), px(x+lone), px(y))
		}
		if run > 0 {
			out = append(out, b.String())
		}
		b.Reset()
		run = 0
	}
	for i := range xs {
		if !defined(ys[i]) {
			flush(i)
			continue
		}
		if run == 0 {
			fmt.Fprintf(&b, "M%s %s", px(xs[i]), px(ys[i]))
		} else {
			fmt.Fprintf(&b, "L%s %s", px(xs[i]), px(ys[i]))
		}
		run++
	}
	flush(len(xs))
	return out
}

// areas turns a lower and an upper bound into closed path data, one per
// run where both are defined; a lone point gets half-width lone.
func areas(xs, lo, hi []float64, lone float64) []string {
	var out []string
	start := -1
	emit := func(end int) { // [start, end)
		if start < 0 {
			return
		}
		var b strings.Builder
		if end-start == 1 {
			x := xs[start]
			fmt.Fprintf(&b, "M%s %sL%s %sL%s %sL%s %sZ", px(x-lone), px(hi[start]), px(x+lone), px(hi[start]),
				px(x+lone), px(lo[start]), px(x-lone), px(lo[start]))
		} else {
			for i := start; i < end; i++ {
				cmd := "L"
				if i == start {
					cmd = "M"
				}
				fmt.Fprintf(&b, "%s%s %s", cmd, px(xs[i]), px(hi[i]))
			}
			for i := end - 1; i >= start; i-- {
				fmt.Fprintf(&b, "L%s %s", px(xs[i]), px(lo[i]))
			}
			b.WriteString("Z")
		}
		out = append(out, b.String())
		start = -1
	}
	for i := range xs {
		if defined(lo[i]) && defined(hi[i]) {
			if start < 0 {
				start = i
			}
			continue
		}
		emit(i)
	}
	emit(len(xs))
	return out
}

// markerPath is the symbol of a state at (x, y): a triangle up for
// degraded, down for improved, a dot for within, a ring otherwise (the
// ring's hollowness comes from its class).
func markerPath(s scoring.State, x, y float64) string {
	const r = 4.5
	switch s {
	case scoring.StateDegraded:
		return fmt.Sprintf("M%s %sL%s %sL%s %sZ", px(x), px(y-r*1.3), px(x+r*1.2), px(y+r*0.9), px(x-r*1.2), px(y+r*0.9))
	case scoring.StateImproved:
		return fmt.Sprintf("M%s %sL%s %sL%s %sZ", px(x), px(y+r*1.3), px(x+r*1.2), px(y-r*0.9), px(x-r*1.2), px(y-r*0.9))
	}
	rr := r * 0.8
	return fmt.Sprintf("M%s %sa%s %s 0 1 0 %s 0a%s %s 0 1 0 %s 0Z", px(x-rr), px(y), px(rr), px(rr), px(2*rr), px(rr), px(rr), px(-2*rr))
}

// markerClass is the CSS class of a state's marker.
func markerClass(s scoring.State) string {
	switch s {
	case scoring.StateDegraded, scoring.StateImproved, scoring.StateWithin:
		return string(s)
	}
	return "insufficient"
}

// leadPoint is what the lead-step chart shows of one lead: the live
// window's MAE and the band it was judged against (NaN where absent).
type leadPoint struct {
	Lead                        int
	MAE, Expected, Lower, Upper float64
	Alarm                       float64
	State                       scoring.State
	HasState                    bool
	Title                       string
	// Scaled: the lead's errors scale with level (method.md §4a) and the
	// expectation, band and alarm limit are the backtest's at the live
	// window's forecast levels. Unleveled: they scale with level but there
	// is no live window to set the level, so none is drawn. BacktestMAE is
	// the plain backtest average (NaN when unknown); it is not drawn.
	Scaled, Unleveled bool
	BacktestMAE       float64
	N                 int // pairs in the live window, when it was read without a drift state
}

// leadChart draws MAE per lead: live line with state markers, the
// expectation dashed, the 95% band filled, the MAE alarm limit thin and
// dotted, the decision leads shaded.
func leadChart(id string, pts []leadPoint, horizon int, decision []int, allDecision bool, unit, step string, windowNote string) *chart {
	f := frame{w: 960, h: 340, left: 70, top: 30, right: 18, bottom: 50}
	levels := false
	for _, p := range pts {
		levels = levels || p.Scaled && defined(p.Expected)
	}
	c := newChart(id, "Windowed MAE per lead step against the backtest band",
		fmt.Sprintf("For each lead 1 to %d: the MAE of the live window (%s) as a solid line with a marker per lead whose shape tells its state; "+
			"the backtest expectation as a dashed line, its 95%% band as a shaded area and the MAE alarm limit (p = 0.995) as a dotted line. "+
			"Decision leads %s are shaded.%s", horizon, windowNote, compactLeads(decision), levelsDesc(levels)), f)
	x := linear{0.5, float64(horizon) + 0.5, f.left, f.left + f.plotW()}
	hi := 0.0
	for _, p := range pts {
		hi = maxDefined(hi, p.MAE, p.Upper, p.Alarm, p.Expected)
	}
	y := c.yAxis(f, hi*1.05, yTitle("MAE", unit))
	if !allDecision {
		for _, r := range leadRuns(decision) {
			x0, x1 := x.at(float64(r[0])-0.5), x.at(float64(r[1])+0.5)
			c.Strips = append(c.Strips, strip{X: px(x0), Y: px(f.top), W: px(x1 - x0), H: px(f.plotH()),
				Title: "decision leads " + compactLeads(decision)})
			if x1-x0 >= 120 { // a narrower strip is keyed in the legend only
				c.Labels = append(c.Labels, label{X: px((x0 + x1) / 2), Y: px(f.top - 10), Text: "decision leads " + rangeText(r), Anchor: "middle", Class: "strip"})
			}
		}
	}
	n := len(pts)
	xs, live, exp, lo, up, alarm := make([]float64, n), make([]float64, n), make([]float64, n), make([]float64, n), make([]float64, n), make([]float64, n)
	for i, p := range pts {
		xs[i] = x.at(float64(p.Lead))
		live[i], exp[i], lo[i], up[i], alarm[i] = yOf(y, p.MAE), yOf(y, p.Expected), yOf(y, p.Lower), yOf(y, p.Upper), yOf(y, p.Alarm)
	}
	lone := math.Max(4, (x.at(2)-x.at(1))*0.35)
	c.Band = areas(xs, lo, up, lone)
	c.Alarm = polylines(xs, alarm, lone)
	c.Expected = polylines(xs, exp, lone)
	c.Live = polylines(xs, live, lone)
	dense := horizon > 120
	for i, p := range pts {
		if !p.HasState || !defined(live[i]) || dense && p.State == scoring.StateWithin {
			continue
		}
		c.Markers = append(c.Markers, marker{D: markerPath(p.State, xs[i], live[i]), Class: markerClass(p.State), Title: p.Title})
	}
	ts := niceStep(float64(horizon), 12)
	ts = math.Max(1, math.Round(ts))
	c.xTick(f, x.at(1), "1")
	for h := ts; h <= float64(horizon); h += ts {
		if h > 1 && x.at(h)-x.at(1) > 18 {
			c.xTick(f, x.at(h), strconv.Itoa(int(h)))
		}
	}
	c.xAxisLine(f, fmt.Sprintf("lead (steps of %s after the origin)", step))
	c.Legend = c.legendOf("live window MAE", "95% band", levels)
	if len(c.Strips) > 0 {
		c.Legend = append(c.Legend, legendItem{Kind: "fill", Class: "decision", Label: "decision leads"})
	}
	seen := map[string]bool{}
	for _, m := range c.Markers {
		seen[m.Class] = true
	}
	for _, s := range []scoring.State{scoring.StateDegraded, scoring.StateImproved, scoring.StateWithin, scoring.StateInsufficientData} {
		if !seen[markerClass(s)] {
			continue
		}
		l := viewState(s).Label
		if s == scoring.StateInsufficientData {
			l = "not judged"
		}
		c.Legend = append(c.Legend, legendItem{Kind: "marker", Class: markerClass(s), Label: l, D: markerPath(s, 14, 7)})
	}
	return c
}

// legendOf keys the live, expected, band and alarm elements the chart has;
// levels says the expectation is level-adjusted (method.md §4a).
func (c *chart) legendOf(live, band string, levels bool) []legendItem {
	var l []legendItem
	if len(c.Live) > 0 {
		l = append(l, legendItem{Kind: "line", Class: "live", Label: live})
	}
	if len(c.Expected) > 0 {
		l = append(l, legendItem{Kind: "line", Class: "expected", Label: expectationLabel(levels)})
	}
	if len(c.Band) > 0 {
		l = append(l, legendItem{Kind: "fill", Class: "band", Label: band})
	}
	if len(c.Alarm) > 0 {
		l = append(l, legendItem{Kind: "line", Class: "alarm", Label: "alarm limit"})
	}
	return l
}

// expectationLabel names a chart's expectation line: "backtest
// expectation", or "backtest expectation at these levels" when errors
// scale with level and it was set to the live forecast levels.
func expectationLabel(levels bool) string {
	if levels {
		return "backtest expectation at these levels"
	}
	return "backtest expectation"
}

// levelsDesc is what a chart's description adds when its expectation is
// level-adjusted (method.md §4a).
func levelsDesc(levels bool) string {
	if !levels {
		return ""
	}
	return " Errors scale with level on this series: the expectation, band and alarm limit are what the backtest promises at the window's forecast levels, " +
		"not its plain average."
}

func yOf(y linear, v float64) float64 {
	if !defined(v) {
		return math.NaN()
	}
	return y.at(v)
}

func yTitle(metric, unit string) string {
	if unit == "" {
		return metric
	}
	return metric + " (" + unit + ")"
}

// leadRuns splits sorted leads into runs of consecutive leads.
func leadRuns(leads []int) [][2]int {
	var out [][2]int
	for i := 0; i < len(leads); {
		j := i
		for j+1 < len(leads) && leads[j+1] == leads[j]+1 {
			j++
		}
		out = append(out, [2]int{leads[i], leads[j]})
		i = j + 1
	}
	return out
}

func rangeText(r [2]int) string {
	if r[0] == r[1] {
		return strconv.Itoa(r[0])
	}
	return fmt.Sprintf("%d-%d", r[0], r[1])
}

// windowPoint is one origin of the origin chart: the MAE of the window
// ending there, of N pairs, and the band for that N.
type windowPoint struct {
	Origin                      time.Time
	N                           int
	MAE, Expected, Lower, Upper float64
	Alarm                       float64
	Scaled                      bool // the band is at the window's forecast levels (method.md §4a)
}

// eventMark is a state change to mark on the origin chart.
type eventMark struct {
	Origin time.Time
	State  scoring.State
	Title  string
}

// maxDefined is the largest of hi and the defined values in vs: the top of
// a chart's value axis.
func maxDefined(hi float64, vs ...float64) float64 {
	for _, v := range vs {
		if defined(v) {
			hi = math.Max(hi, v)
		}
	}
	return hi
}

// originChart draws one lead's windowed MAE over origins against the band
// for each window's own size.
func originChart(id string, lead int, pts []windowPoint, marks []eventMark, unit string, loc *time.Location) *chart {
	f := frame{w: 960, h: 300, left: 70, top: 16, right: 18, bottom: 50}
	levels := false
	for _, p := range pts {
		levels = levels || p.Scaled
	}
	c := newChart(id, fmt.Sprintf("Windowed MAE of lead %d over the last %d origins", lead, len(pts)),
		fmt.Sprintf("For each of the last %d origins: the MAE of lead %d over the window of up to %d origins ending there (solid line), "+
			"the backtest expectation (dashed), the 95%% band for that window size (shaded) and the MAE alarm limit (p = 0.995, dotted). "+
			"Vertical marks are state changes of this lead, at their onset origins.%s", len(pts), lead, windowN, levelsDesc(levels)), f)
	if len(pts) == 0 {
		return c
	}
	t0, t1 := pts[0].Origin, pts[len(pts)-1].Origin
	if !t1.After(t0) {
		t0, t1 = t0.Add(-time.Hour), t1.Add(time.Hour)
	}
	x := linear{float64(t0.UnixNano()), float64(t1.UnixNano()), f.left, f.left + f.plotW()}
	xt := func(t time.Time) float64 { return x.at(float64(t.UnixNano())) }
	hi := 0.0
	for _, p := range pts {
		hi = maxDefined(hi, p.MAE, p.Upper, p.Alarm, p.Expected)
	}
	y := c.yAxis(f, hi*1.05, yTitle("MAE", unit))
	n := len(pts)
	xs, live, exp, lo, up, alarm := make([]float64, n), make([]float64, n), make([]float64, n), make([]float64, n), make([]float64, n), make([]float64, n)
	for i, p := range pts {
		xs[i] = xt(p.Origin)
		live[i], exp[i], lo[i], up[i], alarm[i] = yOf(y, p.MAE), yOf(y, p.Expected), yOf(y, p.Lower), yOf(y, p.Upper), yOf(y, p.Alarm)
	}
	c.Band = areas(xs, lo, up, 3)
	c.Alarm = polylines(xs, alarm, 3)
	c.Expected = polylines(xs, exp, 3)
	c.Live = polylines(xs, live, 3)
	for _, m := range marks {
		if m.Origin.Before(pts[0].Origin) || m.Origin.After(pts[len(pts)-1].Origin) {
			continue
		}
		mx := px(xt(m.Origin))
		c.Rules = append(c.Rules, rule{X: mx, Y1: px(f.top), Y2: px(f.top + f.plotH()), Class: "event " + markerClass(m.State), Title: m.Title})
		c.Markers = append(c.Markers, marker{D: markerPath(m.State, float64(mx), f.top+7), Class: markerClass(m.State), Title: m.Title})
	}
	timeTicks(c, f, t0, t1, xt, loc)
	c.xAxisLine(f, "origin of the window's newest forecast ("+zoneName(loc)+")")
	c.Legend = c.legendOf("window MAE", "95% band for the window's n", levels)
	if len(c.Rules) > 0 {
		c.Legend = append(c.Legend, legendItem{Kind: "line", Class: "event", Label: "state change of this lead"})
	}
	return c
}

// pairsChart draws the actuals and one lead's forecasts by target time.
func pairsChart(id string, lead int, targets []time.Time, actual, forecast []float64, unit string, loc *time.Location) *chart {
	f := frame{w: 960, h: 240, left: 70, top: 14, right: 18, bottom: 50}
	c := newChart(id, fmt.Sprintf("Actuals and lead-%d forecasts by target time", lead),
		fmt.Sprintf("The last %d scored pairs of lead %d: actual values as a solid dark line, the forecasts made %d steps ahead as a dashed teal line.",
			len(targets), lead, lead), f)
	if len(targets) == 0 {
		return c
	}
	t0, t1 := targets[0], targets[len(targets)-1]
	if !t1.After(t0) {
		t0, t1 = t0.Add(-time.Hour), t1.Add(time.Hour)
	}
	lo, hi := math.Inf(1), math.Inf(-1)
	for i := range targets {
		lo, hi = math.Min(lo, math.Min(actual[i], forecast[i])), math.Max(hi, math.Max(actual[i], forecast[i]))
	}
	step := niceStep(hi-lo, 4)
	bottom, top := math.Floor(lo/step)*step, math.Ceil(hi/step)*step
	if top == bottom {
		top = bottom + step
	}
	y := linear{bottom, top, f.top + f.plotH(), f.top}
	dec := decimals(step)
	for v := bottom; v <= top+step/2; v += step {
		py := px(y.at(v))
		c.Grid = append(c.Grid, seg{px(f.left), py, px(f.left + f.plotW()), py})
		c.Labels = append(c.Labels, label{X: px(f.left - 8), Y: py + 4, Text: strconv.FormatFloat(v, 'f', dec, 64), Anchor: "end", Class: "tick"})
	}
	c.Axes = append(c.Axes, seg{px(f.left), px(f.top), px(f.left), px(f.top + f.plotH())})
	c.Labels = append(c.Labels, label{X: 16, Y: px(f.top + f.plotH()/2), Text: yTitle("value", unit), Anchor: "middle", Class: "axis", Rotate: true})
	x := linear{float64(t0.UnixNano()), float64(t1.UnixNano()), f.left, f.left + f.plotW()}
	xt := func(t time.Time) float64 { return x.at(float64(t.UnixNano())) }
	xs, ya, yf := make([]float64, len(targets)), make([]float64, len(targets)), make([]float64, len(targets))
	for i, t := range targets {
		xs[i], ya[i], yf[i] = xt(t), y.at(actual[i]), y.at(forecast[i])
	}
	c.Actual = polylines(xs, ya, 3)
	c.Forecast = polylines(xs, yf, 3)
	timeTicks(c, f, t0, t1, xt, loc)
	c.xAxisLine(f, "target time ("+zoneName(loc)+")")
	c.Legend = []legendItem{{Kind: "line", Class: "actual", Label: "actual"}, {Kind: "line", Class: "forecast", Label: fmt.Sprintf("forecast at lead %d", lead)}}
	return c
}

func zoneName(loc *time.Location) string {
	if loc == nil {
		return "UTC"
	}
	return loc.String()
}

// timeStep is a tick spacing: a duration, or a number of months.
type timeStep struct {
	d      time.Duration
	months int
}

// timeSteps are the tick spacings a time axis may use, smallest first.
var timeSteps = []timeStep{{time.Hour, 0}, {2 * time.Hour, 0}, {3 * time.Hour, 0}, {6 * time.Hour, 0}, {12 * time.Hour, 0},
	{24 * time.Hour, 0}, {48 * time.Hour, 0}, {7 * 24 * time.Hour, 0}, {14 * 24 * time.Hour, 0},
	{0, 1}, {0, 2}, {0, 3}, {0, 6}, {0, 12}, {0, 24}, {0, 60}}

// timeTicks labels a time axis with round times in loc: whole hours, local
// midnights, Mondays or month starts, at most about eight of them.
func timeTicks(c *chart, f frame, t0, t1 time.Time, xt func(time.Time) float64, loc *time.Location) {
	if loc == nil {
		loc = time.UTC
	}
	span := t1.Sub(t0)
	for _, s := range timeSteps {
		approx := s.d
		if s.months > 0 {
			approx = time.Duration(s.months) * 30 * 24 * time.Hour
		}
		if span/approx > 8 && s.months < 60 {
			continue
		}
		t, next, layout := s.ticks(t0.In(loc), loc, span)
		for ; !t.After(t1); t = next(t) {
			if t.Before(t0) {
				continue
			}
			c.xTick(f, xt(t), t.Format(layout))
		}
		return
	}
}

// ticks returns the first tick in loc at or before a, how to step to the
// next one, and the layout of their labels on an axis that spans span.
func (s timeStep) ticks(a time.Time, loc *time.Location, span time.Duration) (t time.Time, next func(time.Time) time.Time, layout string) {
	switch {
	case s.months > 0:
		t = time.Date(a.Year(), a.Month(), 1, 0, 0, 0, 0, loc)
		if s.months <= 12 {
			for (int(t.Month())-1)%s.months != 0 {
				t = t.AddDate(0, -1, 0)
			}
		} else {
			years := s.months / 12
			t = time.Date(a.Year()-a.Year()%years, 1, 1, 0, 0, 0, 0, loc)
		}
		next = func(t time.Time) time.Time { return t.AddDate(0, s.months, 0) }
		layout = "Jan 2006"
	case s.d >= 24*time.Hour:
		t = time.Date(a.Year(), a.Month(), a.Day(), 0, 0, 0, 0, loc)
		days := int(s.d / (24 * time.Hour))
		if days == 7 || days == 14 {
			for t.Weekday() != time.Monday {
				t = t.AddDate(0, 0, -1)
			}
		}
		next = func(t time.Time) time.Time { return t.AddDate(0, 0, days) }
		layout = "Jan 2"
		if span > 300*24*time.Hour {
			layout = "2006-01-02"
		}
	default:
		h := int(s.d / time.Hour)
		t = time.Date(a.Year(), a.Month(), a.Day(), a.Hour()-a.Hour()%h, 0, 0, 0, loc)
		next = func(t time.Time) time.Time { return t.Add(s.d) }
		layout = "15:04"
		if span > 12*time.Hour {
			layout = "Jan 2 15:04"
		}
	}
	return t, next, layout
}
