package cli_test

import (
	"bytes"
	"compress/gzip"
	"context"
	"encoding/json"
	"fmt"
	"os"
	"path/filepath"
	"regexp"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/flowcat-catalog/flowcat/cli"
)

// syncBuffer is a bytes.Buffer safe for a command running in a goroutine.
type syncBuffer struct {
	mu sync.Mutex
	b  bytes.Buffer
}

func (s *syncBuffer) Write(p []byte) (int, error) {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.b.Write(p)
}

func (s *syncBuffer) String() string {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.b.String()
}

// run runs one command to completion.
func run(t *testing.T, env map[string]string, args ...string) (code int, stdout, stderr string) {
	t.Helper()
	for k, v := range env {
		t.Setenv(k, v)
	}
	var out, errb bytes.Buffer
	code = cli.Main(context.Background(), args, strings.NewReader(""), &out, &errb)
	return code, out.String(), errb.String()
}

// background runs a long-lived command (serve, demo) until the test ends.
func background(t *testing.T, args ...string) (stdout, stderr *syncBuffer, stop func() int) {
	t.Helper()
	ctx, cancel := context.WithCancel(context.Background())
	stdout, stderr = &syncBuffer{}, &syncBuffer{}
	done := make(chan int, 1)
	go func() { done <- cli.Main(ctx, args, strings.NewReader(""), stdout, stderr) }()
	var once sync.Once
	code := -1
	stop = func() int {
		once.Do(func() {
			cancel()
			select {
			case code = <-done:
			case <-time.After(30 * time.Second):
				t.Error("command did not stop within 30 s of its context ending")
			}
		})
		return code
	}
	t.Cleanup(func() { stop() })
	return stdout, stderr, stop
}

// waitFor polls fn until it returns a non-empty string.
func waitFor(t *testing.T, what string, fn func() string) string {
	t.Helper()
	deadline := time.Now().Add(60 * time.Second)
	for time.Now().Before(deadline) {
		if s := fn(); s != "" {
			return s
		}
		time.Sleep(20 * time.Millisecond)
	}
	t.Fatalf("timed out waiting for %s", what)
	return ""
}

var urlRE = regexp.MustCompile(`"url":"(http://127\.0\.0\.1:\d+)"`)

// serveAdmin initializes a data folder, serves it on a free loopback port
// with flags, and returns the folder and the environment of an admin's
// token for the commands.
func serveAdmin(t *testing.T, flags ...string) (data string, env map[string]string) {
	t.Helper()
	data = filepath.Join(t.TempDir(), "data")
	t.Setenv("FLOWCAT_MASTER_KEY", "")
	t.Setenv("FLOWCAT_MASTER_KEY_FILE", "")
	if code, _, errs := run(t, nil, "init", "--data", data); code != 0 {
		t.Fatalf("init: exit %d: %s", code, errs)
	}
	_, serveErr, _ := background(t, append([]string{"serve", "--data", data, "--addr", "127.0.0.1:0"}, flags...)...)
	url := waitFor(t, "the server's URL in its log", func() string {
		if m := urlRE.FindStringSubmatch(serveErr.String()); m != nil {
			return m[1]
		}
		return ""
	})
	code, tok, errs := run(t, nil, "token", "issue", "--data", data, "--role", "admin", "--subject", "ops")
	if code != 0 {
		t.Fatalf("token: %s", errs)
	}
	return data, map[string]string{"FLOWCAT_SERVER": url, "FLOWCAT_TOKEN": strings.TrimSpace(tok)}
}

const header = "site,case_id,subject_id,resource_id,event_type,activity,queue,occurred_at\n"

