package store

import (
	"context"
	"crypto/sha256"
	"encoding/binary"
	"encoding/json"
	"errors"
	"fmt"
	"math"
	"slices"
	"time"

	"github.com/jackc/pgx/v5"

	"github.com/aftercast/aftercast/scoring"
)

// BacktestRow is one pair of an uploaded backtest.
type BacktestRow struct {
	Series           string
	Origin, Target   time.Time
	Forecast, Actual float64
}

// TrainingActual is one training observation, for the MASE scale.
type TrainingActual struct {
	Series string
	Time   time.Time
	Value  float64
}

// Warning kinds, as in the API.
const (
	WarnCadence         = "origin_cadence_differs"
	WarnHorizon         = "horizon_differs"
	WarnLeadNotUsable   = "lead_not_usable"
	WarnNoTraining      = "no_training_actuals"
	WarnTrainingIgnored = "training_actuals_ignored"
)

// BaselineWarning flags a way a baseline may not represent production.
type BaselineWarning struct {
	Kind    string `json:"kind"`
	Lead    int    `json:"lead,omitempty"`
	Message string `json:"message"`
}

// BaselineVersion summarises one stored baseline version.
type BaselineVersion struct {
	Series        string
	Model         string
	Version       int
	Active        bool
	CreatedAt     time.Time
	FirstOrigin   time.Time
	LastOrigin    time.Time
	CadenceSteps  int
	MaxLead       int
	Rows          int64
	TrainingCount int64
	MASEScale     float64 // NaN when unknown
	Warnings      []BaselineWarning
	Created       bool // set by import: false when the upload equalled the active version
}

// BaselineLead is the backtest pairs of one lead, in origin order.
type BaselineLead struct {
	Lead      int
	Origins   []time.Time
	Forecasts []float64
	Actuals   []float64
}

// Baseline is a stored version with its rows.
type Baseline struct {
	BaselineVersion
	Leads []BaselineLead // ascending by lead
}

// maxViolations bounds the field violations reported for one import.
const maxViolations = 100

// ImportBaseline stores a backtest of model for every series it names, as
// one new version each, in one transaction. Any invalid row fails the whole
// import with an *InvalidError whose fields name the rows ("rows[12].target_time").
// A series whose upload equals its active version gets no new version.
// Every lead the drift detector could not use is reported as a warning.
func (s *Store) ImportBaseline(ctx context.Context, model string, rows []BacktestRow, training []TrainingActual) ([]BaselineVersion, error) {
	if !modelPattern.MatchString(model) {
		return nil, invalid("model", "want 1–200 characters of A-Z a-z 0-9 _ . : / -")
	}
	if len(rows) == 0 {
		return nil, invalid("rows", "no backtest rows")
	}
	keys := make([]string, 0, 8)
	for _, r := range rows {
		keys = append(keys, r.Series)
	}
	for _, t := range training {
		keys = append(keys, t.Series)
	}
	series, err := s.seriesByKeys(ctx, keys)
	if err != nil {
		return nil, err
	}
	im := baselineImport{series: series, ups: map[string]*baselineUpload{}}
	for i, r := range rows {
		im.addRow(i, r)
	}
	for i, t := range training {
		im.addTraining(i, t)
	}
	if len(im.vs) > 0 {
		return nil, &InvalidError{im.vs}
	}
	var out []BaselineVersion
	err = s.inTx(ctx, func(tx pgx.Tx) error {
		out = out[:0]
		ids := make([]int64, 0, len(im.ups))
		for _, u := range im.ups {
			ids = append(ids, u.se.ID)
		}
		if err := lockSeries(ctx, tx, ids); err != nil {
			return err
		}
		for _, key := range sortedKeys(im.ups) {
			v, err := s.storeUpload(ctx, tx, model, im.ups[key])
			if err != nil {
				return err
			}
			out = append(out, v)
		}
		return nil
	})
	return out, err
}

// baselineImport checks an import's rows and training actuals and groups
// them by series, collecting a violation (up to maxViolations) for every
// invalid one.
type baselineImport struct {
	series map[string]*Series
	ups    map[string]*baselineUpload
	vs     []FieldViolation
}

// baselineUpload is what an import holds for one series.
type baselineUpload struct {
	se       *Series
	leads    map[int]*BaselineLead
	seen     map[baselinePairKey]bool
	training []TrainingActual
}

