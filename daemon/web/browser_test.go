package web_test

import (
	"bytes"
	"context"
	"net/http/httptest"
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
	"strings"
	"testing"
	"time"
)

// envScreens names a folder where TestBrowser also keeps its screenshots
// (for looking at them; by default they go to a temporary folder).
const envScreens = "CURVEWATCH_SCREENSHOTS"

// chromium finds the headless browser, failing the test with how to get
// it.
func chromium(t *testing.T) string {
	t.Helper()
	for _, name := range []string{"chromium", "chromium-browser", "google-chrome"} {
		if p, err := exec.LookPath(name); err == nil {
			return p
		}
	}
	t.Fatal("no chromium for the dashboard's browser test: apt-get install -y chromium")
	return ""
}

// browse loads url in headless Chromium, lets the page's scripts and
// fetches run, and returns the DOM after them and the console lines that
// Chromium logged. With shot set it also saves a screenshot there.
func browse(t *testing.T, bin, url, shot string) (dom, console string) {
	t.Helper()
	args := func(extra ...string) []string {
		return append([]string{"--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
			"--no-first-run", "--disable-extensions", "--hide-scrollbars", "--user-data-dir=" + t.TempDir(),
			"--enable-logging=stderr", "--v=0", "--virtual-time-budget=20000"}, extra...)
	}
	run := func(a []string) (string, string) {
		ctx, cancel := context.WithTimeout(context.Background(), 90*time.Second)
		defer cancel()
		cmd := exec.CommandContext(ctx, bin, a...)
		var out, errb bytes.Buffer
		cmd.Stdout, cmd.Stderr = &out, &errb
		if err := cmd.Run(); err != nil {
			t.Fatalf("chromium %s: %v\n%s", strings.Join(a, " "), err, errb.String())
		}
		return out.String(), errb.String()
	}
	dom, console = run(args("--dump-dom", url))
	if shot != "" {
		_, more := run(args("--screenshot="+shot, "--window-size=1400,3000", url))
		console += more
	}
	return dom, console
}

// consoleProblems picks the page's console errors and failed loads out of
// Chromium's log.
var consoleProblems = regexp.MustCompile(`(?m)^.*(CONSOLE[:(]\d+.*|Uncaught.*|Failed to load resource.*|Refused to .*)$`)

var attr = func(name string) *regexp.Regexp {
	return regexp.MustCompile(`<body[^>]*\s` + name + `="([^"]*)"`)
}

