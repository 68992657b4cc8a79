package web_test

import (
	"bytes"
	"context"
	"errors"
	"image"
	"image/png"
	"net/url"
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
	"strings"
	"testing"
	"time"
)

// chromium finds a Chromium binary on PATH, "" when there is none.
func chromium() string {
	for _, name := range []string{"chromium", "chromium-browser"} {
		if p, err := exec.LookPath(name); err == nil {
			return p
		}
	}
	return ""
}

// runChromium runs headless Chromium with a private profile, bounded by
// 60 s; on timeout the whole process group is killed.
func runChromium(t *testing.T, bin string, args ...string) []byte {
	t.Helper()
	ctx, cancel := context.WithTimeout(context.Background(), 60*time.Second)
	defer cancel()
	base := []string{"--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking", "--no-first-run",
		"--disable-component-update", "--disable-sync", "--disable-dev-shm-usage", "--hide-scrollbars",
		"--user-data-dir=" + t.TempDir()}
	cmd := exec.CommandContext(ctx, bin, append(base, args...)...)
	ownGroup(cmd)
	cmd.WaitDelay = 5 * time.Second
	var stdout, stderr bytes.Buffer
	cmd.Stdout, cmd.Stderr = &stdout, &stderr
	err := cmd.Run()
	if errors.Is(ctx.Err(), context.DeadlineExceeded) {
		t.Fatalf("chromium did not finish in 60 s; stderr:\n%s", stderr.String())
	}
	if err != nil {
		t.Fatalf("chromium: %v; stderr:\n%s", err, stderr.String())
	}
	return stdout.Bytes()
}

// artifactsDir is where screenshots are kept: $AFTERCAST_ARTIFACTS_DIR
// when set (CI keeps it), else a temporary directory.
func artifactsDir(t *testing.T) string {
	t.Helper()
	if d := os.Getenv("AFTERCAST_ARTIFACTS_DIR"); d != "" {
		if err := os.MkdirAll(d, 0o755); err != nil {
			t.Fatal(err)
		}
		return d
	}
	return t.TempDir()
}

// TestBrowser renders the pages in a real browser: the DOM after
// rendering must carry the states as text, the chart's band and the
// events, and a screenshot must show a drawn page.
func TestBrowser(t *testing.T) {
	t.Parallel()
	bin := chromium()
	if bin == "" {
		t.Skip("chromium is not on PATH: apt-get install -y chromium")
	}
	f := newFixture(t)
	page := f.srv.URL + "/series?" + url.Values{"series": {driftKey}, "model": {driftModel}}.Encode()
	dir := artifactsDir(t)

	t.Run("dom", func(t *testing.T) {
		t.Parallel()
		dom := string(runChromium(t, bin, "--dump-dom", page))
		for _, want := range []*regexp.Regexp{
			regexp.MustCompile(`<h1>.*<span class="state degraded" data-state="degraded">.*degraded</span>`),
			regexp.MustCompile(`(?s)<svg id="lead-chart"[^>]*>.*<path class="band" d="M[^"]+"`),
			regexp.MustCompile(`(?s)<svg id="lead-chart"[^>]*>.*<path class="expected" d="M`),
			regexp.MustCompile(`(?s)<svg id="lead-chart"[^>]*>.*<path class="live" d="M`),
			regexp.MustCompile(`(?s)<svg id="origin-chart"[^>]*>.*<path class="band" d="M`),
			regexp.MustCompile(`<li><span class="state improved" data-state="improved">.*improved</span> <span class="leads">1-3</span></li>`),
			regexp.MustCompile(`(?s)<table id="events">.*<tbody>\s*<tr>`),
			// The state's onset in data time; the wall clock only as noticed.
			regexp.MustCompile(`<dt>state</dt><dd><span class="state degraded"[^>]*>.*</span> <span class="muted">since the <time datetime="[^"]+">\d\d:\d\d UTC origin of \d+ \w+( \d{4})?</time>, \d+ origins ago</span></dd>`),
			regexp.MustCompile(`<dt>noticed at</dt><dd><time datetime="[^"]+">`),
		} {
			if !want.MatchString(dom) {
				t.Errorf("rendered DOM lacks %s", want)
			}
		}
		if strings.Contains(dom, "<script") {
			t.Error("the page carries a script")
		}
		dom = string(runChromium(t, bin, "--dump-dom", f.srv.URL+"/"))
		if !regexp.MustCompile(`If every series is healthy, about <b>[0-9.]+</b> pages a week are expected by chance`).MatchString(dom) {
			t.Error("the rendered overview does not give the chance pages a week")
		}
	})

	t.Run("screenshot", func(t *testing.T) {
		t.Parallel()
		for _, shot := range []struct{ name, url string }{{"status.png", page}, {"overview.png", f.srv.URL + "/"}} {
			path := filepath.Join(dir, shot.name)
			if err := os.Remove(path); err != nil && !errors.Is(err, os.ErrNotExist) {
				t.Fatal(err) // a stale screenshot must not stand in for a new one
			}
			runChromium(t, bin, "--screenshot="+path, "--window-size=1280,1600", shot.url)
			t.Logf("screenshot of %s: %s", shot.url, path)
			b, err := os.ReadFile(path)
			if err != nil {
				t.Fatalf("no screenshot: %v", err)
			}
			img, err := png.Decode(bytes.NewReader(b))
			if err != nil {
				t.Fatalf("screenshot is not a PNG: %v", err)
			}
			if got := img.Bounds().Size(); got.X != 1280 || got.Y != 1600 {
				t.Errorf("screenshot is %v, want 1280×1600", got)
			}
			colours, teal, band := census(img)
			t.Logf("%s: %d colours, %d live-teal and %d band pixels", shot.name, colours, teal, band)
			if colours < 16 {
				t.Errorf("%s has %d colours: nothing much was drawn", shot.name, colours)
			}
			if shot.name == "status.png" && (teal < 1500 || band < 30000) {
				t.Errorf("%s: %d pixels of the live line's teal and %d of the band's slate; the charts did not render", shot.name, teal, band)
			}
		}
	})
}

// census counts an image's distinct colours and its pixels near the live
// line's teal (#0f8b8d) and the band's pale slate (#dfe5eb).
func census(img image.Image) (colours, teal, band int) {
	seen := map[uint32]bool{}
	near := func(r, g, b uint32, want [3]uint32) bool {
		d := func(a, b uint32) uint32 {
			if a > b {
				return a - b
			}
			return b - a
		}
		return d(r, want[0]) <= 4 && d(g, want[1]) <= 4 && d(b, want[2]) <= 4
	}
	bd := img.Bounds()
	for y := bd.Min.Y; y < bd.Max.Y; y++ {
		for x := bd.Min.X; x < bd.Max.X; x++ {
			r, g, b, _ := img.At(x, y).RGBA()
			r, g, b = r>>8, g>>8, b>>8
			seen[r<<16|g<<8|b] = true
			if near(r, g, b, [3]uint32{0x0f, 0x8b, 0x8d}) {
				teal++
			}
			if near(r, g, b, [3]uint32{0xdf, 0xe5, 0xeb}) {
				band++
			}
		}
	}
	return len(seen), teal, band
}
