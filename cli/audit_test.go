package cli_test

import (
	"bufio"
	"encoding/json"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/flowcat-catalog/flowcat/catalog"
)

// TestCuratorCommands runs a curator's commands against a real server on
// loopback: issuing a partner token of its project and listing and
// revoking it, editing a dataset's profile (a new revision), archiving
// it, and exporting its project's audit trail as JSON Lines, read back
// line by line.
func TestCuratorCommands(t *testing.T) {
	data := filepath.Join(t.TempDir(), "data")
	t.Setenv("FLOWCAT_MASTER_KEY", "")
	t.Setenv("FLOWCAT_MASTER_KEY_FILE", "")
	if code, _, errs := run(t, nil, "init", "--data", data); code != 0 {
		t.Fatalf("init: %s", errs)
	}
	_, serveErr, stop := background(t, "serve", "--data", data, "--addr", "127.0.0.1:0")
	defer stop()
	url := waitFor(t, "the server's URL in its log", func() string {
		if m := urlRE.FindStringSubmatch(serveErr.String()); m != nil {
			return m[1]
		}
		return ""
	})
	issue := func(args ...string) string {
		t.Helper()
		code, out, errs := run(t, nil, append([]string{"token", "issue", "--data", data}, args...)...)
		if code != 0 {
			t.Fatalf("token issue %v: %s", args, errs)
		}
		return strings.TrimSpace(out)
	}
	as := func(tok string) map[string]string {
		return map[string]string{"FLOWCAT_SERVER": url, "FLOWCAT_TOKEN": tok}
	}
	admin := as(issue("--role", "admin", "--subject", "ops"))
	cur := as(issue("--role", "curator", "--subject", "cur", "--project", "flow"))
	for _, args := range [][]string{{"project", "create", "flow"}, {"dataset", "create", "flow/visits"}} {
		if code, _, errs := run(t, admin, args...); code != 0 {
			t.Fatalf("%v: %s", args, errs)
		}
	}

	code, tok, errs := run(t, cur, "token", "issue", "--project", "flow", "--role", "partner", "--subject", "north", "--dataset", "visits", "--ttl", "24h")
	if code != 0 {
		t.Fatalf("curator issues a partner token: %s", errs)
	}
	partner := strings.TrimSpace(tok)
	if code, _, errs := run(t, cur, "token", "issue", "--project", "flow", "--role", "curator", "--subject", "x"); code == 0 || !strings.Contains(errs, "403") {
		t.Fatalf("curator issues a curator token: exit %d %q", code, errs)
	}
	code, out, _ := run(t, cur, "token", "list", "--project", "flow")
	jti := jtiOf(t, partner)
	if code != 0 || !strings.Contains(out, jti+"\tnorth\tpartner\tflow/visits") || strings.Contains(out, "\tcur\t") {
		t.Fatalf("curator's token list: %d %q", code, out)
	}
	csv := filepath.Join(t.TempDir(), "v.csv")
	os.WriteFile(csv, []byte("site,case_id,event_type,occurred_at\nnorth,c1,arrival,2024-01-01T08:00:00Z\n"), 0o600)
	if code, _, errs := run(t, as(partner), "upload", "flow/visits", csv, "--mode", "replace-all"); code == 0 || !strings.Contains(errs, "append") {
		t.Fatalf("partner replace-all: exit %d %q", code, errs)
	}
	if code, _, errs := run(t, as(partner), "upload", "flow/visits", csv); code != 0 {
		t.Fatalf("partner append: %s", errs)
	}
	if code, _, errs := run(t, cur, "token", "revoke", jti, "--project", "flow", "--reason", "contract ended"); code != 0 {
		t.Fatalf("curator revokes: %s", errs)
	}

	prof := filepath.Join(t.TempDir(), "p.yaml")
	os.WriteFile(prof, []byte("fields:\n  site: \"Site\"\n  case_id: \"Case\"\n  event_type: \"Kind\"\n  occurred_at: \"When\"\n"), 0o600)
	if code, out, errs := run(t, cur, "dataset", "edit", "flow/visits", "--profile", prof, "--title", "Visits"); code != 0 || !strings.Contains(out, "profile revision 2") {
		t.Fatalf("dataset edit: %d %q %q", code, out, errs)
	}
	if code, out, _ := run(t, cur, "dataset", "profiles", "flow/visits"); code != 0 || strings.Count(out, "\n") != 3 {
		t.Fatalf("dataset profiles: %d %q", code, out)
	}
	if code, _, errs := run(t, cur, "dataset", "archive", "flow/visits", "--reason", "study closed"); code != 0 {
		t.Fatalf("archive: %s", errs)
	}
	if code, out, _ := run(t, cur, "dataset", "list", "flow"); code != 0 || strings.Contains(out, "flow/visits") {
		t.Fatalf("an archived dataset is listed: %q", out)
	}
	if code, _, errs := run(t, cur, "dataset", "delete", "flow/visits", "--reason", "x"); code == 0 || !strings.Contains(errs, "admin") {
		t.Fatalf("curator deletes a dataset with a published version: exit %d %q", code, errs)
	}

	out = filepath.Join(t.TempDir(), "audit.jsonl")
	if code, _, errs := run(t, cur, "audit", "export", "-o", out); code != 0 || !strings.Contains(errs, "audit entries") {
		t.Fatalf("audit export: %d %q", code, errs)
	}
	f, err := os.Open(out)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	actions := map[string]bool{}
	sc := bufio.NewScanner(f)
	for sc.Scan() {
		var a catalog.AuditEntry
		if err := json.Unmarshal(sc.Bytes(), &a); err != nil {
			t.Fatalf("line %q: %v", sc.Text(), err)
		}
		if a.Project != "flow" {
			t.Errorf("the curator's export holds %+v", a)
		}
		actions[a.Action] = true
	}
	for _, want := range []string{"dataset.create", "token.issue", "version.create", "token.revoke", "dataset.edit", "dataset.archive", "denied.post.datasets.uploads", "audit.export"} {
		if !actions[want] {
			t.Errorf("no %s in the curator's export; %v", want, actions)
		}
	}
	if code, out, _ := run(t, cur, "audit", "--action", "dataset.", "--json"); code != 0 || !strings.Contains(out, `"dataset.archive"`) {
		t.Fatalf("audit --action dataset.: %d %q", code, out)
	}
	if code, _, errs := run(t, as(issue("--role", "member", "--subject", "m", "--project", "flow")), "audit"); code == 0 || !strings.Contains(errs, "403") {
		t.Fatalf("member reads the audit trail: exit %d %q", code, errs)
	}
}
