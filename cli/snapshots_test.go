package cli_test

import (
	"encoding/json"
	"fmt"
	"io"
	"io/fs"
	"maps"
	"net"
	"os"
	"path/filepath"
	"regexp"
	"slices"
	"strings"
	"testing"
)

// TestSnapshotWorkflow drives drafts, publication, selectors, replace
// modes, pins, pull --pin from another address, retraction and the sweep
// of unreferenced files through the real
// command line and a real server on loopback.
func TestSnapshotWorkflow(t *testing.T) {
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
	curator := issue("--role", "curator", "--subject", "cur", "--project", "flow")
	member := issue("--role", "member", "--subject", "student", "--project", "flow")
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
	must(as(admin), "project", "create", "flow")
	out := must(as(curator), "dataset", "create", "flow/visits", "--drafts")
	if !strings.Contains(out, "drafts until published") {
		t.Errorf("dataset create: %q", out)
	}
	files := t.TempDir()
	must(as(curator), "upload", "flow/visits", writeFile(t, files, "n1.csv", night(1, "RAW")))
	must(as(curator), "upload", "flow/visits", writeFile(t, files, "n2.csv", night(2, "RAW")))

	// A member sees no draft: latest does not exist yet, @1 neither.
	if code, _, errs := run(t, as(member), "pull", "flow/visits", "-o", filepath.Join(dir, "p0")); code != 1 || !strings.Contains(errs, "no published version") {
		t.Errorf("member pull before publication: exit %d %q", code, errs)
	}
	if out := must(as(member), "versions", "flow/visits"); strings.Contains(out, "draft") {
		t.Errorf("member sees drafts:\n%s", out)
	}
	must(as(curator), "publish", "flow/visits@1")
	if code, _, errs := run(t, as(curator), "publish", "flow/visits@latest"); code != 2 || !strings.Contains(errs, "version's number") {
		t.Errorf("publish @latest: exit %d %q", code, errs)
	}
	out = must(as(curator), "versions", "flow/visits")
	if !strings.Contains(out, "published") || !strings.Contains(out, "draft") {
		t.Errorf("curator versions:\n%s", out)
	}

	// pull @latest is version 1; the pin pins it; @<prefix> and @<instant> find it.
	p1 := filepath.Join(dir, "p1")
	out = must(as(member), "pull", "flow/visits", "-o", p1)
	if !strings.Contains(out, "flow/visits@1") {
		t.Fatalf("pull latest: %q", out)
	}
	var lock struct {
		SnapshotID string `json:"snapshot_id"`
		Version    int
		Files      []struct{ SHA256, Path string }
	}
	lb, err := os.ReadFile(filepath.Join(p1, "flowcat.pin"))
	if err != nil {
		t.Fatal(err)
	}
	if err := json.Unmarshal(lb, &lock); err != nil || lock.Version != 1 || len(lock.Files) != 3 {
		t.Fatalf("lock %s: %v", lb, err)
	}
	out = must(as(member), "pull", "flow/visits@"+lock.SnapshotID[:10], "-o", filepath.Join(dir, "p2"))
	if !strings.Contains(out, "@1 ") {
		t.Errorf("pull by prefix: %q", out)
	}
	if code, _, errs := run(t, as(member), "pull", "flow/visits@2026-01-01T00:00:00Z", "-o", filepath.Join(dir, "p3")); code != 1 || !strings.Contains(errs, "no published version at") {
		t.Errorf("pull at an instant before any publication: exit %d %q", code, errs)
	}
	for _, bad := range []string{"flow/visits@v1", "flow/visits@abc", "flow/visits@2026-13-01T00:00:00Z"} {
		if code, _, errs := run(t, as(member), "pull", bad, "-o", filepath.Join(dir, "px")); code != 2 {
			t.Errorf("pull %s: exit %d %q, want 2", bad, code, errs)
		}
	}

	// The catalog at a second address (another loopback address,
	// forwarded to the server): pulling the same version there, by name
	// and by the pin, gives a directory identical to the first, pin
	// included.
	other := forward(t, strings.TrimPrefix(url, "http://"))
	p4, p4b := filepath.Join(dir, "p4"), filepath.Join(dir, "p4b")
	out = must(map[string]string{"FLOWCAT_TOKEN": member, "FLOWCAT_SERVER": other}, "pull", "--pin", filepath.Join(p1, "flowcat.pin"), "-o", p4)
	if !strings.Contains(out, "identical to") {
		t.Errorf("pull --pin: %q", out)
	}
	must(map[string]string{"FLOWCAT_TOKEN": member, "FLOWCAT_SERVER": other}, "pull", "flow/visits@1", "-o", p4b)
	want := treeBytes(t, p1)
	for _, p := range []string{p4, p4b} {
		if got := treeBytes(t, p); !equalTrees(got, want) {
			t.Errorf("%s differs from the first pull: %v vs %v", p, keys(got), keys(want))
		}
	}
	// A pin names no server: without --server or FLOWCAT_SERVER, a usage error.
	if code, _, errs := run(t, map[string]string{"FLOWCAT_TOKEN": member, "FLOWCAT_SERVER": ""}, "pull", "--pin", filepath.Join(p1, "flowcat.pin"), "-o", filepath.Join(dir, "p4c")); code != 2 || !strings.Contains(errs, "no server") {
		t.Errorf("pin without a server: exit %d %q", code, errs)
	}
	// The lock file of older releases (flowcat.lock, with its server and
	// time) is still read: by pull --pin, which takes its server, and by
	// verify, in a directory that has only it.
	var old map[string]any
	json.Unmarshal(lb, &old)
	delete(old, "pin_version")
	old["lock_version"], old["server"], old["pulled_at"] = 1, url, "2026-11-30T10:00:00Z"
	var kept []any
	for _, f := range old["files"].([]any) {
		if f.(map[string]any)["path"] != "quality.json" {
			kept = append(kept, f)
		}
	}
	old["files"] = kept
	ob, _ := json.Marshal(old)
	oldLock := writeFile(t, dir, "flowcat.lock", string(ob))
	p4d := filepath.Join(dir, "p4d")
	must(map[string]string{"FLOWCAT_TOKEN": member, "FLOWCAT_SERVER": ""}, "pull", "--lock", oldLock, "-o", p4d)
	os.MkdirAll(filepath.Join(dir, "p4e", "data"), 0o755)
	os.MkdirAll(filepath.Join(dir, "p4e", "cases"), 0o755)
	for _, f := range lock.Files {
		if f.Path != "quality.json" {
			b, _ := os.ReadFile(filepath.Join(p1, f.Path))
			os.WriteFile(filepath.Join(dir, "p4e", f.Path), b, 0o644)
		}
	}
	mb, _ := os.ReadFile(filepath.Join(p1, "manifest.json"))
	os.WriteFile(filepath.Join(dir, "p4e", "manifest.json"), mb, 0o644)
	os.WriteFile(filepath.Join(dir, "p4e", "flowcat.lock"), ob, 0o644)
	if out := must(nil, "verify", filepath.Join(dir, "p4e")); !strings.HasPrefix(out, "ok") {
		t.Errorf("verify of a directory with an old lock file: %q", out)
	}
	// A pin whose snapshot id the server does not have.
	forged := strings.Replace(string(lb), lock.SnapshotID, strings.Repeat("0", 64), 1)
	fp := writeFile(t, dir, "forged.pin", forged)
	if code, _, errs := run(t, as(member), "pull", "--pin", fp, "-o", filepath.Join(dir, "p5")); code != 1 || !strings.Contains(errs, "404") {
		t.Errorf("forged pin: exit %d %q", code, errs)
	}
	if _, err := os.Stat(filepath.Join(dir, "p5", "data")); err == nil {
		t.Error("a refused pull --pin wrote files")
	}

	// replace-window on the curator side, then publish it.
	fix := night(1, "RAW")
	fix = strings.Replace(fix, ",consult,", ",review,", -1)
	out = must(as(curator), "upload", "flow/visits", writeFile(t, files, "fix.csv", fix),
		"--mode", "replace-window", "--from", "2026-03-02T00:00:00Z", "--to", "2026-03-03T00:00:00Z")
	if !strings.Contains(out, "flow/visits@3") || !strings.Contains(out, "replace-window removed 160 rows of version 2") {
		t.Errorf("replace-window: %q", out)
	}
	if code, _, errs := run(t, as(curator), "upload", "flow/visits", writeFile(t, files, "fix2.csv", fix), "--mode", "replace-window", "--from", "2026-03-03T00:00:00Z", "--to", "2026-03-02T00:00:00Z"); code != 2 || !strings.Contains(errs, "is not before") {
		t.Errorf("window backwards: exit %d %q", code, errs)
	}
	if code, _, errs := run(t, as(curator), "upload", "flow/visits", writeFile(t, files, "fix3.csv", fix), "--mode", "replace-window", "--from", "2026-03-02T12:00:00Z", "--to", "2026-03-03T00:00:00Z"); code != 1 || !strings.Contains(errs, "outside the replaced window") {
		t.Errorf("events outside the window: exit %d %q", code, errs)
	}

	// Retraction: data answers 410 with the reason, metadata stays.
	must(as(curator), "retract", "flow/visits@1", "--reason", "test rows from the north site")
	if code, _, errs := run(t, as(member), "pull", "flow/visits@1", "-o", filepath.Join(dir, "p6")); code != 1 || !strings.Contains(errs, "410") || !strings.Contains(errs, "test rows from the north site") {
		t.Errorf("pull retracted: exit %d %q", code, errs)
	}
	if out := must(as(member), "versions", "flow/visits"); !strings.Contains(out, "retracted") {
		t.Errorf("versions after retraction:\n%s", out)
	}
	if code, _, errs := run(t, as(curator), "retract", "flow/visits@1", "--reason", "again"); code != 1 || !strings.Contains(errs, "409") {
		t.Errorf("retract twice: exit %d %q", code, errs)
	}

	// The sweep is for admins; nothing referenced goes. The older name
	// still works.
	if code, _, errs := run(t, as(curator), "sweep"); code != 1 || !strings.Contains(errs, "403") {
		t.Errorf("curator sweep: exit %d %q", code, errs)
	}
	for _, verb := range []string{"sweep", "gc"} {
		if out = must(as(admin), verb, "--grace", "0s"); !strings.Contains(out, "deleted 0") {
			t.Errorf("%s: %q", verb, out)
		}
	}
	must(as(curator), "publish", "flow/visits@3")
	must(as(member), "pull", "flow/visits@3", "-o", filepath.Join(dir, "p7"))
	if out := must(as(member), "verify", filepath.Join(dir, "p7")); !strings.Contains(out, "ok") && !strings.Contains(out, "verified") {
		t.Errorf("verify: %q", out)
	}
	// A pull that fails (here: a retracted version) leaves the earlier
	// pull in the same directory whole.
	if code, _, _ := run(t, as(member), "pull", "flow/visits@1", "-o", filepath.Join(dir, "p7")); code != 1 {
		t.Errorf("pull of a retracted version over p7: exit %d", code)
	}
	must(as(member), "verify", filepath.Join(dir, "p7"))
	// Pulling another version into it replaces its files, when told to.
	must(as(curator), "publish", "flow/visits@2")
	must(as(member), "pull", "flow/visits@2", "-o", filepath.Join(dir, "p7"), "--replace")
	must(as(member), "verify", filepath.Join(dir, "p7"))
	ents, _ := os.ReadDir(filepath.Join(dir, "p7", "data"))
	if len(ents) != 2 {
		t.Errorf("p7/data holds %d files after pulling version 2 (two files), want 2", len(ents))
	}
}