// night writes a small export in the schema's own column names.
func night(day int, raw string) string {
	var b strings.Builder
	b.WriteString(header)
	base := time.Date(2026, 3, 1+day, 9, 0, 0, 0, time.UTC)
	for i := 0; i < 40; i++ {
		t0 := base.Add(time.Duration(i) * 7 * time.Minute)
		c := fmt.Sprintf("%s-%d-%d", raw, day, i)
		for j, ty := range []string{"arrival", "start", "complete", "departure"} {
			fmt.Fprintf(&b, "north,%s,P-%d,R-%d,%s,consult,main,%s\n", c, i%9, i%3, ty, t0.Add(time.Duration(j*5)*time.Minute).Format(time.RFC3339))
		}
	}
	return b.String()
}

func writeFile(t *testing.T, dir, name, data string) string {
	t.Helper()
	p := filepath.Join(dir, name)
	if err := os.WriteFile(p, []byte(data), 0o644); err != nil {
		t.Fatal(err)
	}
	return p
}

// TestEndToEnd covers what a partner, a curator and a student do, through
// the real command line against a real server on loopback: init, serve,
// token issue while serving, project and dataset creation, upload (and a
// retry, and a bad file), versions, quality, pull, verify and a tampered
// pull.
func TestEndToEnd(t *testing.T) {
	dir := t.TempDir()
	data := filepath.Join(dir, "data")
	t.Setenv("FLOWCAT_MASTER_KEY", "")
	t.Setenv("FLOWCAT_MASTER_KEY_FILE", "")
	if code, _, errs := run(t, nil, "init", "--data", data); code != 0 {
		t.Fatalf("init: exit %d: %s", code, errs)
	}
	for _, f := range []string{"master.key", "keys.json"} {
		fi, err := os.Stat(filepath.Join(data, f))
		if err != nil || fi.Mode().Perm() != 0o600 {
			t.Fatalf("%s: %v mode %v, want 0600", f, err, fi.Mode().Perm())
		}
	}
	if code, _, errs := run(t, nil, "init", "--data", data); code == 0 || !strings.Contains(errs, "already") {
		t.Errorf("second init: exit %d, %q", code, errs)
	}

	_, serveErr, stop := background(t, "serve", "--data", data, "--addr", "127.0.0.1:0")
	url := waitFor(t, "the server's URL in its log", func() string {
		if m := urlRE.FindStringSubmatch(serveErr.String()); m != nil {
			return m[1]
		}
		return ""
	})

	// Tokens are issued on the server host while the server runs.
	issue := func(args ...string) string {
		code, out, errs := run(t, nil, append([]string{"token", "issue", "--data", data}, args...)...)
		if code != 0 {
			t.Fatalf("token issue %v: exit %d: %s", args, code, errs)
		}
		tok := strings.TrimSpace(out)
		if strings.Count(tok, ".") != 2 || strings.ContainsAny(tok, " \n") {
			t.Fatalf("token issue printed %q, want only a JWT", out)
		}
		return tok
	}
	admin := issue("--role", "admin", "--subject", "ops")
	curator := issue("--role", "curator", "--subject", "cur", "--project", "flow")
	partner := issue("--role", "partner", "--subject", "north-site", "--dataset", "flow/visits")
	member := issue("--role", "member", "--subject", "student", "--project", "flow", "--ttl", "2h")
	as := func(tok string) map[string]string {
		return map[string]string{"FLOWCAT_SERVER": url, "FLOWCAT_TOKEN": tok}
	}

	if code, _, errs := run(t, as(admin), "project", "create", "flow", "--title", "Flow study"); code != 0 {
		t.Fatalf("project create: %d %s", code, errs)
	}
	if code, _, errs := run(t, as(curator), "dataset", "create", "flow/visits", "--timezone", "Europe/Lisbon"); code != 0 {
		t.Fatalf("dataset create: %d %s", code, errs)
	}
	// Citation metadata: set by the curator from a JSON file, read by a
	// member, refused with the member named when bad.
	meta := writeFile(t, t.TempDir(), "meta.json", `{"creators": [{"name": "Flow Lab"}], "license": "CC0-1.0", "keywords": ["clinic"]}`)
	if code, out, errs := run(t, as(curator), "dataset", "metadata", "flow/visits", "--set", meta); code != 0 || !strings.Contains(out, `"CC0-1.0"`) {
		t.Errorf("dataset metadata --set: exit %d, %q %q", code, out, errs)
	}
	if code, out, _ := run(t, as(member), "dataset", "metadata", "flow/visits"); code != 0 || !strings.Contains(out, "Flow Lab") {
		t.Errorf("dataset metadata: exit %d, %q", code, out)
	}
	badMeta := writeFile(t, t.TempDir(), "bad.json", `{"license": "Whatever-1.0"}`)
	if code, _, errs := run(t, as(curator), "dataset", "metadata", "flow/visits", "--set", badMeta); code != 1 || !strings.Contains(errs, "license") {
		t.Errorf("bad metadata: exit %d, %q", code, errs)
	}
	// A member may not create datasets: the server's 403 is exit 1.
	if code, _, errs := run(t, as(member), "dataset", "create", "flow/other"); code != 1 || !strings.Contains(errs, "403") {
		t.Errorf("member dataset create: exit %d, %q", code, errs)
	}

	files := t.TempDir()
	n1 := writeFile(t, files, "night1.csv", night(1, "RAWCASE"))
	code, out, errs := run(t, as(partner), "upload", "flow/visits", n1)
	if code != 0 || !strings.Contains(out, "flow/visits@1") || !strings.HasPrefix(out, "v1: ") || !strings.Contains(out, " new events, 0 already held, 0 changed") {
		t.Fatalf("upload: exit %d, out %q, err %q", code, out, errs)
	}
	// A cron retry of the same file changes nothing.
	code, out, _ = run(t, as(partner), "upload", "flow/visits", n1)
	if code != 0 || !strings.Contains(out, "v1 already holds this file") {
		t.Errorf("retry: exit %d, %q", code, out)
	}
	// The same events in other bytes (a blank line more) are all held.
	n1b := writeFile(t, files, "night1b.csv", night(1, "RAWCASE")+"\n")
	code, out, _ = run(t, as(partner), "upload", "flow/visits", n1b)
	if code != 0 || !strings.Contains(out, "v1 already holds every event: 0 new events,") || !strings.Contains(out, " already held, 0 changed; nothing stored") {
		t.Errorf("re-send in other bytes: exit %d, %q", code, out)
	}
	// A re-send with one broken row stores nothing and names the row it
	// lost: line, column, rule and the text read.
	n1c := writeFile(t, files, "night1c.csv", night(1, "RAWCASE")+"north,RAWCASE-1-0,P-0,R-0,arrival,consult,main,2026-03-02T25:00:00Z\n")
	code, out, _ = run(t, as(partner), "upload", "flow/visits", n1c)
	if code != 0 || !strings.Contains(out, " already held, 0 changed; 1 row rejected; nothing stored") ||
		!strings.Contains(out, "bad_timestamp: line 162, column occurred_at") || !strings.Contains(out, `"2026-03-02T25:00:00Z"`) {
		t.Errorf("re-send with a broken row: exit %d, %q", code, out)
	}
	if code, out, _ := run(t, as(curator), "uploads", "flow/visits"); code != 0 || !strings.Contains(out, " events already held") || !strings.Contains(out, "1 of 161 rows") {
		t.Errorf("uploads: exit %d, %q", code, out)
	}
	if code, out, errs := run(t, as(curator), "dataset", "changes", "flow/visits", "correct"); code != 0 || !strings.Contains(out, "taken as corrections") {
		t.Errorf("dataset changes: exit %d, %q %q", code, out, errs)
	}
	if code, _, errs := run(t, as(curator), "dataset", "changes", "flow/visits", "maybe"); code != 2 || !strings.Contains(errs, "want refuse or correct") {
		t.Errorf("dataset changes maybe: exit %d, %q", code, errs)
	}
	// A gzip file is read transparently.
	var gz bytes.Buffer
	zw := gzip.NewWriter(&gz)
	zw.Write([]byte(night(2, "RAWCASE")))
	zw.Close()
	n2 := writeFile(t, files, "night2.csv.gz", gz.String())
	if code, out, errs := run(t, as(partner), "upload", "flow/visits", n2, "--json"); code != 0 || !strings.Contains(out, `"version": 2`) {
		t.Fatalf("gzip upload: exit %d, %q %q", code, out, errs)
	}
	// A file missing a required column: exit 1 naming file, rule and column.
	bad := writeFile(t, files, "bad.csv", "site,subject_id,event_type,occurred_at\nnorth,P1,arrival,2026-03-01T09:00:00Z\n")
	code, _, errs = run(t, as(partner), "upload", "flow/visits", bad)
	if code != 1 || !strings.Contains(errs, "bad.csv") || !strings.Contains(errs, "missing_column") || !strings.Contains(errs, "case_id") {
		t.Errorf("bad upload: exit %d, %q", code, errs)
	}

	code, out, _ = run(t, as(member), "versions", "flow/visits", "--json")
	var versions []struct {
		Version    int    `json:"version"`
		SnapshotID string `json:"snapshot_id"`
	}
	if code != 0 || json.Unmarshal([]byte(out), &versions) != nil || len(versions) != 2 {
		t.Fatalf("versions: exit %d, %q", code, out)
	}
	if code, out, _ := run(t, as(member), "quality", "flow/visits@2"); code != 0 || !strings.Contains(out, "score") {
		t.Errorf("quality: exit %d, %q", code, out)
	}
	// A partner uploads but may not read versions.
	if code, _, errs := run(t, as(partner), "versions", "flow/visits"); code != 1 || !strings.Contains(errs, "403") {
		t.Errorf("partner versions: exit %d, %q", code, errs)
	}

	snap := filepath.Join(t.TempDir(), "snap")
	code, out, errs = run(t, as(member), "pull", "flow/visits@latest", "-o", snap)
	if code != 0 || !strings.Contains(out, "verified") {
		t.Fatalf("pull: exit %d, %q %q", code, out, errs)
	}
	checkPullLoadLines(t, out, snap, "Europe/Lisbon")
	lockBytes, err := os.ReadFile(filepath.Join(snap, "flowcat.pin"))
	if err != nil {
		t.Fatal(err)
	}
	var lock struct {
		Server, Dataset, SnapshotID string `json:"-"`
		Version                     int    `json:"version"`
		Files                       []struct {
			Path string `json:"path"`
		} `json:"files"`
	}
	json.Unmarshal(lockBytes, &lock)
	for _, want := range []string{`"flow/visits"`, versions[1].SnapshotID, `"quality.json"`} {
		if !bytes.Contains(lockBytes, []byte(want)) {
			t.Errorf("pin file lacks %s:\n%s", want, lockBytes)
		}
	}
	// The pin names the content, not where it came from.
	for _, not := range []string{url, "127.0.0.1", "server", "pulled_at"} {
		if bytes.Contains(lockBytes, []byte(not)) {
			t.Errorf("pin file names %s:\n%s", not, lockBytes)
		}
	}
	if lock.Version != 2 || len(lock.Files) != 4 || !strings.HasPrefix(lock.Files[2].Path, "cases/") {
		t.Fatalf("pin: version %d, %d files (two event files, the case table under cases/ and the quality report)", lock.Version, len(lock.Files))
	}
	if code, out, _ := run(t, nil, "verify", snap); code != 0 || !strings.HasPrefix(out, "ok") {
		t.Errorf("verify: exit %d, %q", code, out)
	}

	// Resume: a partial download is completed by a second pull.
	f0 := filepath.Join(snap, filepath.FromSlash(lock.Files[0].Path))
	whole, _ := os.ReadFile(f0)
	os.Remove(f0)
	os.WriteFile(f0+".part", whole[:len(whole)/2], 0o644)
	if code, _, errs := run(t, as(member), "pull", "flow/visits@2", "-o", snap); code != 0 {
		t.Fatalf("resumed pull: exit %d %s", code, errs)
	}
	if again, _ := os.ReadFile(f0); !bytes.Equal(again, whole) {
		t.Error("resumed pull did not restore the file byte for byte")
	}

	// One flipped byte fails verify with exit 1 naming the file.
	whole[len(whole)/2] ^= 0xff
	os.Chmod(f0, 0o644)
	os.WriteFile(f0, whole, 0o644)
	if code, out, _ := run(t, nil, "verify", snap); code != 1 || !strings.Contains(out, lock.Files[0].Path) {
		t.Errorf("verify of tampered file: exit %d, %q", code, out)
	}

	whole[len(whole)/2] ^= 0xff
	os.WriteFile(f0, whole, 0o644)
	if code, _, _ := run(t, nil, "verify", snap); code != 0 {
		t.Fatal("verify after undoing the flip")
	}

	// Pulling version 1 into the directory of version 2 is refused, and
	// changes nothing, unless told to replace it.
	if code, _, errs := run(t, as(member), "pull", "flow/visits@1", "-o", snap); code != 1 || !strings.Contains(errs, "--replace") || !strings.Contains(errs, "flow/visits@2") {
		t.Errorf("pull @1 into @2's directory: exit %d %s", code, errs)
	}
	if code, _, _ := run(t, nil, "verify", snap); code != 0 {
		t.Error("a refused pull changed the directory")
	}
	// With --replace, only version 1's file is left.
	if code, _, errs := run(t, as(member), "pull", "flow/visits@1", "-o", snap, "--replace"); code != 0 {
		t.Fatalf("pull @1 over @2: exit %d %s", code, errs)
	}
	if left, _ := filepath.Glob(filepath.Join(snap, "data", "*")); len(left) != 1 {
		t.Errorf("after pulling @1 over @2, data/ holds %v", left)
	}
	if code, _, _ := run(t, nil, "verify", snap); code != 0 {
		t.Error("verify of @1 pulled over @2 failed")
	}
	// Each tamper of the directory fails verify with exit 1.
	lockPath := filepath.Join(snap, "flowcat.pin")
	goodLock, _ := os.ReadFile(lockPath)
	extra := filepath.Join(snap, "data", strings.Repeat("ab", 32)+".parquet")
	for name, tamper := range map[string]func(){
		"extra file in data/": func() { os.WriteFile(extra, []byte("PAR1"), 0o644) },
		"lock path moved": func() {
			os.WriteFile(lockPath, bytes.Replace(goodLock, []byte(`"data/`), []byte(`"hidden/`), 1), 0o644)
		},
		"lock rows edited": func() {
			os.WriteFile(lockPath, regexp.MustCompile(`"rows": \d+`).ReplaceAll(goodLock, []byte(`"rows": 999999`)), 0o644)
		},
		"lock removed": func() { os.Remove(lockPath) },
	} {
		tamper()
		if code, out, errs := run(t, nil, "verify", snap); code != 1 {
			t.Errorf("verify with %s: exit %d, want 1: %s %s", name, code, out, errs)
		}
		os.Remove(extra)
		os.WriteFile(lockPath, goodLock, 0o644)
	}

	// The raw identifiers never reached the server's data directory.
	filepath.Walk(data, func(p string, fi os.FileInfo, err error) error {
		if err == nil && !fi.IsDir() {
			b, _ := os.ReadFile(p)
			if bytes.Contains(b, []byte("RAWCASE")) {
				t.Errorf("%s holds a raw identifier", p)
			}
		}
		return nil
	})
	if strings.Contains(serveErr.String(), "RAWCASE") {
		t.Error("the server log holds a raw identifier")
	}
	if code := stop(); code != 0 {
		t.Errorf("serve exited %d after its context ended: %s", code, serveErr.String())
	}
}

