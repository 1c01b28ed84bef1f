package cli_test

import (
	"bytes"
	"encoding/json"
	"io/fs"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/flowcat-catalog/flowcat/catalog"
)

// TestPullFromGoldenDataDirectories serves a copy of each data directory
// under testdata/golden (the first release's, and one of each later stored
// format) with today's server, pulls each version and verifies it offline:
// the manifests pulled are the bytes the writing release served, and they
// hash to their snapshot ids.
func TestPullFromGoldenDataDirectories(t *testing.T) {
	dirs, _ := filepath.Glob("../testdata/golden/*/served")
	if len(dirs) < 2 {
		t.Fatalf("golden directories: %v", dirs)
	}
	for _, d := range dirs {
		golden := filepath.Dir(d)
		t.Run(filepath.Base(golden), func(t *testing.T) { pullGolden(t, golden) })
	}
}

func pullGolden(t *testing.T, golden string) {
	data := filepath.Join(t.TempDir(), "data")
	err := filepath.WalkDir(filepath.Join(golden, "data"), func(p string, d fs.DirEntry, err error) error {
		if err != nil {
			return err
		}
		rel, _ := filepath.Rel(filepath.Join(golden, "data"), p)
		if d.IsDir() {
			return os.MkdirAll(filepath.Join(data, rel), 0o700)
		}
		b, err := os.ReadFile(p)
		if err != nil {
			return err
		}
		return os.WriteFile(filepath.Join(data, rel), b, 0o600)
	})
	if err != nil {
		t.Fatal(err)
	}
	t.Setenv("FLOWCAT_MASTER_KEY", "")
	t.Setenv("FLOWCAT_MASTER_KEY_FILE", "")
	_, serveErr, _ := background(t, "serve", "--data", data, "--addr", "127.0.0.1:0")
	url := waitFor(t, "the server's URL", func() string {
		if m := urlRE.FindStringSubmatch(serveErr.String()); m != nil {
			return m[1]
		}
		return ""
	})
	code, tok, errs := run(t, nil, "token", "issue", "--data", data, "--role", "member", "--project", "golden", "--subject", "student")
	if code != 0 {
		t.Fatalf("token issue: %s", errs)
	}
	env := map[string]string{"FLOWCAT_SERVER": url, "FLOWCAT_TOKEN": strings.TrimSpace(tok)}
	for _, v := range []string{"1", "2"} {
		dir := filepath.Join(t.TempDir(), "v"+v)
		if code, out, errs := run(t, env, "pull", "golden/visits@"+v, "-o", dir); code != 0 {
			t.Fatalf("pull @%s: exit %d %s %s", v, code, out, errs)
		}
		if code, out, errs := run(t, nil, "verify", dir); code != 0 || !strings.HasPrefix(out, "ok") {
			t.Errorf("verify @%s: exit %d %s %s", v, code, out, errs)
		}
		var m catalog.Manifest
		mb, _ := os.ReadFile(filepath.Join(dir, "manifest.json"))
		if err := json.Unmarshal(mb, &m); err != nil {
			t.Fatal(err)
		}
		if ct := m.CaseTable; ct != nil {
			if fi, err := os.Stat(filepath.Join(dir, "cases", ct.SHA256.String()+".parquet")); err != nil || fi.Size() != ct.Bytes {
				t.Errorf("@%s: case table not pulled to cases/: %v", v, err)
			}
		}
		got, _ := os.ReadFile(filepath.Join(dir, "manifest.json"))
		want, _ := os.ReadFile(filepath.Join(golden, "served", "manifest-"+v+".json"))
		if len(want) == 0 || !bytes.Equal(got, want) {
			t.Errorf("@%s: pulled manifest differs from the one the first release served", v)
		}
	}
}