// TestViewCommands covers summary, export, bundle, cite and diff through
// the command line.
func TestViewCommands(t *testing.T) {
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
	tok := func(args ...string) map[string]string {
		code, out, errs := run(t, nil, append([]string{"token", "issue", "--data", data}, args...)...)
		if code != 0 {
			t.Fatalf("token issue: %s", errs)
		}
		return map[string]string{"FLOWCAT_SERVER": url, "FLOWCAT_TOKEN": strings.TrimSpace(out)}
	}
	admin, member := tok("--role", "admin", "--subject", "ops"), tok("--role", "member", "--subject", "s", "--project", "flow")
	must := func(env map[string]string, args ...string) string {
		t.Helper()
		code, out, errs := run(t, env, args...)
		if code != 0 {
			t.Fatalf("%v: exit %d: %s%s", args, code, out, errs)
		}
		return out
	}
	must(admin, "project", "create", "flow")
	must(admin, "dataset", "create", "flow/visits")
	files := t.TempDir()
	must(admin, "upload", "flow/visits", writeFile(t, files, "n1.csv", night(1, "RAW")))
	must(admin, "upload", "flow/visits", writeFile(t, files, "n2.csv", night(2, "RAW")))

	out := must(member, "summary", "flow/visits")
	for _, want := range []string{"arrival", "wait", "main", "consult"} {
		if !strings.Contains(strings.ToLower(out), want) {
			t.Errorf("summary text lacks %q:\n%s", want, out)
		}
	}
	var sum struct {
		Events int `json:"events"`
	}
	if err := json.Unmarshal([]byte(must(member, "summary", "flow/visits@1", "--json")), &sum); err != nil || sum.Events != 160 {
		t.Errorf("summary @1 --json: %+v %v", sum, err)
	}
	if err := json.Unmarshal([]byte(must(member, "summary", "flow/visits", "--json", "--from", "2026-03-03T00:00:00Z")), &sum); err != nil || sum.Events != 160 {
		t.Errorf("filtered summary: %+v %v", sum, err)
	}

	csvPath := filepath.Join(dir, "starts.csv")
	must(member, "export", "flow/visits", "-o", csvPath, "--format", "csv", "--type", "start", "--columns", "occurred_at,case_id")
	b, err := os.ReadFile(csvPath)
	if err != nil || !strings.HasPrefix(string(b), "case_id,occurred_at\r\n") || strings.Count(string(b), "\r\n") != 81 {
		t.Errorf("export csv: %v %q", err, firstLine(string(b)))
	}
	if code, _, errs := run(t, member, "export", "flow/visits", "-o", csvPath, "--columns", "ward"); code != 1 || !strings.Contains(errs, "unknown column") {
		t.Errorf("export with a bad column: exit %d %q", code, errs)
	}
	must(member, "bundle", "flow/visits@2", "-o", filepath.Join(dir, "v2.zip"), "--format", "zip")
	if fi, err := os.Stat(filepath.Join(dir, "v2.zip")); err != nil || fi.Size() < 1000 {
		t.Errorf("bundle: %v", err)
	}
	if out := must(member, "cite", "flow/visits@2"); !strings.Contains(out, "cff-version: 1.2.0") {
		t.Errorf("cite: %q", out)
	}
	out = must(member, "diff", "flow/visits@1", "flow/visits@2")
	if !strings.Contains(out, "160 events added, 0 removed") || !strings.Contains(out, "2026-03-03") {
		t.Errorf("diff:\n%s", out)
	}
	if code, _, _ := run(t, member, "diff", "flow/visits@1", "other/visits@2"); code != 2 {
		t.Errorf("diff across datasets: exit %d, want 2", code)
	}

	// Nightly trend and a drift alert: five more nights, then an export
	// that lost its queue column.
	for d := 3; d <= 7; d++ {
		must(admin, "upload", "flow/visits", writeFile(t, files, fmt.Sprintf("n%d.csv", d), night(d, "RAW")))
	}
	lost := strings.ReplaceAll(strings.ReplaceAll(night(8, "RAW"), ",queue,", ","), ",consult,main,", ",consult,")
	out = must(admin, "upload", "flow/visits", writeFile(t, files, "n8.csv", lost))
	if !strings.Contains(out, "alert field_dropped at north") {
		t.Errorf("upload of a night without queue:\n%s", out)
	}
	out = must(member, "quality", "flow/visits", "--trend", "--site", "north")
	if !strings.Contains(out, "north") || strings.Count(out, "\nu") < 8 || !strings.Contains(out, "field_dropped") {
		t.Errorf("quality --trend:\n%s", out)
	}
	out = must(member, "alerts", "flow/visits")
	if !strings.Contains(out, "u8") || !regexp.MustCompile(`field_dropped +queue +0%`).MatchString(out) {
		t.Errorf("alerts:\n%s", out)
	}
	if out := must(member, "quality", "flow/visits"); !strings.Contains(out, "8 uploads") || !strings.Contains(out, "little's law") {
		t.Errorf("quality of the latest version:\n%s", out)
	}
	if code, _, _ := run(t, member, "quality", "flow/visits@2", "--trend"); code != 2 {
		t.Errorf("quality @2 --trend: exit %d, want 2", code)
	}
}