// TestHelpHidesToken: a token in the environment never shows in --help.
func TestHelpHidesToken(t *testing.T) {
	code, out, _ := run(t, map[string]string{"FLOWCAT_TOKEN": "secret-token-value-991"}, "versions", "--help")
	if code != 0 || strings.Contains(out, "secret-token-value-991") {
		t.Errorf("help: exit %d, shows the token: %v", code, strings.Contains(out, "secret-token-value-991"))
	}
}

func TestUsageErrorsExitTwo(t *testing.T) {
	env := map[string]string{"FLOWCAT_SERVER": "http://127.0.0.1:1", "FLOWCAT_TOKEN": "x"}
	for _, args := range [][]string{
		{"upload", "only-one-arg"},
		{"upload", "noslash", "file.csv"},
		{"pull", "p/d@x", "-o", "dir"},
		{"pull", "p/d"},
		{"versions", "p/d", "--no-such-flag"},
		{"init"},
		{"token", "issue", "--data", "x"},
		{"serve"},
		{"bogus"},
		{"project", "lst"},
		{"token", "bogus"},
		{"project"},
		{"validate", "x.csv", "--reject-above", "5"},
		{"verify", "/no/such/dir"},
	} {
		if code, _, errs := run(t, env, args...); code != 2 {
			t.Errorf("%v: exit %d, want 2 (%s)", args, code, errs)
		}
	}
	// No server configured is a usage error too.
	if code, _, errs := run(t, map[string]string{"FLOWCAT_SERVER": "", "FLOWCAT_TOKEN": ""}, "versions", "p/d"); code != 2 || !strings.Contains(errs, "FLOWCAT_SERVER") {
		t.Errorf("no server: exit %d, %q", code, errs)
	}
}