type baselinePairKey struct {
	origin int64
	lead   int
}

func (im *baselineImport) bad(field, format string, args ...any) {
	if len(im.vs) < maxViolations {
		im.vs = append(im.vs, FieldViolation{field, fmt.Sprintf(format, args...)})
	}
}

// rowProblem returns the field of row r (index i) that is invalid for
// series se (nil when unknown) and why, or "", "".
func rowProblem(se *Series, i int, r BacktestRow) (field, why string) {
	switch {
	case se == nil:
		return fmt.Sprintf("rows[%d].series", i), fmt.Sprintf("unknown series %q: create it first", r.Series)
	case gridProblem(se, r.Origin) != "":
		return fmt.Sprintf("rows[%d].origin_time", i), gridProblem(se, r.Origin)
	case timeProblem(r.Target) != "":
		return fmt.Sprintf("rows[%d].target_time", i), timeProblem(r.Target)
	case math.IsNaN(r.Forecast) || math.IsInf(r.Forecast, 0):
		return fmt.Sprintf("rows[%d].forecast", i), "not a finite number"
	case math.IsNaN(r.Actual) || math.IsInf(r.Actual, 0):
		return fmt.Sprintf("rows[%d].actual", i), "not a finite number"
	}
	return "", ""
}

// addRow adds backtest row i.
func (im *baselineImport) addRow(i int, r BacktestRow) {
	se := im.series[r.Series]
	if field, why := rowProblem(se, i, r); field != "" {
		im.bad(field, "%s", why)
		return
	}
	h, err := se.step.Lead(r.Origin, r.Target)
	if err == nil {
		err = scoring.CheckLead(h, se.Horizon)
	}
	if err != nil {
		im.bad(fmt.Sprintf("rows[%d].target_time", i), "%v", err)
		return
	}
	u := im.ups[r.Series]
	if u == nil {
		u = &baselineUpload{se: se, leads: map[int]*BaselineLead{}, seen: map[baselinePairKey]bool{}}
		im.ups[r.Series] = u
	}
	k := baselinePairKey{r.Origin.UnixNano(), h}
	if u.seen[k] {
		im.bad(fmt.Sprintf("rows[%d]", i), "a second row for series %s origin %s lead %d", r.Series, r.Origin.Format(time.RFC3339), h)
		return
	}
	u.seen[k] = true
	l := u.leads[h]
	if l == nil {
		l = &BaselineLead{Lead: h}
		u.leads[h] = l
	}
	l.Origins = append(l.Origins, r.Origin)
	l.Forecasts = append(l.Forecasts, r.Forecast)
	l.Actuals = append(l.Actuals, r.Actual)
}

// addTraining adds training actual i; its series must have backtest rows.
func (im *baselineImport) addTraining(i int, t TrainingActual) {
	u := im.ups[t.Series]
	switch {
	case u == nil:
		im.bad(fmt.Sprintf("training_actuals[%d].series", i), "series %q has no backtest rows in this import", t.Series)
	case math.IsNaN(t.Value) || math.IsInf(t.Value, 0):
		im.bad(fmt.Sprintf("training_actuals[%d].value", i), "not a finite number")
	case gridProblem(u.se, t.Time) != "":
		im.bad(fmt.Sprintf("training_actuals[%d].time", i), "%s", gridProblem(u.se, t.Time))
	default:
		u.training = append(u.training, t)
	}
}

// storeUpload stores u as a version of model, its leads in origin order.
func (s *Store) storeUpload(ctx context.Context, tx pgx.Tx, model string, u *baselineUpload) (BaselineVersion, error) {
	leads := make([]BaselineLead, 0, len(u.leads))
	for _, l := range u.leads {
		sortLead(l)
		leads = append(leads, *l)
	}
	slices.SortFunc(leads, func(a, b BaselineLead) int { return a.Lead - b.Lead })
	return s.storeBaseline(ctx, tx, u.se, model, leads, u.training)
}

func sortedKeys[V any](m map[string]V) []string {
	ks := make([]string, 0, len(m))
	for k := range m {
		ks = append(ks, k)
	}
	slices.Sort(ks)
	return ks
}

