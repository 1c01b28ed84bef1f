package server

import (
	"bytes"
	"context"
	"fmt"
	"net/http"
	"os"
	"os/exec"
	"strconv"
	"strings"
	"testing"
	"time"

	"github.com/flowcat-catalog/flowcat/catalog"
	"github.com/flowcat-catalog/flowcat/quality"
)

// chromium finds a headless browser, or skips the test where none is
// installed; CI (CI=true) installs one, so there a missing browser fails.
func chromium(t *testing.T) string {
	t.Helper()
	for _, name := range []string{"chromium", "chromium-browser", "google-chrome"} {
		if p, err := exec.LookPath(name); err == nil {
			return p
		}
	}
	if os.Getenv("CI") != "" {
		t.Fatal("no chromium on PATH; .ci/run installs it")
	}
	t.Skip("no chromium on PATH")
	return ""
}

// TestLandingPageInBrowser loads the landing page in a real headless
// browser: its script must have asked the API for health and shown it.
func TestLandingPageInBrowser(t *testing.T) {
	bin := chromium(t)
	e := newEnv(t)
	ctx, cancel := context.WithTimeout(context.Background(), 60*time.Second)
	defer cancel()
	cmd := exec.CommandContext(ctx, bin,
		"--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
		"--disable-background-networking", "--disable-component-update", "--disable-sync",
		"--user-data-dir="+t.TempDir(), "--virtual-time-budget=5000",
		"--dump-dom", e.srv.URL+"/")
	var out, errb bytes.Buffer
	cmd.Stdout, cmd.Stderr = &out, &errb
	if err := cmd.Run(); err != nil {
		t.Fatalf("chromium: %v\n%s", err, errb.String())
	}
	dom := out.String()
	for _, want := range []string{
		`<strong id="status">up, schema v1</strong>`, // the script ran and the API answered
		`href="/api/v1/schema"`,
		"still personal data",
		"not advice on any patient",
	} {
		if !strings.Contains(dom, want) {
			t.Errorf("rendered page lacks %q:\n%s", want, dom)
		}
	}
	// A screenshot, kept when FLOWCAT_SCREENSHOT names a file, for a look.
	if shot := os.Getenv("FLOWCAT_SCREENSHOT"); shot != "" {
		sc := exec.CommandContext(ctx, bin, "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic",
			"--no-first-run", "--disable-background-networking", "--disable-component-update", "--disable-sync",
			"--user-data-dir="+t.TempDir(), "--virtual-time-budget=5000", "--window-size=900,700",
			"--screenshot="+shot, e.srv.URL+"/")
		if b, err := sc.CombinedOutput(); err != nil {
			t.Errorf("screenshot: %v\n%s", err, b)
		}
	}
}

// dumpDOM loads url in headless chromium and returns the DOM after its
// scripts ran.
func dumpDOM(t *testing.T, bin, url string) string {
	t.Helper()
	ctx, cancel := context.WithTimeout(context.Background(), 60*time.Second)
	defer cancel()
	cmd := exec.CommandContext(ctx, bin,
		"--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
		"--disable-background-networking", "--disable-component-update", "--disable-sync",
		"--user-data-dir="+t.TempDir(), "--virtual-time-budget=5000", "--dump-dom", url)
	var out, errb bytes.Buffer
	cmd.Stdout, cmd.Stderr = &out, &errb
	if err := cmd.Run(); err != nil {
		t.Fatalf("chromium: %v\n%s", err, errb.String())
	}
	return out.String()
}

// svgRects counts the bars of the chart with the given id in a DOM dump.
func svgRects(dom, id string) int {
	i := strings.Index(dom, `<svg id="`+id+`"`)
	if i < 0 {
		return -1
	}
	j := strings.Index(dom[i:], "</svg>")
	return strings.Count(dom[i:i+j], "<rect")
}

// TestVersionPageInBrowser renders a version's page in a real browser
// with a member's token and checks it against the API's own figures.
func TestVersionPageInBrowser(t *testing.T) {
	bin := chromium(t)
	e, ds, member := viewsEnv(t)
	var v catalog.Version
	e.decode(e.get(ds+"/versions/2", member), &v)
	var sum struct {
		Events       int `json:"events"`
		LengthOfStay struct {
			Histogram struct {
				Counts []int `json:"counts"`
			} `json:"histogram"`
		} `json:"length_of_stay"`
	}
	e.decode(e.get(ds+"/versions/2/summary", member), &sum)
	var rep quality.Report
	e.decode(e.get(ds+"/versions/2/quality", member), &rep)

	dom := dumpDOM(t, bin, e.srv.URL+"/view/ward/events/2#token="+member)
	for _, want := range []string{
		`data-events="` + strconv.Itoa(sum.Events) + `"`,
		v.SnapshotID.String(),
		fmt.Sprintf("Score %.1f of 100 over %d accepted", *rep.Score, rep.Rows.Accepted),
		"<td>triage</td>",
		"flowcat pull ward/events@2 -o DIR",
		"not advice on any patient",
	} {
		if !strings.Contains(dom, want) {
			t.Errorf("version page lacks %q", want)
		}
	}
	if n := svgRects(dom, "arrivals-hod"); n != 24 {
		t.Errorf("arrivals chart has %d bars, want 24", n)
	}
	if n := svgRects(dom, "los-hist"); n != len(sum.LengthOfStay.Histogram.Counts) || n == 0 {
		t.Errorf("length-of-stay chart has %d bars, want the %d bins of the summary", n, len(sum.LengthOfStay.Histogram.Counts))
	}
	if strings.Contains(dom, member) {
		t.Error("the page shows the token")
	}
	if t.Failed() {
		t.Logf("DOM:\n%s", dom)
	}

	// A retracted version: its metadata shows with the reason, its summary the 410.
	e.mustStatus(e.postJSON(ds+"/versions/1/retract", e.admin, map[string]string{"reason": "a test export"}), http.StatusOK, "retract")
	dom = dumpDOM(t, bin, e.srv.URL+"/view/ward/events/1#token="+member)
	for _, want := range []string{"Retracted: a test export", "Summary: 410"} {
		if !strings.Contains(dom, want) {
			t.Errorf("retracted version page lacks %q:\n%s", want, dom)
		}
	}
	// No token: the page says what the API said.
	if dom = dumpDOM(t, bin, e.srv.URL+"/view/ward/events"); !strings.Contains(dom, "401") {
		t.Errorf("page without a token does not show the 401:\n%s", dom)
	}
}