func TestServeRefusesWithoutMasterKey(t *testing.T) {
	data := filepath.Join(t.TempDir(), "d")
	t.Setenv("FLOWCAT_MASTER_KEY", "")
	t.Setenv("FLOWCAT_MASTER_KEY_FILE", "")
	if code, _, errs := run(t, nil, "init", "--data", data); code != 0 {
		t.Fatal(errs)
	}
	// Moving the key away (as production should) leaves serve without one.
	keyFile := filepath.Join(t.TempDir(), "master.key")
	if err := os.Rename(filepath.Join(data, "master.key"), keyFile); err != nil {
		t.Fatal(err)
	}
	code, _, errs := run(t, nil, "serve", "--data", data, "--addr", "127.0.0.1:0")
	if code != 1 || !strings.Contains(errs, "no master key") {
		t.Fatalf("serve without key: exit %d, %q", code, errs)
	}
	// A wrong key is refused too, naming the mismatch.
	t.Setenv("FLOWCAT_MASTER_KEY", strings.Repeat("ab", 32))
	if code, _, errs := run(t, nil, "serve", "--data", data, "--addr", "127.0.0.1:0"); code != 1 || !strings.Contains(errs, "master key") {
		t.Errorf("serve with the wrong key: exit %d, %q", code, errs)
	}
}

