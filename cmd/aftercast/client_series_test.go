package main

import (
	"strings"
	"testing"

	"github.com/aftercast/aftercast/server"
)

// The error scale is set on create, shown by get and list, and changed
// with series update, which says that the production period is re-judged.
func TestSeriesErrorScale(t *testing.T) {
	t.Parallel()
	addr := startService(t, server.Config{})
	run := func(args ...string) (int, string, string) {
		t.Helper()
		return cliRun(append(args[:2:2], append([]string{"--addr", addr}, args[2:]...)...)...)
	}
	if code, out, errs := run("series", "create", "--step", "1h", "--horizon", "4", "--error-scale", "absolute", "es/a"); code != 0 {
		t.Fatal(out, errs)
	}
	if _, out, _ := run("series", "get", "es/a"); !strings.Contains(out, "error scale     absolute") {
		t.Errorf("series get:\n%s", out)
	}
	if _, out, _ := run("series", "get", "--format", "json", "es/a"); !strings.Contains(out, `"error_scale": "absolute"`) {
		t.Errorf("series get --format json:\n%s", out)
	}
	code, out, errs := run("series", "update", "--error-scale", "auto", "--decision-leads", "2-4", "es/a")
	if code != 0 || out != "series es/a: error scale auto, decision leads 2-4; its production period is being re-judged "+
		"(events with cause baseline; `aftercast drift` shows when it is done)\n" {
		t.Errorf("update: exit %d\n%s%s", code, out, errs)
	}
	if code, out, _ := run("series", "update", "--error-scale", "auto", "es/a"); code != 0 || !strings.Contains(out, "nothing changed") {
		t.Errorf("update to the same: exit %d\n%s", code, out)
	}
	if _, out, _ := run("series", "list"); !strings.Contains(out, "ERROR SCALE") || !strings.Contains(strings.Join(strings.Fields(out), " "), "2-4 auto") {
		t.Errorf("series list:\n%s", out)
	}
	if code, _, errs := run("series", "update", "--error-scale", "seasonal", "es/a"); code != 2 || !strings.Contains(errs, "want auto or absolute") {
		t.Errorf("a bad mode: exit %d\n%s", code, errs)
	}
	if code, _, errs := run("series", "update", "--decision-leads", "9", "es/a"); code != 1 || !strings.Contains(errs, "decision_leads") {
		t.Errorf("a lead beyond the horizon: exit %d\n%s", code, errs)
	}
	if code, _, errs := run("series", "update", "es/a"); code != 2 || !strings.Contains(errs, "give --error-scale or --decision-leads") {
		t.Errorf("nothing to update: exit %d\n%s", code, errs)
	}
}
