package server

import (
	"os"
	"os/exec"
	"testing"
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
	t.Skip("skipped: no chromium on PATH; the browser tests drive Debian's chromium headless (apt-get install chromium; .ci/run installs it)")
	return ""
}