func TestValidateOffline(t *testing.T) {
	dir := t.TempDir()
	good := writeFile(t, dir, "good.csv", night(1, "C"))
	code, out, errs := run(t, nil, "validate", good)
	if code != 0 || !strings.Contains(out, "would be accepted") {
		t.Errorf("validate good: exit %d, %q %q", code, out, errs)
	}
	// Every event code unknown: every row rejected, exit 1.
	badRows := strings.ReplaceAll(night(1, "C"), ",arrival,", ",ARR,")
	badRows = strings.NewReplacer(",start,", ",BEG,", ",complete,", ",END,", ",departure,", ",OUT,").Replace(badRows)
	bad := writeFile(t, dir, "codes.csv", badRows)
	code, out, _ = run(t, nil, "validate", bad, "--json")
	var res struct {
		Accepted bool   `json:"accepted"`
		Reason   string `json:"reason"`
		Report   struct {
			Rows struct{ Rejected int } `json:"rows"`
		} `json:"report"`
	}
	if code != 1 || json.Unmarshal([]byte(out), &res) != nil || res.Accepted || res.Report.Rows.Rejected != 160 || !strings.HasPrefix(res.Reason, "no valid rows among 160") {
		t.Errorf("validate bad codes: exit %d, %+v, %q", code, res, out)
	}
	code, out, _ = run(t, nil, "validate", bad)
	if code != 1 || !strings.Contains(out, "would be REJECTED: no valid rows among 160") {
		t.Errorf("validate bad codes, text: exit %d, %q", code, out)
	}
	// An unknown zone is refused by the catalog's own rule, as a usage error.
	if code, _, errs := run(t, nil, "validate", good, "--timezone", "Mars/Olympus"); code != 2 || !strings.Contains(errs, "Mars/Olympus") {
		t.Errorf("validate --timezone Mars/Olympus: exit %d, %q", code, errs)
	}
	// With a profile that maps the codes, the same file passes.
	prof := writeFile(t, dir, "p.yaml", `fields:
  site: site
  case_id: case_id
  event_type: {column: event_type, codes: {ARR: arrival, BEG: start, END: complete, OUT: departure}}
  occurred_at: occurred_at
`)
	if code, out, errs := run(t, nil, "validate", bad, "--profile", prof); code != 0 {
		t.Errorf("validate with profile: exit %d, %q %q", code, out, errs)
	}
	// An unreadable file names the rule.
	empty := writeFile(t, dir, "empty.csv", "")
	if code, _, errs := run(t, nil, "validate", empty); code != 1 || !strings.Contains(errs, "empty") {
		t.Errorf("validate empty: exit %d, %q", code, errs)
	}
	if code, out, _ := run(t, nil, "schema"); code != 0 || !json.Valid([]byte(out)) || !strings.Contains(out, "2020-12") {
		t.Errorf("schema: exit %d", code)
	}
}

