package export

import (
	"archive/tar"
	"bytes"
	"context"
	"encoding/json"
	"io"
	"os"
	"os/exec"
	"path/filepath"
	"slices"
	"strings"
	"testing"
	"time"

	"github.com/flowcat-catalog/flowcat/catalog"
	"github.com/flowcat-catalog/flowcat/schema"
)

// unpackBundle writes a version's tar bundle into a new folder.
func unpackBundle(t *testing.T, e *env, d *catalog.Dataset, v *catalog.Version, ci CitationInput) string {
	t.Helper()
	ctx := context.Background()
	man, err := e.s.ManifestBytes(ctx, v)
	if err != nil {
		t.Fatal(err)
	}
	var buf bytes.Buffer
	if err := WriteBundle(ctx, &buf, "tar", Bundle{Dataset: d, Version: v, Manifest: man, Open: e.opener(), Citation: ci}); err != nil {
		t.Fatal(err)
	}
	dir := t.TempDir()
	tr := tar.NewReader(&buf)
	for {
		h, err := tr.Next()
		if err == io.EOF {
			break
		}
		if err != nil {
			t.Fatal(err)
		}
		p := filepath.Join(dir, filepath.FromSlash(h.Name))
		os.MkdirAll(filepath.Dir(p), 0o755)
		b, _ := io.ReadAll(tr)
		if err := os.WriteFile(p, b, 0o644); err != nil {
			t.Fatal(err)
		}
	}
	return dir
}

// TestLoadLines runs the DuckDB one-liner of a bundle's README, as written
// there, in the unpacked bundle (DuckDB through its Node.js package, the
// same engine as the duckdb command), and checks its rows against the
// version's events: the first ten by time, occurred_at the UTC instant and
// local_time the dataset's wall clock (America/Halifax, IANA tz database).
// The Polars and pandas lines are parsed by Python's own parser and every
// line by sh -n; R is not on this machine, so its line is checked for
// shape only.
func TestLoadLines(t *testing.T) {
	e := newEnv(t, 0)
	ctx := context.Background()
	if _, err := e.s.CreateProject(ctx, "er", "", "curator"); err != nil {
		t.Fatal(err)
	}
	d, err := e.s.CreateDataset(ctx, catalog.DatasetSpec{Project: "er", Name: "visits", Timezone: "America/Halifax"}, "curator")
	if err != nil {
		t.Fatal(err)
	}
	v := e.ingest(t, "er", "visits", csvBytes(genRows(3, 300, 0)), "night.csv")
	dir := unpackBundle(t, e, d, v, CitationInput{Authors: []Author{{Name: "Lab"}}})
	readme, err := os.ReadFile(filepath.Join(dir, BundleReadme))
	if err != nil {
		t.Fatal(err)
	}
	var lines []string
	for _, l := range strings.Split(string(readme), "\n") {
		if strings.HasPrefix(l, "    ") && (strings.Contains(l, "duckdb") || strings.Contains(l, "python3") || strings.Contains(l, "Rscript")) {
			lines = append(lines, strings.TrimPrefix(l, "    "))
		}
	}
	if len(lines) != 4 {
		t.Fatalf("README has %d load lines, want 4:\n%s", len(lines), readme)
	}
	if !strings.Contains(string(readme), "America/Halifax") || !strings.Contains(string(readme), BundleDictionary) {
		t.Error("README does not name the time zone and the data dictionary")
	}
	for _, l := range lines {
		if out, err := exec.Command("sh", "-n", "-c", l).CombinedOutput(); err != nil {
			t.Errorf("sh -n: %v %s\n%s", err, out, l)
		}
	}

	// DuckDB, for real.
	sql, ok := strings.CutPrefix(lines[0], `duckdb -c "`)
	sql, ok2 := strings.CutSuffix(sql, `"`)
	if !ok || !ok2 {
		t.Fatalf("DuckDB line %q", lines[0])
	}
	mod, _ := filepath.Abs("testdata/duckdb")
	node, errNode := exec.LookPath("node")
	if _, err := os.Stat(filepath.Join(mod, "node_modules", "@duckdb", "node-api")); err != nil || errNode != nil {
		msg := "DuckDB one-liner not run: needs node and `npm ci --prefix catalog/export/testdata/duckdb`"
		if os.Getenv("CI") != "" {
			t.Fatal(msg)
		}
		t.Log(msg)
	} else {
		cmd := exec.Command(node, filepath.Join(mod, "sql.mjs"), sql)
		cmd.Dir = dir
		// The module resolves @duckdb from the script's own folder.
		var stderr bytes.Buffer
		cmd.Stderr = &stderr
		out, err := cmd.Output()
		if err != nil {
			t.Fatalf("duckdb: %v\n%s", err, stderr.Bytes())
		}
		var rows []map[string]*string
		if err := json.Unmarshal(out, &rows); err != nil {
			t.Fatalf("%v: %s", err, out)
		}
		want := e.allEvents(t, v.Manifest.Files)
		slices.SortStableFunc(want, func(a, b schema.Event) int { return a.OccurredAt.Compare(b.OccurredAt) })
		if len(rows) != 10 {
			t.Fatalf("%d rows, want 10", len(rows))
		}
		halifax, err := time.LoadLocation("America/Halifax")
		if err != nil {
			t.Fatal(err)
		}
		for i, r := range rows {
			wantLocal := want[i].OccurredAt.In(halifax).Format("2006-01-02 15:04:05")
			if r["local_time"] == nil || !strings.HasPrefix(*r["local_time"], wantLocal) {
				t.Errorf("row %d local_time %v, want %s (occurred_at %s)", i, deref(r["local_time"]), wantLocal, want[i].OccurredAt.UTC())
			}
			if r["case_id"] == nil || *r["case_id"] == "" {
				t.Errorf("row %d has no case_id: %v", i, r)
			}
		}
	}

	// Python's own parser for the Polars and pandas lines.
	if py, err := exec.LookPath("python3"); err == nil {
		for _, l := range lines[1:3] {
			code, ok := strings.CutPrefix(l, `python3 -c "`)
			code, ok2 := strings.CutSuffix(code, `"`)
			if !ok || !ok2 {
				t.Fatalf("python line %q", l)
			}
			if out, err := exec.Command(py, "-c", "import ast, sys; ast.parse(sys.argv[1])", code).CombinedOutput(); err != nil {
				t.Errorf("python cannot parse %q: %v %s", code, err, out)
			}
		}
	} else {
		t.Log("python3 not found: the Polars and pandas lines were not parsed")
	}
	if !strings.HasPrefix(lines[3], "Rscript -e '") || strings.Count(lines[3], "'") != 2 {
		t.Errorf("R line %q", lines[3])
	}
}

func deref(s *string) string {
	if s == nil {
		return "<null>"
	}
	return *s
}
