package cli_test

import (
	"bytes"
	"compress/gzip"
	"io"
	"os"
	"path/filepath"
	"slices"
	"strings"
	"testing"
)

// TestResentBrokenRow: two nights of the public sepsis log
// (testdata/sepsis) through a real server and the CLI, the second
// re-sending the first with its broken row. The second upload says the
// row was rejected before, `uploads` lists it, and the version's quality
// report counts the row once.
func TestResentBrokenRow(t *testing.T) {
	gz, err := os.ReadFile(filepath.Join("..", "testdata", "sepsis", "sepsis-cases.csv.gz"))
	if err != nil {
		t.Fatal(err)
	}
	zr, err := gzip.NewReader(bytes.NewReader(gz))
	if err != nil {
		t.Fatal(err)
	}
	raw, err := io.ReadAll(zr)
	if err != nil {
		t.Fatal(err)
	}
	lines := strings.Split(strings.TrimRight(string(raw), "\r\n"), "\n")
	head, rows := lines[0], slices.Clone(lines[1:2001])
	ts := slices.Index(strings.Split(head, ";"), "Complete Timestamp")
	f := strings.Split(rows[300], ";")
	f[ts] = "2014/13/45 08:00:00.000"
	rows[300] = strings.Join(f, ";")

	_, env := serveAdmin(t)
	if code, _, errs := run(t, env, "project", "create", "lab"); code != 0 {
		t.Fatal(errs)
	}
	prof := filepath.Join("..", "testdata", "sepsis", "profile.yaml")
	if code, _, errs := run(t, env, "dataset", "create", "lab/sepsis", "--profile", prof, "--historical"); code != 0 {
		t.Fatal(errs)
	}
	files := t.TempDir()
	n1 := writeFile(t, files, "night1.csv", head+"\n"+strings.Join(rows[:1000], "\n")+"\n")
	n2 := writeFile(t, files, "night2.csv", head+"\n"+strings.Join(rows, "\n")+"\n")
	if code, out, errs := run(t, env, "upload", "lab/sepsis", n1); code != 0 || !strings.Contains(out, "999 rows accepted, 1 rejected, quality score") {
		t.Fatalf("night 1: exit %d, %q %q", code, out, errs)
	}
	if code, out, errs := run(t, env, "upload", "lab/sepsis", n2); code != 0 || !strings.Contains(out, "1999 rows accepted, 1 rejected (rejected before: sent again), quality score") {
		t.Fatalf("night 2: exit %d, %q %q", code, out, errs)
	}
	if code, out, _ := run(t, env, "uploads", "lab/sepsis"); code != 0 || strings.Count(out, "1 of the rejected rows rejected before (sent again)") != 1 {
		t.Errorf("uploads: exit %d, %q", code, out)
	}
	if code, out, _ := run(t, env, "quality", "lab/sepsis"); code != 0 || !strings.Contains(out, "rows   2000 total, 1999 accepted, 1 rejected") ||
		!strings.Contains(out, "1 rejected row sent again by a later file (the same text), counted once above") {
		t.Errorf("quality: exit %d, %q", code, out)
	}
}