// TestDemo runs the demo in process as a new user would and pulls a
// snapshot with the member token it leaves.
func TestDemo(t *testing.T) {
	data := filepath.Join(t.TempDir(), "demo")
	out, _, stop := background(t, "demo", "--data", data, "--addr", "127.0.0.1:0", "--days", "2", "--quiet")
	text := waitFor(t, "the demo to finish seeding", func() string {
		if s := out.String(); strings.Contains(s, "Press Ctrl-C") {
			return s
		}
		return ""
	})
	if !strings.Contains(text, "invented") {
		t.Error("the demo does not say its data is invented")
	}
	url := regexp.MustCompile(`export FLOWCAT_SERVER=(http://\S+)`).FindStringSubmatch(text)
	if url == nil {
		t.Fatalf("demo output lacks the URL:\n%s", text)
	}
	// Two nights of two sites, the clinic's last held back: three versions.
	if n := strings.Count(text, " rows  score "); n != 3 {
		t.Errorf("demo made %d versions over 2 nights and 2 sites (one held back), want 3:\n%s", n, text)
	}
	tok, err := os.ReadFile(filepath.Join(data, "demo", "member.token"))
	if err != nil {
		t.Fatal(err)
	}
	env := map[string]string{"FLOWCAT_SERVER": url[1], "FLOWCAT_TOKEN": strings.TrimSpace(string(tok))}
	snap := filepath.Join(t.TempDir(), "s")
	if code, _, errs := run(t, env, "pull", "quillon-flow/walkin-visits@latest", "-o", snap); code != 0 {
		t.Fatalf("pull from demo: exit %d %s", code, errs)
	}
	if code, _, _ := run(t, nil, "verify", snap); code != 0 {
		t.Error("verify of demo pull failed")
	}
	if code := stop(); code != 0 {
		t.Errorf("demo exited %d when interrupted", code)
	}
	if s := out.String(); !strings.Contains(s, "serve it again:") || !strings.Contains(s, data) {
		t.Errorf("on exit the demo does not say how to serve %s again:\n%s", data, s[len(text):])
	}
}

