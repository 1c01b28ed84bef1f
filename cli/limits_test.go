package cli_test

import (
	"strings"
	"testing"
)

// TestServeLimits: serve's reader-limit flags reach the uploads, and a file
// over a limit exits 1 naming the file, the rule and the limit.
func TestServeLimits(t *testing.T) {
	_, env := serveAdmin(t, "--max-rows", "3", "--max-columns", "6", "--max-line-bytes", "200")
	if code, _, errs := run(t, env, "project", "create", "flow"); code != 0 {
		t.Fatal(errs)
	}
	if code, _, errs := run(t, env, "dataset", "create", "flow/visits"); code != 0 {
		t.Fatal(errs)
	}
	files := t.TempDir()
	row := "north,C1,arrival,2026-03-01T09:00:00Z\n"
	head := "site,case_id,event_type,occurred_at\n"
	for _, tc := range []struct{ name, body, rule, limit string }{
		{"rows.csv", head + strings.Repeat(row, 4), "too_many_rows", "max rows"},
		{"wide.csv", "site,case_id,event_type,occurred_at,a,b,c\n", "too_many_columns", "max columns"},
		{"long.csv", head + "north,C1,arrival,2026-03-01T09:00:00Z" + strings.Repeat(" ", 200) + "\n", "line_too_long", "max line bytes"},
	} {
		f := writeFile(t, files, tc.name, tc.body)
		code, _, errs := run(t, env, "upload", "flow/visits", f)
		if code != 1 || !strings.Contains(errs, tc.name) || !strings.Contains(errs, tc.rule) || !strings.Contains(errs, tc.limit) {
			t.Errorf("%s: exit %d, %q; want 1 naming %s and %q", tc.name, code, errs, tc.rule, tc.limit)
		}
	}
	if code, out, errs := run(t, env, "upload", "flow/visits", writeFile(t, files, "ok.csv", head+strings.Repeat(row, 3))); code != 0 || !strings.Contains(out, "flow/visits@1") {
		t.Errorf("3 rows: exit %d, %q %q", code, out, errs)
	}
}