// sortLead puts a lead's pairs in origin order.
func sortLead(l *BaselineLead) {
	idx := make([]int, len(l.Origins))
	for i := range idx {
		idx[i] = i
	}
	slices.SortFunc(idx, func(a, b int) int { return l.Origins[a].Compare(l.Origins[b]) })
	o, f, a := make([]time.Time, len(idx)), make([]float64, len(idx)), make([]float64, len(idx))
	for i, j := range idx {
		o[i], f[i], a[i] = l.Origins[j], l.Forecasts[j], l.Actuals[j]
	}
	l.Origins, l.Forecasts, l.Actuals = o, f, a
}

func contentHash(leads []BaselineLead, training []TrainingActual) []byte {
	h := sha256.New()
	var b []byte
	for _, l := range leads {
		b = binary.AppendVarint(b[:0], int64(l.Lead))
		for i := range l.Origins {
			b = binary.AppendVarint(b, l.Origins[i].UnixNano())
			b = binary.LittleEndian.AppendUint64(b, math.Float64bits(l.Forecasts[i]))
			b = binary.LittleEndian.AppendUint64(b, math.Float64bits(l.Actuals[i]))
		}
		h.Write(b)
	}
	tr := slices.Clone(training)
	slices.SortFunc(tr, func(a, b TrainingActual) int { return a.Time.Compare(b.Time) })
	for _, t := range tr {
		b = binary.AppendVarint(b[:0], t.Time.UnixNano())
		b = binary.LittleEndian.AppendUint64(b, math.Float64bits(t.Value))
		h.Write(b)
	}
	return h.Sum(nil)
}

func (s *Store) storeBaseline(ctx context.Context, tx pgx.Tx, se *Series, model string, leads []BaselineLead,
	training []TrainingActual) (BaselineVersion, error) {
	hash := contentHash(leads, training)
	var active int
	var activeHash []byte
	err := tx.QueryRow(ctx, `SELECT version, content_hash FROM baselines WHERE series_id = $1 AND model = $2 ORDER BY version DESC LIMIT 1`,
		se.ID, model).Scan(&active, &activeHash)
	if err != nil && !errors.Is(err, pgx.ErrNoRows) {
		return BaselineVersion{}, fmt.Errorf("reading baselines: %w", err)
	}
	if active > 0 && string(activeHash) == string(hash) {
		v, err := s.baselineVersion(ctx, tx, se, model, active)
		return v, err
	}
	v := BaselineVersion{Series: se.Key, Model: model, Version: active + 1, Active: true, Created: true}
	var origins []time.Time
	for _, l := range leads {
		v.Rows += int64(len(l.Origins))
		v.MaxLead = max(v.MaxLead, l.Lead)
		origins = append(origins, l.Origins...)
	}
	slices.SortFunc(origins, time.Time.Compare)
	origins = slices.CompactFunc(origins, time.Time.Equal)
	v.FirstOrigin, v.LastOrigin = origins[0], origins[len(origins)-1]
	v.CadenceSteps = cadence(se.step, origins)

	ts, ys := make([]time.Time, len(training)), make([]float64, len(training))
	for i, t := range training {
		ts[i], ys[i] = t.Time, t.Value
	}
	scale, used, ignored, err := scoring.TrainingScale(se.step, v.FirstOrigin, ts, ys, max(se.Season, 1))
	var off *scoring.OffGridError
	if errors.As(err, &off) {
		return v, invalid("training_actuals", "series %s: %v", se.Key, err)
	}
	v.MASEScale, v.TrainingCount = scale, int64(used)
	if ignored > 0 {
		v.Warnings = append(v.Warnings, BaselineWarning{Kind: WarnTrainingIgnored,
			Message: fmt.Sprintf("%d training actuals after the first backtest origin %s were ignored", ignored, v.FirstOrigin.Format(time.RFC3339))})
	}
	if !scoring.Defined(scale) || scale == 0 {
		v.Warnings = append(v.Warnings, BaselineWarning{Kind: WarnNoTraining, Message: "no usable training actuals: MASE is unknown"})
	}
	shape, err := shapeWarnings(ctx, tx, se, model, v)
	if err != nil {
		return v, err
	}
	v.Warnings = append(v.Warnings, shape...)
	for _, l := range leads {
		if reason := leadUsability(l, se.ErrorScale); reason != "" {
			v.Warnings = append(v.Warnings, BaselineWarning{Kind: WarnLeadNotUsable, Lead: l.Lead, Message: reason})
		}
	}
	warnings, err := json.Marshal(v.Warnings)
	if err != nil {
		return v, err
	}
	var scaleArg any
	if scoring.Defined(scale) {
		scaleArg = scale
	}
	err = tx.QueryRow(ctx, `INSERT INTO baselines (series_id, model, version, first_origin, last_origin, origin_cadence_steps,
			max_lead, row_count, training_count, mase_scale, warnings, content_hash)
		VALUES ($1, $2, $3, $4, $5, $6, $7, $8, $9, $10, $11, $12) RETURNING created_at`,
		se.ID, model, v.Version, v.FirstOrigin, v.LastOrigin, v.CadenceSteps, v.MaxLead, v.Rows, v.TrainingCount, scaleArg, warnings, hash).Scan(&v.CreatedAt)
	if err != nil {
		return v, fmt.Errorf("storing baseline: %w", err)
	}
	src := make([][]any, len(leads))
	for i, l := range leads {
		src[i] = []any{se.ID, model, v.Version, l.Lead, l.Origins, l.Forecasts, l.Actuals}
	}
	if _, err := tx.CopyFrom(ctx, pgx.Identifier{"baseline_leads"}, []string{"series_id", "model", "version", "lead", "origins", "forecasts", "actuals"},
		pgx.CopyFromRows(src)); err != nil {
		return v, fmt.Errorf("storing baseline rows: %w", err)
	}
	// A new active version re-judges the whole production period.
	if _, err := tx.Exec(ctx, `INSERT INTO drift_marks (series_id, model, cause) VALUES ($1, $2, 'baseline')`, se.ID, model); err != nil {
		return v, fmt.Errorf("marking drift for re-judgement: %w", err)
	}
	return v, nil
}