// serve --change-window-bytes bounds what an upload with stable event ids
// keeps to find changes: the upload that narrows says so, and so does
// flowcat uploads.
func TestServeChangeWindowFlag(t *testing.T) {
	url, issue := served(t, "--change-window-bytes", "2000")
	as := func(tok string) map[string]string {
		return map[string]string{"FLOWCAT_SERVER": url, "FLOWCAT_TOKEN": tok}
	}
	admin := issue("--role", "admin", "--subject", "ops")
	if code, _, errs := run(t, as(admin), "project", "create", "flow"); code != 0 {
		t.Fatalf("project create: %d %s", code, errs)
	}
	files := t.TempDir()
	prof := writeFile(t, files, "profile.yaml", "fields:\n  site: site\n  case_id: case_id\n  event_type: event_type\n  occurred_at: occurred_at\n  event_id: {column: event_id, stable: true}\n")
	if code, _, errs := run(t, as(admin), "dataset", "create", "flow/ids", "--profile", prof); code != 0 {
		t.Fatalf("dataset create: %d %s", code, errs)
	}
	day := func(n int) string {
		var b strings.Builder
		b.WriteString("site,case_id,event_type,occurred_at,event_id\n")
		for i := range n {
			fmt.Fprintf(&b, "north,C-%d,%s,2026-03-02T%02d:%02d:00Z,ev-%d\n", i/3, []string{"arrival", "start", "complete"}[i%3], i/60, i%60, i)
		}
		return b.String()
	}
	partner := issue("--role", "partner", "--subject", "north-site", "--dataset", "flow/ids")
	if code, _, errs := run(t, as(partner), "upload", "flow/ids", writeFile(t, files, "d1.csv", day(90))); code != 0 {
		t.Fatalf("first upload: %d %s", code, errs)
	}
	code, out, errs := run(t, as(partner), "upload", "flow/ids", writeFile(t, files, "d2.csv", day(100)))
	const said = " either way from 2026-03-02T00:00:00Z (the events kept reached 2,000 bytes)"
	if code != 0 || !strings.Contains(out, "v2: 10 new events, 90 already held, 0 changed; changes looked for within ") || !strings.Contains(out, said) {
		t.Fatalf("second upload: exit %d, %q %q", code, out, errs)
	}
	if code, out, _ := run(t, as(admin), "uploads", "flow/ids"); code != 0 || strings.Count(strings.Join(strings.Fields(out), " "), said) != 1 { // notes wrap
		t.Errorf("uploads: exit %d, %q", code, out)
	}
}

