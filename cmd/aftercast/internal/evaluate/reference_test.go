package evaluate

import (
	"bytes"
	"encoding/json"
	"math"
	"os"
	"path/filepath"
	"testing"

	"github.com/aftercast/aftercast/cmd/aftercast/internal/report"
)

// referenceDir holds golden files made by testdata/reference/make_reference.R
// with R's forecast package (versions and datasets named per case in
// cases.json and in its README). CI reads the committed files; it needs no R.
const referenceDir = "../../../../testdata/reference"

type referenceCase struct {
	Name, Input, History, Golden, Step string
	Season                             int
	Source, Forecaster, Reference      string
	Notes                              string
}

// goldenRow is a row of a golden file; the files were written in the
// shape of evaluate's JSON, so report.Metrics reads them.
type goldenRow = report.Metrics

type goldenFile struct {
	Results []struct {
		Series, Model, Step string
		Leads               []goldenRow
		Overall             goldenRow
	}
}

// TestAgainstRForecastAccuracy checks every per-lead and overall metric of
// `aftercast evaluate --format json` against forecast::accuracy() (ME, RMSE,
// MAE, MAPE, MASE) and plain R arithmetic (sMAPE, WAPE) to 1e-9 relative.
// How each reference was made comparable (MAPE over non-zero actuals, one
// MASE scale from the training actuals up to the first origin) is in each
// case's "notes" and in make_reference.R.
func TestAgainstRForecastAccuracy(t *testing.T) {
	t.Parallel()
	raw, err := os.ReadFile(filepath.Join(referenceDir, "cases.json"))
	if err != nil {
		t.Fatal(err)
	}
	var cases []referenceCase
	if err := json.Unmarshal(raw, &cases); err != nil {
		t.Fatal(err)
	}
	if len(cases) < 3 {
		t.Fatalf("%d reference cases, want at least 3", len(cases))
	}
	for _, c := range cases {
		t.Run(c.Name, func(t *testing.T) {
			t.Parallel()
			t.Logf("source: %s; forecaster: %s; reference: %s", c.Source, c.Forecaster, c.Reference)
			rs, err := File(filepath.Join(referenceDir, c.Input), filepath.Join(referenceDir, c.History),
				Options{Step: c.Step, Season: c.Season})
			if err != nil {
				t.Fatal(err)
			}
			var out bytes.Buffer
			if err := report.WriteJSON(&out, rs); err != nil {
				t.Fatal(err)
			}
			var got, want goldenFile
			if err := json.Unmarshal(out.Bytes(), &got); err != nil {
				t.Fatal(err)
			}
			raw, err := os.ReadFile(filepath.Join(referenceDir, c.Golden))
			if err != nil {
				t.Fatal(err)
			}
			if err := json.Unmarshal(raw, &want); err != nil {
				t.Fatal(err)
			}
			if len(got.Results) != len(want.Results) {
				t.Fatalf("%d results, golden has %d", len(got.Results), len(want.Results))
			}
			checked := 0
			for i, w := range want.Results {
				g := got.Results[i]
				if g.Series != w.Series || g.Model != w.Model || g.Step != w.Step {
					t.Errorf("result %d: %s/%s/%s, golden %s/%s/%s", i, g.Series, g.Model, g.Step, w.Series, w.Model, w.Step)
				}
				if len(g.Leads) != len(w.Leads) {
					t.Fatalf("%d leads, golden has %d", len(g.Leads), len(w.Leads))
				}
				for j := range w.Leads {
					checked += compareRow(t, "lead "+itoa(w.Leads[j].Lead), g.Leads[j], w.Leads[j])
				}
				checked += compareRow(t, "overall", g.Overall, w.Overall)
			}
			t.Logf("%d values agree to 1e-9 relative", checked)
		})
	}
}

func itoa(p *int) string {
	if p == nil {
		return "?"
	}
	b, _ := json.Marshal(*p)
	return string(b)
}

func compareRow(t *testing.T, where string, g, w goldenRow) int {
	t.Helper()
	if (g.Lead == nil) != (w.Lead == nil) || (g.Lead != nil && *g.Lead != *w.Lead) {
		t.Errorf("%s: lead %s, golden %s", where, itoa(g.Lead), itoa(w.Lead))
	}
	if g.N != w.N || g.MAPEExcluded != w.MAPEExcluded || g.SMAPEExcluded != w.SMAPEExcluded {
		t.Errorf("%s: n %d/%d mape_excluded %d/%d smape_excluded %d/%d (ours/golden)", where,
			g.N, w.N, g.MAPEExcluded, w.MAPEExcluded, g.SMAPEExcluded, w.SMAPEExcluded)
	}
	n := 3
	for _, f := range []struct {
		name string
		g, w *float64
	}{{"me", g.ME, w.ME}, {"mae", g.MAE, w.MAE}, {"rmse", g.RMSE, w.RMSE}, {"mape", g.MAPE, w.MAPE},
		{"smape", g.SMAPE, w.SMAPE}, {"wape", g.WAPE, w.WAPE}, {"mase", g.MASE, w.MASE}} {
		n++
		switch {
		case f.w == nil || f.g == nil:
			if f.w != f.g && (f.w == nil || f.g == nil) {
				t.Errorf("%s %s: ours %v, golden %v (null mismatch)", where, f.name, deref(f.g), deref(f.w))
			}
		case !closeRel(*f.g, *f.w, 1e-9):
			t.Errorf("%s %s: ours %.17g, golden %.17g", where, f.name, *f.g, *f.w)
		}
	}
	return n
}

func deref(p *float64) any {
	if p == nil {
		return nil
	}
	return *p
}

func closeRel(a, b, tol float64) bool {
	return a == b || math.Abs(a-b) <= tol*math.Max(math.Abs(a), math.Abs(b))
}
