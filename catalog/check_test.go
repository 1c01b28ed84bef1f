package catalog

import (
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"os"
	"strings"
	"testing"
	"time"

	"github.com/flowcat-catalog/flowcat/quality"
	"github.com/flowcat-catalog/flowcat/schema"
)

// withoutCasePseudonyms returns r's JSON with the case pseudonyms of its
// samples blanked: Check pseudonymizes under a throwaway key.
func withoutCasePseudonyms(t *testing.T, r *quality.Report) string {
	t.Helper()
	b, err := json.Marshal(r)
	if err != nil {
		t.Fatal(err)
	}
	var v any
	if err := json.Unmarshal(b, &v); err != nil {
		t.Fatal(err)
	}
	var blank func(any)
	blank = func(x any) {
		switch x := x.(type) {
		case map[string]any:
			if _, ok := x["case_id"]; ok {
				x["case_id"] = ""
			}
			for _, y := range x {
				blank(y)
			}
		case []any:
			for _, y := range x {
				blank(y)
			}
		}
	}
	blank(v)
	b, _ = json.MarshalIndent(v, "", " ")
	return string(b)
}

func TestCheckMatchesIngest(t *testing.T) {
	from := genBase.Add(24 * time.Hour)
	to := genBase.Add(6 * 24 * time.Hour)
	e := newEnv(t, func(o *Options) { o.RunEvents = 150 })
	e.dataset(t, "p", "d", func(s *DatasetSpec) { s.WindowFrom, s.WindowTo = &from, &to })
	rows := genRows(genOpt{Seed: 11, N: 3000, Invalid: 40, Shuffle: true, Coarse: true})
	// Exact duplicates, a bad timestamp and a missing case id.
	rows = append(rows, rows[5], rows[6], rows[6])
	rows[10][7] = "yesterday"
	rows[11][1] = ""
	data := csvBytes(header, rows, 10) // and no outcome column
	res := e.ingest(t, "p", "d", data, "n.csv")

	tmp := t.TempDir()
	cr, err := Check(context.Background(), bytes.NewReader(data), CheckOptions{
		Name: "n.csv", TempDir: tmp, RunEvents: 100, Now: testNow, Dataset: DatasetSpec{WindowFrom: &from, WindowTo: &to},
	})
	if err != nil {
		t.Fatal(err)
	}
	got, want := withoutCasePseudonyms(t, cr.Report), withoutCasePseudonyms(t, res.Upload.Report)
	if got != want {
		t.Errorf("Check report differs from the ingest's:\n%s\n----\n%s", got, want)
	}
	r := cr.Report
	// Copies within the file are counted once, before quality sees them.
	if r.Rows.Total+cr.Events.Copies != 3003 || r.Rows.Rejected != 75+2 || cr.Events.Copies < 3 || r.Count(quality.CodeExactDuplicate) != 0 || r.Count(quality.CodeOutsideWindow) == 0 {
		t.Errorf("report = rows %+v, copies %d, duplicates %d, outside window %d", r.Rows, cr.Events.Copies, r.Count(quality.CodeExactDuplicate), r.Count(quality.CodeOutsideWindow))
	}
	if ev := res.Upload.Events; ev == nil || ev.Copies != cr.Events.Copies || ev.Read != ev.New+ev.Copies {
		t.Errorf("ingest counts %+v, check counts %+v", ev, cr.Events)
	}
	if ents, _ := os.ReadDir(tmp); len(ents) != 0 {
		t.Errorf("Check left %d files in its temp dir", len(ents))
	}

	// A file error is ErrFileInvalid with the FileError, and nothing else.
	_, err = Check(context.Background(), bytes.NewReader(genCSV(genOpt{N: 5, DropCols: []int{4}})), CheckOptions{TempDir: tmp})
	if fe, ok := schema.AsFileError(err); !errors.Is(err, ErrFileInvalid) || !ok || fe.Rule != schema.RuleMissingColumn {
		t.Errorf("missing event_type: %v", err)
	}
	if ents, _ := os.ReadDir(tmp); len(ents) != 0 {
		t.Errorf("Check left %d files in its temp dir", len(ents))
	}
}

// TestCheckVerdictIsIngests: the verdict of Check is the ingest's own
// (too many invalid rows at the default threshold, accepted under a
// raised one, no valid row, a clean file under a zero threshold), and a
// rejection gives the reason the ingest's error does. A dataset spec the
// catalog refuses is ErrInvalid.
func TestCheckVerdictIsIngests(t *testing.T) {
	ctx := context.Background()
	rows := genRows(genOpt{Seed: 3, N: 400, Invalid: 8}) // one row in 8 invalid
	data := csvBytes(header, rows)
	var noneValid []row
	for _, r := range rows[:20] {
		r[7] = "not a time" // a copy: rows are arrays
		noneValid = append(noneValid, r)
	}
	half, strict := 0.5, 0.0
	for _, c := range []struct {
		name   string
		data   []byte
		reject *float64
		accept bool
	}{
		{"default threshold", data, nil, false},
		{"threshold raised", data, &half, true},
		{"no valid row", csvBytes(header, noneValid), &half, false},
		{"strict", csvBytes(header, genRows(genOpt{Seed: 4, N: 50})), &strict, true},
	} {
		t.Run(c.name, func(t *testing.T) {
			e := newEnv(t, nil)
			e.dataset(t, "p", "d", func(s *DatasetSpec) { s.RejectAbove = c.reject })
			res, ierr := e.s.Ingest(ctx, "p", "d", bytes.NewReader(c.data), IngestOptions{Filename: "f.csv"})
			if ierr != nil && !errors.Is(ierr, ErrRejected) {
				t.Fatal(ierr)
			}
			cr, err := Check(ctx, bytes.NewReader(c.data), CheckOptions{Name: "f.csv", TempDir: t.TempDir(), Now: testNow, Dataset: DatasetSpec{RejectAbove: c.reject}})
			if err != nil {
				t.Fatal(err)
			}
			if cr.Accepted != c.accept || (res.Upload.Status == UploadAccepted) != c.accept {
				t.Fatalf("check accepted %t, ingest %s; want accepted %t", cr.Accepted, res.Upload.Status, c.accept)
			}
			if !c.accept {
				if cr.Reason == "" || ierr == nil || !strings.HasPrefix(ierr.Error(), cr.Reason) {
					t.Errorf("reason %q, the ingest's error %v", cr.Reason, ierr)
				}
			}
			if got, want := withoutCasePseudonyms(t, cr.Report), withoutCasePseudonyms(t, res.Upload.Report); got != want {
				t.Errorf("reports differ:\n%s\n----\n%s", got, want)
			}
		})
	}
	if _, err := Check(ctx, bytes.NewReader(data), CheckOptions{TempDir: t.TempDir(), Dataset: DatasetSpec{Timezone: "Mars/Olympus"}}); !errors.Is(err, ErrInvalid) {
		t.Errorf("an unknown zone: %v, want ErrInvalid", err)
	}
}
