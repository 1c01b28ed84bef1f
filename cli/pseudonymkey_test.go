package cli_test

import (
	"encoding/json"
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// TestPseudonymKeyRotate rotates a project's pseudonym key from the
// command line (refused while the server runs), reads the --json answer
// and the audit entry, and sends the held events again after it: they are
// recognised as held, so the carried data matches the new generation.
func TestPseudonymKeyRotate(t *testing.T) {
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
	if code, _, errs := run(t, nil, "pseudonym-key", "rotate", "flow", "--data", data); code == 0 || !strings.Contains(errs, "stop the server") {
		t.Fatalf("rotate while serving: exit %d %q", code, errs)
	}
	stop()
	if code, _, errs := run(t, nil, "pseudonym-key", "rotate", "nope", "--data", data); code == 0 || !strings.Contains(errs, "not found") {
		t.Fatalf("rotate an unknown project: exit %d %q", code, errs)
	}
	code, out, errs := run(t, nil, "--json", "pseudonym-key", "rotate", "flow", "--data", data)
	if code != 0 {
		t.Fatalf("rotate: exit %d %q", code, errs)
	}
	var rot struct {
		Project    string `json:"project"`
		OldKeyID   string `json:"old_key_id"`
		NewKeyID   string `json:"new_key_id"`
		Generation int    `json:"generation"`
	}
	if err := json.Unmarshal([]byte(out), &rot); err != nil {
		t.Fatalf("--json output %q: %v", out, err)
	}
	if rot.Project != "flow" || rot.Generation != 2 || !strings.HasPrefix(rot.NewKeyID, "pk-") || rot.NewKeyID == rot.OldKeyID {
		t.Fatalf("--json output %q", out)
	}
	if strings.Contains(out, "RAW-") {
		t.Fatal("the answer holds a raw identifier")
	}
	code, aud, errs := run(t, nil, "--json", "audit", "--data", data, "--action", "key.project_rotate")
	if code != 0 || !strings.Contains(aud, rot.OldKeyID) || !strings.Contains(aud, rot.NewKeyID) {
		t.Fatalf("audit: %d %q %q", code, aud, errs)
	}
	as, stop = serve()
	defer stop()
	more := filepath.Join(t.TempDir(), "m.csv")
	os.WriteFile(more, []byte(night(1, "RAW")+"north,extra-1,P-1,R-1,arrival,consult,main,2026-03-02T20:00:00Z\n"), 0o600)
	if code, out, errs := run(t, as, "upload", "flow/v", more); code != 0 || !strings.Contains(out, "1 new event, 160 already held") {
		t.Fatalf("the same events after rotation: %d %q %q", code, out, errs)
	}
}
