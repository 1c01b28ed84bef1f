package server

import (
	"bytes"
	"context"
	"os"
	"os/exec"
	"strings"
	"testing"
	"time"
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
