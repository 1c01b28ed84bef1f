package cli_test

import (
	"encoding/json"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"
)

// checkPullLoadLines checks the end of pull's message: a line per tool,
// and the DuckDB line, as printed, run in the pulled folder (DuckDB
// through its Node.js package, as in catalog/export's tests) reads the
// version's events.
func checkPullLoadLines(t *testing.T, out, dir, zone string) {
	t.Helper()
	for _, want := range []string{"load it, in " + dir, "occurred_at is UTC", "DuckDB", "Polars", "pandas (pyarrow)", "R (arrow)", "flowcat schema", "clock, " + zone, "timezone('" + zone + "'"} {
		if !strings.Contains(out, want) {
			t.Errorf("pull's message lacks %q:\n%s", want, out)
		}
	}
	var sql string
	for _, l := range strings.Split(out, "\n") {
		if s, ok := strings.CutPrefix(strings.TrimSpace(l), `duckdb -c "`); ok {
			sql = strings.TrimSuffix(s, `"`)
		}
	}
	if sql == "" {
		t.Fatalf("no DuckDB line in:\n%s", out)
	}
	mod, _ := filepath.Abs("../catalog/export/testdata/duckdb")
	node, errNode := exec.LookPath("node")
	if _, err := os.Stat(filepath.Join(mod, "node_modules", "@duckdb", "node-api")); err != nil || errNode != nil {
		if os.Getenv("CI") != "" {
			t.Fatal("the DuckDB line needs node and the DuckDB package (npm ci in catalog/export/testdata/duckdb)")
		}
		t.Log("DuckDB line not run: needs node and `npm ci --prefix catalog/export/testdata/duckdb`")
		return
	}
	cmd := exec.Command(node, filepath.Join(mod, "sql.mjs"), sql)
	cmd.Dir = dir
	b, err := cmd.CombinedOutput()
	if err != nil {
		t.Fatalf("the pull's DuckDB line fails in %s: %v\n%s", dir, err, b)
	}
	var rows []map[string]*string
	if err := json.Unmarshal(b, &rows); err != nil || len(rows) == 0 || rows[0]["local_time"] == nil || rows[0]["occurred_at"] == nil {
		t.Errorf("the pull's DuckDB line read %s (%v)", b, err)
	}
}