// leadUsability judges a lead's backtest as the drift detector will
// (method.md §4), on errors scaled as the series' error scale says (§4a),
// for the import's warnings: "" when usable, else why not.
func leadUsability(l BaselineLead, mode scoring.ScaleMode) string {
	fs, es := make([][]float64, len(l.Origins)), make([][]float64, len(l.Origins))
	for i := range fs {
		fs[i], es[i] = []float64{l.Forecasts[i]}, []float64{l.Actuals[i] - l.Forecasts[i]}
	}
	sc := scoring.FitScale(fs, es, scoring.DriftWindow, mode)
	q := make([]float64, len(l.Origins))
	for i := range q {
		q[i] = math.Abs(es[i][0]) / sc.Of(fs[i][0])
	}
	return scoring.Usability(scoring.Summarize(q, l.Lead)).Reason
}

// cadence is the most common gap, in steps, between consecutive origins
// (ties: the smaller gap); 0 when there is no gap on the grid.
func cadence(step scoring.Step, origins []time.Time) int {
	counts := map[int]int{}
	for i := 1; i < len(origins); i++ {
		if k, err := step.Lead(origins[i-1], origins[i]); err == nil {
			counts[k]++
		}
	}
	best, bestN := 0, 0
	for k, n := range counts {
		if n > bestN || n == bestN && k < best {
			best, bestN = k, n
		}
	}
	return best
}

// shapeWarnings compares a baseline's origin cadence and largest lead with
// what production sends now (method.md §1): at import, and again whenever
// the baseline is read, since production usually starts after the import.
func shapeWarnings(ctx context.Context, q querier, se *Series, model string, v BaselineVersion) ([]BaselineWarning, error) {
	prodCadence, prodMaxLead, err := productionShape(ctx, q, se, model)
	if err != nil {
		return nil, err
	}
	var out []BaselineWarning
	if prodCadence > 0 && prodCadence != v.CadenceSteps {
		out = append(out, BaselineWarning{Kind: WarnCadence,
			Message: fmt.Sprintf("backtest origins every %d steps, production origins every %d steps", v.CadenceSteps, prodCadence)})
	}
	wantLead, what := se.Horizon, "the series horizon"
	if prodMaxLead > 0 {
		wantLead, what = prodMaxLead, "the largest production lead"
	}
	if v.MaxLead != wantLead {
		out = append(out, BaselineWarning{Kind: WarnHorizon,
			Message: fmt.Sprintf("backtest reaches lead %d, %s is %d", v.MaxLead, what, wantLead)})
	}
	return out, nil
}

