package cli_test

import (
	"bytes"
	"encoding/json"
	"fmt"
	"os"
	"os/exec"
	"path/filepath"
	"slices"
	"strings"
	"testing"
	"time"

	"github.com/flowcat-catalog/flowcat/catalog/blob/s3store"
	"github.com/flowcat-catalog/flowcat/catalog/blob/s3store/s3test"
	"github.com/flowcat-catalog/flowcat/catalog/export"
)

// sitesNight is an export of three sites, times spread over 20 hours from
// 06:00 UTC, so that days in Los Angeles split them.
func sitesNight(day int) string {
	var b strings.Builder
	b.WriteString(header)
	base := time.Date(2026, 3, 1+day, 6, 0, 0, 0, time.UTC)
	for i := range 60 {
		site := []string{"north", "south", "east-wing"}[i%3]
		t0 := base.Add(time.Duration(i) * 20 * time.Minute)
		for j, ty := range []string{"arrival", "start", "complete"} {
			fmt.Fprintf(&b, "%s,RAWCASE-%d-%d,P-%d,R-%d,%s,consult,main,%s\n", site, day, i, i%7, i%3, ty, t0.Add(time.Duration(j*4)*time.Minute).Format(time.RFC3339))
		}
	}
	return b.String()
}

// duckdbLayout runs catalog/export/testdata/duckdb/layout.mjs. Without
// Node.js or the installed package it returns nil, except in CI.
func duckdbLayout(t *testing.T, layout, pulled, site, date string) map[string]any {
	t.Helper()
	dir, _ := filepath.Abs("../catalog/export/testdata/duckdb")
	_, errMod := os.Stat(filepath.Join(dir, "node_modules", "@duckdb", "node-api"))
	node, errNode := exec.LookPath("node")
	if errMod != nil || errNode != nil {
		msg := "DuckDB check not run: needs node and `npm ci --prefix catalog/export/testdata/duckdb`"
		if os.Getenv("CI") != "" {
			t.Fatal(msg)
		}
		t.Log(msg)
		return nil
	}
	cmd := exec.Command(node, filepath.Join(dir, "layout.mjs"), layout, pulled, site, date)
	cmd.Dir = dir
	var stderr bytes.Buffer
	cmd.Stderr = &stderr
	out, err := cmd.Output()
	if err != nil {
		t.Fatalf("duckdb: %v\n%s", err, stderr.Bytes())
	}
	var res map[string]any
	if err := json.Unmarshal(out, &res); err != nil {
		t.Fatalf("duckdb output %s: %v", out, err)
	}
	return res
}

