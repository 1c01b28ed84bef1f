package cli_test

import (
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// TestMasterKeyRotate rotates the master key of a real data directory:
// refused while a server holds the catalog; with the server stopped, the
// new key replaces DIR/master.key, the server starts under it and serves
// the version made before, and an upload of the same events is a
// duplicate (the pseudonyms did not change).
func TestMasterKeyRotate(t *testing.T) {
	data := filepath.Join(t.TempDir(), "data")
	t.Setenv("FLOWCAT_MASTER_KEY", "")
	t.Setenv("FLOWCAT_MASTER_KEY_FILE", "")
	if code, _, errs := run(t, nil, "init", "--data", data); code != 0 {
		t.Fatalf("init: %s", errs)
	}
	csv := filepath.Join(t.TempDir(), "n.csv")
	os.WriteFile(csv, []byte(night(1, "RAW")), 0o600)
	serve := func() (map[string]string, func() int) {
		_, serveErr, stop := background(t, "serve", "--data", data, "--addr", "127.0.0.1:0")
		url := waitFor(t, "the server's URL in its log", func() string {
			if m := urlRE.FindStringSubmatch(serveErr.String()); m != nil {
				return m[1]
			}
			return ""
		})
		_, tok, _ := run(t, nil, "token", "issue", "--data", data, "--role", "admin", "--subject", "ops")
		return map[string]string{"FLOWCAT_SERVER": url, "FLOWCAT_TOKEN": strings.TrimSpace(tok)}, stop
	}
	as, stop := serve()
	for _, args := range [][]string{{"project", "create", "flow"}, {"dataset", "create", "flow/v"}, {"upload", "flow/v", csv}} {
		if code, _, errs := run(t, as, args...); code != 0 {
			t.Fatalf("%v: %s", args, errs)
		}
	}
	if code, _, errs := run(t, nil, "master-key", "rotate", "--data", data); code == 0 || !strings.Contains(errs, "stop the server") {
		t.Fatalf("rotate while serving: exit %d %q", code, errs)
	}
	stop()
	before, _ := os.ReadFile(filepath.Join(data, "master.key"))
	code, out, errs := run(t, nil, "master-key", "rotate", "--data", data)
	if code != 0 || !strings.Contains(out, "re-sealed 1 project keys") {
		t.Fatalf("rotate: exit %d %q %q", code, out, errs)
	}
	after, _ := os.ReadFile(filepath.Join(data, "master.key"))
	if len(after) == 0 || string(after) == string(before) {
		t.Fatal("master.key was not replaced")
	}
	if _, err := os.Stat(filepath.Join(data, "master.key.new")); !os.IsNotExist(err) {
		t.Fatalf("master.key.new left behind: %v", err)
	}
	as, stop = serve()
	defer stop()
	if code, out, errs := run(t, as, "versions", "flow/v"); code != 0 || !strings.Contains(out, "published") {
		t.Fatalf("versions after rotation: %d %q %q", code, out, errs)
	}
	// The same events and one more: 160 of them are held already, so the
	// pseudonyms are the ones made before the rotation.
	more := filepath.Join(t.TempDir(), "m.csv")
	os.WriteFile(more, []byte(night(1, "RAW")+"north,extra-1,P-1,R-1,arrival,consult,main,2026-03-02T20:00:00Z\n"), 0o600)
	if code, out, errs := run(t, as, "upload", "flow/v", more); code != 0 || !strings.Contains(out, "1 new event, 160 already held") || !strings.Contains(out, ": 161 rows accepted, 0 rejected") {
		t.Fatalf("the same events after rotation: %d %q %q", code, out, errs)
	}
}