// refreshShapeWarnings replaces the stored cadence and horizon warnings of
// v with ones judged against production as it is now.
func refreshShapeWarnings(ctx context.Context, q querier, se *Series, v *BaselineVersion) error {
	shape, err := shapeWarnings(ctx, q, se, v.Model, *v)
	if err != nil {
		return err
	}
	kept := v.Warnings[:0]
	for _, w := range v.Warnings {
		if w.Kind != WarnCadence && w.Kind != WarnHorizon {
			kept = append(kept, w)
		}
	}
	v.Warnings = append(kept, shape...)
	return nil
}

// productionShape reads the cadence and largest lead of the model's recent
// production forecasts for the series (0, 0 when there are none).
func productionShape(ctx context.Context, q querier, se *Series, model string) (cad, maxLead int, err error) {
	rows, err := q.Query(ctx, `SELECT origin, cardinality(vals) FROM forecasts WHERE series_id = $1 AND model = $2
		ORDER BY origin DESC LIMIT 200`, se.ID, model)
	if err != nil {
		return 0, 0, fmt.Errorf("reading production forecasts: %w", err)
	}
	defer rows.Close()
	var origins []time.Time
	for rows.Next() {
		var o time.Time
		var n int
		if err := rows.Scan(&o, &n); err != nil {
			return 0, 0, err
		}
		origins = append(origins, o)
		maxLead = max(maxLead, n)
	}
	if err := rows.Err(); err != nil {
		return 0, 0, err
	}
	slices.SortFunc(origins, time.Time.Compare)
	return cadence(se.step, origins), maxLead, nil
}

const baselineColumns = `version, created_at, first_origin, last_origin, origin_cadence_steps, max_lead, row_count, training_count, mase_scale, warnings`

func scanBaseline(row pgx.Row, se *Series, model string) (BaselineVersion, error) {
	v := BaselineVersion{Series: se.Key, Model: model}
	var scale *float64
	var warnings []byte
	if err := row.Scan(&v.Version, &v.CreatedAt, &v.FirstOrigin, &v.LastOrigin, &v.CadenceSteps, &v.MaxLead, &v.Rows, &v.TrainingCount, &scale, &warnings); err != nil {
		return v, err
	}
	v.MASEScale = math.NaN()
	if scale != nil {
		v.MASEScale = *scale
	}
	if err := json.Unmarshal(warnings, &v.Warnings); err != nil {
		return v, fmt.Errorf("baseline warnings: %w", err)
	}
	return v, nil
}

type querier interface {
	QueryRow(ctx context.Context, sql string, args ...any) pgx.Row
	Query(ctx context.Context, sql string, args ...any) (pgx.Rows, error)
}

func (s *Store) baselineVersion(ctx context.Context, q querier, se *Series, model string, version int) (BaselineVersion, error) {
	var active int
	if err := q.QueryRow(ctx, `SELECT coalesce(max(version), 0) FROM baselines WHERE series_id = $1 AND model = $2`, se.ID, model).Scan(&active); err != nil {
		return BaselineVersion{}, fmt.Errorf("reading baselines: %w", err)
	}
	if version == 0 {
		version = active
	}
	v, err := scanBaseline(q.QueryRow(ctx, `SELECT `+baselineColumns+` FROM baselines WHERE series_id = $1 AND model = $2 AND version = $3`,
		se.ID, model, version), se, model)
	if errors.Is(err, pgx.ErrNoRows) {
		if version == 0 {
			return v, fmt.Errorf("no baseline of model %q for series %q: %w", model, se.Key, ErrNotFound)
		}
		return v, fmt.Errorf("no version %d of the baseline of model %q for series %q: %w", version, model, se.Key, ErrNotFound)
	}
	if err != nil {
		return v, fmt.Errorf("reading baseline: %w", err)
	}
	v.Active = v.Version == active
	return v, nil
}

// GetBaseline returns a baseline version with its rows; version 0 is the
// active one.
func (s *Store) GetBaseline(ctx context.Context, key, model string, version int) (Baseline, error) {
	se, err := s.seriesByKey(ctx, key)
	if err != nil {
		return Baseline{}, err
	}
	b, err := s.baseline(ctx, s.pool, se, model, version)
	if err != nil {
		return b, err
	}
	return b, refreshShapeWarnings(ctx, s.pool, se, &b.BaselineVersion)
}

