package catalog

import (
	"bufio"
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"testing"
	"time"
)

// TestAuditQuery checks the trail's filters (time, subject, action and
// kind of action, project, dataset, outcome), its paging (every entry
// once, in time order, whatever the page size), the actor carried by the
// context, and the JSON Lines export read back line by line.
func TestAuditQuery(t *testing.T) {
	clock := time.Date(2026, 3, 1, 0, 0, 0, 0, time.UTC)
	e := newEnv(t, func(o *Options) {
		o.Now = func() time.Time { clock = clock.Add(time.Minute); return clock }
	})
	ctx := WithActor(context.Background(), Actor{Subject: "cur", TokenID: "jti-1", Role: "curator", From: "192.0.2.7"})
	for _, p := range []string{"p", "q"} {
		if _, err := e.s.CreateProject(ctx, p, "", "cur"); err != nil {
			t.Fatal(err)
		}
		for _, d := range []string{"a", "b"} {
			if _, err := e.s.CreateDataset(ctx, DatasetSpec{Project: p, Name: d}, "cur"); err != nil {
				t.Fatal(err)
			}
		}
	}
	if _, err := e.s.Ingest(ctx, "p", "a", bytes.NewReader([]byte(oldExport)), IngestOptions{By: "cur"}); err != nil {
		t.Fatal(err)
	}
	if err := e.s.RecordAudit(context.Background(), AuditEntry{By: "student", Action: "denied.uploads", Project: "q", Dataset: "a", Target: "POST /x", Outcome: OutcomeDenied}); err != nil {
		t.Fatal(err)
	}
	all, err := e.s.Audit(ctx)
	if err != nil {
		t.Fatal(err)
	}
	// 2 projects, 4 datasets, the version the upload made, one denied.
	if len(all) != 2+4+1+1 {
		t.Fatalf("%d entries: %+v", len(all), all)
	}
	for i, a := range all {
		if i > 0 && (a.ID <= all[i-1].ID || a.At.Before(all[i-1].At)) {
			t.Errorf("entry %d out of order: %s after %s", i, a.ID, all[i-1].ID)
		}
		if a.By == "cur" && (a.TokenID != "jti-1" || a.Role != "curator" || a.From != "192.0.2.7") {
			t.Errorf("entry %+v lacks the context's actor", a)
		}
	}
	// Newest first: the last entries of the trail, filtered and bounded.
	newest, more, err := e.s.AuditNewest(ctx, AuditFilter{Limit: 3})
	if err != nil || !more || len(newest) != 3 || newest[0].ID != all[len(all)-1].ID || newest[2].ID != all[len(all)-3].ID {
		t.Errorf("newest 3: %v, more %v, %+v", err, more, newest)
	}
	pa, more, err := e.s.AuditNewest(ctx, AuditFilter{Project: "p", Dataset: "a", Limit: 5})
	if err != nil || more || len(pa) != 2 || pa[0].Action != "version.create" || pa[1].Action != "dataset.create" {
		t.Errorf("p/a newest: %v, more %v, %+v", err, more, pa)
	}
	count := func(f AuditFilter) int {
		t.Helper()
		n := 0
		if err := e.s.EachAudit(ctx, f, func(AuditEntry) error { n++; return nil }); err != nil {
			t.Fatal(err)
		}
		return n
	}
	cases := []struct {
		name string
		f    AuditFilter
		want int
	}{
		{"project p", AuditFilter{Project: "p"}, 1 + 2 + 1},
		{"dataset p/a", AuditFilter{Project: "p", Dataset: "a"}, 1 + 1},
		{"kind dataset.", AuditFilter{Action: "dataset."}, 4},
		{"action exact", AuditFilter{Action: "version.create"}, 1},
		{"prefix without the dot is exact", AuditFilter{Action: "dataset"}, 0},
		{"subject", AuditFilter{Subject: "student"}, 1},
		{"outcome denied", AuditFilter{Outcome: OutcomeDenied}, 1},
		{"from the 3rd entry", AuditFilter{From: all[2].At}, len(all) - 2},
		{"before the 3rd entry", AuditFilter{To: all[2].At}, 2},
		{"window of one", AuditFilter{From: all[4].At, To: all[5].At}, 1},
	}
	for _, tc := range cases {
		if got := count(tc.f); got != tc.want {
			t.Errorf("%s: %d entries, want %d", tc.name, got, tc.want)
		}
	}
	for _, size := range []int{1, 2, 4, 100} {
		var ids []string
		f := AuditFilter{Limit: size}
		for pages := 0; ; pages++ {
			page, next, err := e.s.AuditPage(ctx, f)
			if err != nil {
				t.Fatal(err)
			}
			if len(page) > size {
				t.Fatalf("page of %d entries, limit %d", len(page), size)
			}
			for _, a := range page {
				ids = append(ids, a.ID)
			}
			if next == "" {
				break
			}
			f.After = next
		}
		if len(ids) != len(all) {
			t.Fatalf("pages of %d: %d entries, want %d", size, len(ids), len(all))
		}
		for i := range ids {
			if ids[i] != all[i].ID {
				t.Fatalf("pages of %d: entry %d is %s, want %s", size, i, ids[i], all[i].ID)
			}
		}
	}
	for _, bad := range []AuditFilter{{Limit: MaxAuditPage + 1}, {After: "zz"}, {Dataset: "a"}, {From: all[3].At, To: all[1].At}} {
		if _, _, err := e.s.AuditPage(ctx, bad); !errors.Is(err, ErrInvalid) {
			t.Errorf("filter %+v: %v, want ErrInvalid", bad, err)
		}
	}

	var buf bytes.Buffer
	n, err := e.s.WriteAuditJSONL(ctx, &buf, AuditFilter{Limit: 3})
	if err != nil || n != len(all) {
		t.Fatalf("export: %d entries, %v", n, err)
	}
	sc := bufio.NewScanner(&buf)
	i := 0
	for sc.Scan() {
		var a AuditEntry
		if err := json.Unmarshal(sc.Bytes(), &a); err != nil {
			t.Fatalf("line %d is not a JSON object: %v", i+1, err)
		}
		if a.ID != all[i].ID || a.Action != all[i].Action {
			t.Fatalf("line %d: %+v, want %+v", i+1, a, all[i])
		}
		i++
	}
	if i != len(all) {
		t.Fatalf("export has %d lines, want %d", i, len(all))
	}
}