// TestExportLayout: export --layout writes a version as a Hive-style
// layout with its manifest beside it; DuckDB reads the same rows as the
// pull of that version, types site and date, and for a query on one site
// and date scans and reads that partition's file alone. The same layout
// goes to S3 (gofakes3, and the real server in CI) byte for byte, and a
// destination that holds something is refused.
func TestExportLayout(t *testing.T) {
	dir := t.TempDir()
	data := filepath.Join(dir, "data")
	t.Setenv("FLOWCAT_MASTER_KEY", "")
	t.Setenv("FLOWCAT_MASTER_KEY_FILE", "")
	if code, _, errs := run(t, nil, "init", "--data", data); code != 0 {
		t.Fatalf("init: %d %s", code, errs)
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
			t.Fatalf("token issue: %d %s", code, errs)
		}
		return strings.TrimSpace(out)
	}
	admin := issue("--role", "admin", "--subject", "ops")
	partner := issue("--role", "partner", "--subject", "up", "--dataset", "flow/visits")
	member := issue("--role", "member", "--subject", "student", "--project", "flow")
	as := func(tok string) map[string]string {
		return map[string]string{"FLOWCAT_SERVER": url, "FLOWCAT_TOKEN": tok}
	}
	run(t, as(admin), "project", "create", "flow")
	if code, _, errs := run(t, as(admin), "dataset", "create", "flow/visits", "--timezone", "America/Los_Angeles"); code != 0 {
		t.Fatalf("dataset create: %d %s", code, errs)
	}
	files := t.TempDir()
	for day := 1; day <= 2; day++ {
		f := writeFile(t, files, fmt.Sprintf("n%d.csv", day), sitesNight(day))
		if code, out, errs := run(t, as(partner), "upload", "flow/visits", f); code != 0 {
			t.Fatalf("upload: %d %s %s", code, out, errs)
		}
	}
	snap := filepath.Join(t.TempDir(), "snap")
	if code, _, errs := run(t, as(member), "pull", "flow/visits@2", "-o", snap); code != 0 {
		t.Fatalf("pull: %d %s", code, errs)
	}

	layout := filepath.Join(t.TempDir(), "visits-layout")
	code, out, errs := run(t, as(member), "export", "flow/visits@2", "--layout", layout)
	if code != 0 || !strings.Contains(out, "hive_partitioning = true") {
		t.Fatalf("export --layout: %d %q %q", code, out, errs)
	}
	var ix export.LayoutIndex
	if err := json.Unmarshal(mustReadFile(t, filepath.Join(layout, "layout.json")), &ix); err != nil {
		t.Fatal(err)
	}
	if !bytes.Equal(mustReadFile(t, filepath.Join(layout, "manifest.json")), mustReadFile(t, filepath.Join(snap, "manifest.json"))) {
		t.Error("the layout's manifest.json is not the pulled version's")
	}
	// 3 sites; days 2026-03-02 06:00 UTC to 03-04 01:40 UTC are three
	// days in Los Angeles (UTC-8).
	var dates []string
	for _, f := range ix.Files {
		if !slices.Contains(dates, f.Date) {
			dates = append(dates, f.Date)
		}
	}
	if ix.Zone != "America/Los_Angeles" || ix.Rows != 360 || len(ix.Files) != 9 || !slices.Equal(dates, []string{"2026-03-01", "2026-03-02", "2026-03-03"}) {
		t.Errorf("layout.json: zone %s, %d rows, %d files, dates %v; want America/Los_Angeles, 360, 9, three days", ix.Zone, ix.Rows, len(ix.Files), dates)
	}
	left, _ := filepath.Glob(filepath.Join(filepath.Dir(layout), ".*partial*"))
	if len(left) != 0 {
		t.Errorf("staging folders left: %v", left)
	}

	target := ix.Files[slices.IndexFunc(ix.Files, func(f export.LayoutFile) bool { return f.Site == "south" && f.Date == "2026-03-02" })]
	if res := duckdbLayout(t, layout, snap, "south", "2026-03-02"); res != nil {
		if res["layout_rows"] != float64(360) || res["pulled_rows"] != float64(360) || res["only_in_layout"] != float64(0) || res["only_in_pulled"] != float64(0) {
			t.Errorf("DuckDB: the layout and the pull differ: %v", res)
		}
		if res["site_type"] != "VARCHAR" || res["date_type"] != "DATE" {
			t.Errorf("DuckDB types site %v, date %v; want VARCHAR, DATE", res["site_type"], res["date_type"])
		}
		if res["partition_rows"] != float64(target.Rows) || target.Rows == 0 {
			t.Errorf("DuckDB: %v rows of south on 2026-03-02, layout.json says %d", res["partition_rows"], target.Rows)
		}
		if fmt.Sprint(res["scanning_files"]) != "[1 9]" || res["files_read"] != float64(1) {
			t.Errorf("DuckDB scanned %v files and read %v for one site and date; want [1 9] and 1 (plan: %v)", res["scanning_files"], res["files_read"], res["plan"])
		}
	}

	if code, _, errs := run(t, as(member), "export", "flow/visits@2", "--layout", layout); code != 1 || !strings.Contains(errs, "not empty") {
		t.Errorf("export into a full directory: exit %d, %q", code, errs)
	}
	if code, _, errs := run(t, as(member), "export", "flow/visits@2", "--layout", layout+"2", "--site", "north"); code != 2 || !strings.Contains(errs, "no -o, --format or filters") {
		t.Errorf("export --layout with a filter: exit %d, %q", code, errs)
	}

	for _, srv := range s3test.Servers(t) {
		t.Run(srv.Name, func(t *testing.T) {
			for k, v := range srv.Env() {
				t.Setenv(k, v)
			}
			bucket := srv.NewBucket(t)
			dest := "s3://" + bucket + "/layouts/visits-2"
			if code, out, errs := run(t, as(member), "export", "flow/visits@2", "--layout", dest); code != 0 {
				t.Fatalf("export --layout %s: %d %q %q", dest, code, out, errs)
			}
			cfg, err := s3store.FromEnv(dest, os.Getenv)
			if err != nil {
				t.Fatal(err)
			}
			objs, err := s3store.NewObjects(t.Context(), cfg)
			if err != nil {
				t.Fatal(err)
			}
			var keys []string
			objs.List(t.Context(), func(rel string, size int64) error { keys = append(keys, rel); return nil })
			want := []string{"layout.json", "manifest.json"}
			for _, f := range ix.Files {
				want = append(want, f.Path)
			}
			slices.Sort(want)
			slices.Sort(keys)
			if !slices.Equal(keys, want) {
				t.Fatalf("objects %v, want %v", keys, want)
			}
			for _, k := range keys {
				b, err := objs.Get(t.Context(), k)
				if err != nil {
					t.Fatal(err)
				}
				if !bytes.Equal(b, mustReadFile(t, filepath.Join(layout, filepath.FromSlash(k)))) {
					t.Errorf("%s on S3 differs from the local layout's", k)
				}
			}
			if code, _, errs := run(t, as(member), "export", "flow/visits@2", "--layout", dest); code != 1 || !strings.Contains(errs, "holds objects already") {
				t.Errorf("export to a used prefix: exit %d, %q", code, errs)
			}
		})
	}
}

func mustReadFile(t *testing.T, p string) []byte {
	t.Helper()
	b, err := os.ReadFile(p)
	if err != nil {
		t.Fatal(err)
	}
	return b
}