// TestBrowser draws the fleet page and each kind of model page in
// headless Chromium against the seeded scenario, and checks that the
// scripts ran without errors and drew what they should.
func TestBrowser(t *testing.T) {
	t.Parallel()
	bin := chromium(t)
	f := newFixture(t, "browser-token")
	ts := httptest.NewServer(f.mux)
	t.Cleanup(ts.Close)
	// The model page is always photographed (in a temporary folder);
	// with CURVEWATCH_SCREENSHOTS set, every page is, into that folder.
	shots, all := os.Getenv(envScreens), true
	if shots == "" {
		shots, all = t.TempDir(), false
	} else if err := os.MkdirAll(shots, 0o755); err != nil {
		t.Fatal(err)
	}

	cases := []struct {
		name, path string
		check      func(t *testing.T, dom string)
	}{
		{"fleet", "/", func(t *testing.T, dom string) {
			for _, m := range []string{sondeModel, emptyModel, failingModel, newModel} {
				if !strings.Contains(dom, `data-model="`+m+`"`) {
					t.Errorf("the fleet table has no row for %s", m)
				}
			}
			if !strings.Contains(dom, `class="chip chip-shifted"`) || !strings.Contains(dom, `class="chip chip-failing"`) {
				t.Errorf("state chips missing")
			}
		}},
		{"model", "/models/" + sondeModel, func(t *testing.T, dom string) {
			if m := regexp.MustCompile(`id="curves"[^>]*data-terms="([^"]*)"`).FindStringSubmatch(dom); m == nil || m[1] != "water_temp,flow" {
				t.Errorf("drawn curves %v, want water_temp,flow", m)
			}
			if n := strings.Count(dom, `class="chart curve-chart"`); n != 2 {
				t.Errorf("%d curve charts, want 2", n)
			}
			// Each compared curve: a band, the reference and current
			// lines, the difference band and line.
			for _, cls := range []string{"band band-ref", "series series-ref", "series series-cur", "band band-diff", "series series-diff"} {
				if n := strings.Count(dom, `class="`+cls+`"`); n != 2 {
					t.Errorf("%d paths of class %q, want 2", n, cls)
				}
			}
			if !strings.Contains(dom, `class="outside"`) {
				t.Errorf("no outside-the-band interval drawn for water_temp")
			}
			if !regexp.MustCompile(`water_temp: shifted</strong> — the new curve leaves the 99% band between [0-9.]+ and [0-9.]+`).MatchString(dom) {
				t.Errorf("no verdict in words for water_temp")
			}
			if n := strings.Count(dom, `class="chart heatmap"`); n != 3 {
				t.Errorf("%d heat maps, want 3 (reference, current, difference)", n)
			}
			if n := strings.Count(dom, `class="chart intervals"`); n != 2 {
				t.Errorf("%d interval charts, want 2 (conductivity, site)", n)
			}
			if n := strings.Count(dom, `class="chart lines-chart"`); n != 2 {
				t.Errorf("%d history charts, want 2", n)
			}
			if !strings.Contains(dom, `class="refline"`) {
				t.Errorf("the score history has no line at 1")
			}
			if n := strings.Count(dom, `class="pin"`); n == 0 {
				t.Errorf("no pin buttons on a writable server")
			}
			if !strings.Contains(dom, `data-state="firing"`) {
				t.Errorf("the firing alert is not listed")
			}
		}},
		{"no-data", "/models/" + emptyModel, func(t *testing.T, dom string) {
			if !strings.Contains(dom, "No refit has run yet") {
				t.Errorf("no word that nothing has run")
			}
		}},
		{"failing", "/models/" + failingModel, func(t *testing.T, dom string) {
			if !strings.Contains(dom, "no rows in the window") {
				t.Errorf("the failure's reason is not shown")
			}
		}},
		{"awaiting", "/models/" + newModel, func(t *testing.T, dom string) {
			if m := regexp.MustCompile(`id="curves"[^>]*data-terms="([^"]*)"`).FindStringSubmatch(dom); m == nil || m[1] != "water_temp,flow" {
				t.Errorf("drawn curves %v, want the fit's own curves", m)
			}
			if n := strings.Count(dom, `class="band band-cur"`); n != 2 {
				t.Errorf("%d bands of the fit alone, want 2", n)
			}
		}},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			t.Parallel()
			shot := ""
			if all || tc.name == "model" {
				shot = filepath.Join(shots, tc.name+".png")
			}
			dom, console := browse(t, bin, ts.URL+tc.path, shot)
			if m := attr("data-state").FindStringSubmatch(dom); m == nil || m[1] != "ready" {
				t.Fatalf("page state %v, want ready; load status: %s", m, loadStatus(dom))
			}
			if m := attr("data-errors").FindStringSubmatch(dom); m == nil || m[1] != "0" {
				t.Errorf("script errors %v: %v", m, attr("data-error-text").FindStringSubmatch(dom))
			}
			for _, line := range consoleProblems.FindAllString(console, -1) {
				t.Errorf("browser console: %s", line)
			}
			if !strings.Contains(dom, "These are statistical signals for people to review, not a compliance determination. Defer to local regulations and qualified professionals.") {
				t.Errorf("the caution is missing")
			}
			tc.check(t, dom)
			if shot == "" {
				return
			}
			if st, err := os.Stat(shot); err != nil || st.Size() < 10_000 {
				t.Errorf("screenshot %s: %v", shot, err)
			}
		})
	}
}

func loadStatus(dom string) string {
	m := regexp.MustCompile(`id="load-status"[^>]*>([^<]*)<`).FindStringSubmatch(dom)
	if m == nil {
		return "(none)"
	}
	return m[1]
}