func (s *Store) baseline(ctx context.Context, q querier, se *Series, model string, version int) (Baseline, error) {
	v, err := s.baselineVersion(ctx, q, se, model, version)
	if err != nil {
		return Baseline{}, err
	}
	b := Baseline{BaselineVersion: v}
	rows, err := q.Query(ctx, `SELECT lead, origins, forecasts, actuals FROM baseline_leads
		WHERE series_id = $1 AND model = $2 AND version = $3 ORDER BY lead`, se.ID, model, v.Version)
	if err != nil {
		return b, fmt.Errorf("reading baseline rows: %w", err)
	}
	defer rows.Close()
	for rows.Next() {
		var l BaselineLead
		if err := rows.Scan(&l.Lead, &l.Origins, &l.Forecasts, &l.Actuals); err != nil {
			return b, fmt.Errorf("reading baseline rows: %w", err)
		}
		b.Leads = append(b.Leads, l)
	}
	return b, rows.Err()
}

// ListBaselineVersions lists the versions of a series' baselines, by model
// then newest first; model "" means every model.
func (s *Store) ListBaselineVersions(ctx context.Context, key, model string) ([]BaselineVersion, error) {
	se, err := s.seriesByKey(ctx, key)
	if err != nil {
		return nil, err
	}
	rows, err := s.pool.Query(ctx, `SELECT model, `+baselineColumns+`, version = max(version) OVER (PARTITION BY model)
		FROM baselines WHERE series_id = $1 AND ($2 = '' OR model = $2) ORDER BY model, version DESC`, se.ID, model)
	if err != nil {
		return nil, fmt.Errorf("listing baselines: %w", err)
	}
	defer rows.Close()
	var out []BaselineVersion
	for rows.Next() {
		v := BaselineVersion{Series: se.Key}
		var scale *float64
		var warnings []byte
		if err := rows.Scan(&v.Model, &v.Version, &v.CreatedAt, &v.FirstOrigin, &v.LastOrigin, &v.CadenceSteps, &v.MaxLead, &v.Rows,
			&v.TrainingCount, &scale, &warnings, &v.Active); err != nil {
			return nil, fmt.Errorf("listing baselines: %w", err)
		}
		v.MASEScale = math.NaN()
		if scale != nil {
			v.MASEScale = *scale
		}
		if err := json.Unmarshal(warnings, &v.Warnings); err != nil {
			return nil, err
		}
		out = append(out, v)
	}
	return out, rows.Err()
}

// ActiveScale is the MASE scale of the active baseline of (series, model),
// NaN when there is none.
func (s *Store) ActiveScale(ctx context.Context, key, model string) (float64, error) {
	se, err := s.seriesByKey(ctx, key)
	if err != nil {
		return math.NaN(), err
	}
	var scale *float64
	err = s.pool.QueryRow(ctx, `SELECT mase_scale FROM baselines WHERE series_id = $1 AND model = $2 ORDER BY version DESC LIMIT 1`,
		se.ID, model).Scan(&scale)
	switch {
	case errors.Is(err, pgx.ErrNoRows):
		return math.NaN(), nil
	case err != nil:
		return math.NaN(), fmt.Errorf("reading baseline scale: %w", err)
	case scale == nil:
		return math.NaN(), nil
	}
	return *scale, nil
}

// BaselineRows returns a baseline version of a series with its rows, as
// stored (no warnings refreshed); version 0 is the active one.
func (s *Store) BaselineRows(ctx context.Context, se *Series, model string, version int) (Baseline, error) {
	return s.baseline(ctx, s.pool, se, model, version)
}

// ActiveBaseline returns the series and the active baseline version of
// (key, model); ErrNotFound when the series or the baseline does not exist.
func (s *Store) ActiveBaseline(ctx context.Context, key, model string) (*Series, ActiveBaseline, error) {
	se, err := s.seriesByKey(ctx, key)
	if err != nil {
		return nil, ActiveBaseline{}, err
	}
	a := ActiveBaseline{Model: model}
	err = s.pool.QueryRow(ctx, `SELECT version, last_origin FROM baselines WHERE series_id = $1 AND model = $2
		ORDER BY version DESC LIMIT 1`, se.ID, model).Scan(&a.Version, &a.LastOrigin)
	if errors.Is(err, pgx.ErrNoRows) {
		return se, a, fmt.Errorf("no baseline of model %q for series %q: %w", model, key, ErrNotFound)
	}
	if err != nil {
		return se, a, fmt.Errorf("reading baselines: %w", err)
	}
	return se, a, nil
}
