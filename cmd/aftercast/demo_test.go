package main

import (
	"regexp"
	"strings"
	"testing"
)

// The demo end to end, under each error scale, on its own throwaway
// PostgreSQL: what the service judges agrees with the story the offline
// tests of package demo pin (TestDefaultSeedTellsTheStory), and the
// report's last line says what the mode did to the healthy substations.
func TestDemoErrorScales(t *testing.T) {
	t.Parallel()
	if testing.Short() {
		t.Skip("runs the whole demo twice")
	}
	for _, c := range []struct {
		mode   string
		states map[string]string // series-level state per substation
		last   string
	}{
		{"auto", map[string]string{"dh/kalkbro": "degraded (me)", "dh/lyngmark": "degraded (mae)", "dh/aaskrog": "within", "dh/birkedal": "within",
			"dh/engtoft": "within", "dh/fjordhavn": "within", "dh/moseled": "within", "dh/stenvig": "within"},
			"error scale auto (b̂ "},
		{"absolute", map[string]string{"dh/aaskrog": "insufficient_baseline", "dh/birkedal": "insufficient_baseline",
			"dh/engtoft": "insufficient_baseline", "dh/fjordhavn": "insufficient_baseline", "dh/moseled": "insufficient_baseline",
			"dh/stenvig": "insufficient_baseline"},
			"error scale absolute: errors are judged as they are, against a band that averages the backtest's summer and winter; " +
				"0 of 6 healthy substations paged in the winter, 6 could not be judged at the series level (insufficient_baseline: K_eff "},
	} {
		t.Run(c.mode, func(t *testing.T) {
			t.Parallel()
			code, out, errs := cliRun("demo", "--once", "--error-scale", c.mode)
			if code != 0 {
				t.Fatalf("exit %d\nstdout %s\nstderr %s", code, out, errs)
			}
			for series, state := range c.states {
				if !regexp.MustCompile(`(?m)^` + regexp.QuoteMeta(series) + `\s+` + regexp.QuoteMeta(state) + `\s`).MatchString(out) {
					t.Errorf("%s is not %s at the series level:\n%s", series, state, out)
				}
			}
			lines := strings.Split(strings.TrimSpace(out), "\n")
			if last := lines[len(lines)-1]; !strings.HasPrefix(last, c.last) {
				t.Errorf("last line\n%s\nwant it to begin\n%s", last, c.last)
			}
			if c.mode == "auto" && !strings.Contains(out, "0 of 6 healthy substations paged by chance;") {
				t.Errorf("a healthy substation paged under auto:\n%s", out)
			}
		})
	}
}

func TestDemoRejectsAnUnknownErrorScale(t *testing.T) {
	t.Parallel()
	code, _, errs := cliRun("demo", "--once", "--error-scale", "relative")
	if code == 0 || !strings.Contains(errs, "want auto or absolute") {
		t.Errorf("exit %d, stderr %q; want a usage error naming auto and absolute", code, errs)
	}
}