// served runs init and serve (with extra serve flags) in a folder of the
// test's, stopped when the test ends, and returns the server's URL and a
// function that issues tokens on its data folder.
func served(t *testing.T, flags ...string) (url string, issue func(args ...string) string) {
	t.Helper()
	data := filepath.Join(t.TempDir(), "data")
	t.Setenv("FLOWCAT_MASTER_KEY", "")
	t.Setenv("FLOWCAT_MASTER_KEY_FILE", "")
	if code, _, errs := run(t, nil, "init", "--data", data); code != 0 {
		t.Fatalf("init: exit %d: %s", code, errs)
	}
	_, serveErr, stop := background(t, append([]string{"serve", "--data", data, "--addr", "127.0.0.1:0"}, flags...)...)
	t.Cleanup(func() { stop() })
	url = waitFor(t, "the server's URL in its log", func() string {
		if m := urlRE.FindStringSubmatch(serveErr.String()); m != nil {
			return m[1]
		}
		return ""
	})
	return url, func(args ...string) string {
		t.Helper()
		code, out, errs := run(t, nil, append([]string{"token", "issue", "--data", data}, args...)...)
		if code != 0 {
			t.Fatalf("token issue %v: exit %d: %s", args, code, errs)
		}
		return strings.TrimSpace(out)
	}
}
