package catalog

import (
	"bytes"
	"encoding/csv"
	"fmt"
	"math/rand/v2"
	"testing"
	"time"

	"github.com/flowcat-catalog/flowcat/quality"
)

// TestDuplicatesAcrossFiles: three nightly files of one version repeat
// some events of a case (same type, activity and instant, another
// priority: re-exported with a changed detail, so not held back as the
// same event), within a file and across files. The version's report
// counts every such duplicate (duplicate_case_type_time) and those whose
// rows are in different files (duplicate_across_files), each equal to an
// independent count over the three CSV files (encoding/csv, a map): per
// group of equal (case, type, activity, instant), its rows less one, and
// the files holding it less one.
func TestDuplicatesAcrossFiles(t *testing.T) {
	r := rand.New(rand.NewPCG(10, 3))
	base := time.Date(2026, 5, 4, 8, 0, 0, 0, time.UTC)
	type ev struct {
		c, typ, act string
		at          time.Time
	}
	var pool []ev
	for i := range 120 {
		at := base.Add(time.Duration(i) * 7 * time.Minute)
		c := fmt.Sprintf("c%03d", i)
		pool = append(pool,
			ev{c, "arrival", "", at},
			ev{c, "start", "triage", at.Add(4 * time.Minute)},
			ev{c, "complete", "triage", at.Add(9 * time.Minute)},
			ev{c, "departure", "", at.Add(12 * time.Minute)})
	}
	files := make([][][]string, 3)
	prio := 0
	row := func(e ev) []string {
		prio++ // every row its own priority: no two rows are the same event
		return []string{"s", e.c, e.typ, e.act, e.at.Format(time.RFC3339), fmt.Sprint(prio)}
	}
	for _, e := range pool {
		f := r.IntN(3)
		files[f] = append(files[f], row(e))
		switch x := r.IntN(20); {
		case x == 0: // again in the same file
			files[f] = append(files[f], row(e))
		case x <= 2: // again in another file
			g := (f + 1 + r.IntN(2)) % 3
			files[g] = append(files[g], row(e))
		case x == 3: // in all three
			files[(f+1)%3] = append(files[(f+1)%3], row(e))
			files[(f+2)%3] = append(files[(f+2)%3], row(e))
		}
	}
	var data [3][]byte
	for i, rows := range files {
		var b bytes.Buffer
		w := csv.NewWriter(&b)
		w.Write([]string{"site", "case_id", "event_type", "activity", "occurred_at", "priority"})
		w.WriteAll(rows)
		data[i] = b.Bytes()
	}

	// Independent count, from the CSV bytes.
	type key struct{ c, typ, act, at string }
	rows := map[key]int{}
	in := map[key]map[int]bool{}
	for i, d := range data {
		recs, err := csv.NewReader(bytes.NewReader(d)).ReadAll()
		if err != nil {
			t.Fatal(err)
		}
		for _, rec := range recs[1:] {
			k := key{rec[1], rec[2], rec[3], rec[4]}
			rows[k]++
			if in[k] == nil {
				in[k] = map[int]bool{}
			}
			in[k][i] = true
		}
	}
	var dups, across int64
	for k, n := range rows {
		dups += int64(n - 1)
		across += int64(len(in[k]) - 1)
	}
	if across == 0 || dups == across {
		t.Fatalf("fixture: %d duplicates, %d across files; want some of each kind", dups, across)
	}

	e := newEnv(t, func(o *Options) { o.RunEvents = 100 })
	e.dataset(t, "p", "d", nil)
	var v *Version
	for i, d := range data {
		v = e.ingest(t, "p", "d", d, fmt.Sprintf("night-%d.csv", i+1)).Version
	}
	if len(v.Manifest.Files) != 3 {
		t.Fatalf("%d files", len(v.Manifest.Files))
	}
	q := e.report(t, v)
	if got := q.Count(quality.CodeDuplicateCaseTypeTime); got != dups {
		t.Errorf("duplicate_case_type_time %d, independent count %d", got, dups)
	}
	if got := q.Count(quality.CodeDuplicateAcrossFiles); got != across {
		t.Errorf("duplicate_across_files %d, independent count %d", got, across)
	}
	var uni int64
	for _, s := range q.Raw.Sites {
		uni += s.UniquenessRows
	}
	if uni != dups {
		t.Errorf("uniqueness rows %d, want %d (every duplicate once)", uni, dups)
	}
	for _, f := range q.Findings() {
		if f.Code == quality.CodeDuplicateAcrossFiles && (!f.Informational || len(f.Samples) == 0 || f.Samples[0].CaseID == "" || f.Samples[0].At == nil) {
			t.Errorf("finding %+v: want informational, with samples naming case and instant", f)
		}
	}
	t.Logf("%d duplicates, %d across files, %d groups, rows %d %d %d", dups, across, len(rows), len(files[0]), len(files[1]), len(files[2]))
}