func firstLine(s string) string { l, _, _ := strings.Cut(s, "\n"); return l }

// forward listens on another loopback address (127.0.0.2) and forwards
// each connection to addr: the same catalog at a second address.
func forward(t *testing.T, addr string) string {
	t.Helper()
	ln, err := net.Listen("tcp", "127.0.0.2:0")
	if err != nil {
		t.Fatalf("a second loopback address: %v", err)
	}
	t.Cleanup(func() { ln.Close() })
	go func() {
		for {
			c, err := ln.Accept()
			if err != nil {
				return
			}
			go func() {
				defer c.Close()
				s, err := net.Dial("tcp", addr)
				if err != nil {
					return
				}
				defer s.Close()
				go io.Copy(s, c)
				io.Copy(c, s)
			}()
		}
	}()
	return "http://" + ln.Addr().String()
}

// treeBytes maps every file under dir (slash paths) to its bytes.
func treeBytes(t *testing.T, dir string) map[string]string {
	t.Helper()
	out := map[string]string{}
	filepath.WalkDir(dir, func(p string, d fs.DirEntry, err error) error {
		if err == nil && !d.IsDir() {
			b, _ := os.ReadFile(p)
			rel, _ := filepath.Rel(dir, p)
			out[filepath.ToSlash(rel)] = string(b)
		}
		return nil
	})
	return out
}

func equalTrees(a, b map[string]string) bool { return maps.Equal(a, b) }

func keys(m map[string]string) []string { return slices.Sorted(maps.Keys(m)) }
