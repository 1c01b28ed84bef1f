package cli_test

import (
	"fmt"
	"path/filepath"
	"strings"
	"testing"
)

// TestDisclosureCommands sets a project's disclosure policy, uploads
// attributes through a profile that declares them, reads the version's
// report and publishes it above the threshold only with a reason, through
// the real command line and a real server on loopback.
func TestDisclosureCommands(t *testing.T) {
	dir := t.TempDir()
	data := filepath.Join(dir, "data")
	t.Setenv("FLOWCAT_MASTER_KEY", "")
	t.Setenv("FLOWCAT_MASTER_KEY_FILE", "")
	if code, _, errs := run(t, nil, "init", "--data", data); code != 0 {
		t.Fatalf("init: %s", errs)
	}
	_, serveErr, _ := background(t, "serve", "--data", data, "--addr", "127.0.0.1:0")
	url := waitFor(t, "the server's URL", func() string {
		if m := urlRE.FindStringSubmatch(serveErr.String()); m != nil {
			return m[1]
		}
		return ""
	})
	issue := func(args ...string) string {
		code, out, errs := run(t, nil, append([]string{"token", "issue", "--data", data}, args...)...)
		if code != 0 {
			t.Fatalf("token issue: %s", errs)
		}
		return strings.TrimSpace(out)
	}
	admin := issue("--role", "admin", "--subject", "ops")
	curator := issue("--role", "curator", "--subject", "cur", "--project", "ward")
	as := func(tok string) map[string]string {
		return map[string]string{"FLOWCAT_SERVER": url, "FLOWCAT_TOKEN": tok}
	}
	must := func(env map[string]string, args ...string) string {
		t.Helper()
		code, out, errs := run(t, env, args...)
		if code != 0 {
			t.Fatalf("%v: exit %d: %s%s", args, code, out, errs)
		}
		return out
	}
	must(as(admin), "project", "create", "ward")
	if out := must(as(curator), "disclosure-policy", "ward"); !strings.Contains(out, "k 5, max risk 0.200, suppression off") {
		t.Errorf("default policy: %q", out)
	}
	if code, _, errs := run(t, as(curator), "disclosure-policy", "ward", "--k", "3"); code != 2 || !strings.Contains(errs, "both --k and --max-risk") {
		t.Errorf("half a policy: exit %d %q", code, errs)
	}
	must(as(curator), "disclosure-policy", "ward", "--k", "3", "--max-risk", "0.34")
	files := t.TempDir()
	prof := writeFile(t, files, "ward.yaml", `fields:
  site: {value: ward}
  case_id: case
  event_type: type
  occurred_at: at
attributes:
  age: {column: AGE, role: quasi, type: age}
  dx: {column: DX, role: sensitive, type: code}
`)
	must(as(curator), "dataset", "create", "ward/stays", "--profile", prof)
	var b strings.Builder
	b.WriteString("case,type,at,AGE,DX\n")
	for i := range 7 {
		age := fmt.Sprint(40 + i%4)
		if i == 6 {
			age = "96"
		}
		fmt.Fprintf(&b, "c%d,arrival,2026-03-02T%02d:00:00Z,%s,D%d\n", i, 8+i, age, i%2)
	}
	must(as(curator), "upload", "ward/stays", writeFile(t, files, "s.csv", b.String()))
	out := must(as(curator), "disclosure", "ward/stays@1")
	for _, want := range []string{
		"7 cases in 2 classes over age", "k-anonymity: 1 (the project's k is 3)",
		"below k: 1 classes, 1 cases (14.3%)", "max 1.000 (1 cases)", "ABOVE the threshold",
		"l-diversity of dx: 1", "age alone already make a class of 1",
	} {
		if !strings.Contains(out, want) {
			t.Errorf("disclosure lacks %q:\n%s", want, out)
		}
	}
	if code, _, errs := run(t, as(curator), "publish", "ward/stays@1"); code == 0 || !strings.Contains(errs, "above the project's threshold") {
		t.Errorf("publish above the threshold: exit %d %q", code, errs)
	}
	if out := must(as(curator), "publish", "ward/stays@1", "--override-reason", "aggregate release approved"); !strings.Contains(out, "is published") {
		t.Errorf("publish with override: %q", out)
	}
	if out := must(as(curator), "--json", "versions", "ward/stays"); !strings.Contains(out, "aggregate release approved") {
		t.Errorf("the override is not on the version: %s", out)
	}

	// An event-level sensitive attribute is listed after the case-level
	// one, marked by its level: c0 and c1 (ages 40, 41: band 40-44, one
	// class) carry codes S1, S2 on their events; c2 (age 96: 90+) S1.
	prof2 := writeFile(t, files, "visits.yaml", `fields:
  site: {value: ward}
  case_id: case
  event_type: type
  occurred_at: at
attributes:
  age: {column: AGE, role: quasi, type: age}
  dx: {column: DX, role: sensitive, type: code}
  step_code: {column: CODE, role: sensitive, type: code, level: event}
`)
	must(as(curator), "dataset", "create", "ward/visits", "--profile", prof2)
	csv := "case,type,at,AGE,DX,CODE\n" +
		"c0,arrival,2026-03-02T08:00:00Z,40,D1,S1\nc0,departure,2026-03-02T09:00:00Z,40,D1,S2\n" +
		"c1,arrival,2026-03-02T08:30:00Z,41,D2,S1\nc2,arrival,2026-03-02T08:40:00Z,96,D1,S1\n"
	must(as(curator), "upload", "ward/visits", writeFile(t, files, "v.csv", csv))
	out = must(as(curator), "disclosure", "ward/visits@1")
	for _, want := range []string{"l-diversity of dx: 1", "l-diversity of step_code (event level): 1 (1 classes share one value, 1 cases)"} {
		if !strings.Contains(out, want) {
			t.Errorf("disclosure lacks %q:\n%s", want, out)
		}
	}
	if i, j := strings.Index(out, "l-diversity of dx"), strings.Index(out, "l-diversity of step_code"); i < 0 || j < i {
		t.Errorf("the event-level attribute is not after the case-level one:\n%s", out)
	}
}
