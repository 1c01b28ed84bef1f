package catalog

import (
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"os"
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
	cr, err := Check(context.Background(), bytes.NewReader(data), schema.DefaultProfile(), CheckOptions{
		Name: "n.csv", TempDir: tmp, RunEvents: 100, Now: testNow, WindowFrom: from, WindowTo: to,
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
	_, err = Check(context.Background(), bytes.NewReader(genCSV(genOpt{N: 5, DropCols: []int{4}})), nil, CheckOptions{TempDir: tmp})
	if fe, ok := schema.AsFileError(err); !errors.Is(err, ErrFileInvalid) || !ok || fe.Rule != schema.RuleMissingColumn {
		t.Errorf("missing event_type: %v", err)
	}
	if ents, _ := os.ReadDir(tmp); len(ents) != 0 {
		t.Errorf("Check left %d files in its temp dir", len(ents))
	}
}
