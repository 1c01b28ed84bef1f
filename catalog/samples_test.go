package catalog

import (
	"encoding/csv"
	"os"
	"path/filepath"
	"slices"
	"strings"
	"testing"
	"time"

	"github.com/flowcat-catalog/flowcat/quality"
)

// TestCaseSamplesNameTheirFile: the patients log (testdata/patients) in
// two nights that overlap. The second version's case findings point at
// lines of the second night's file, named, before any case whose events
// were read back from the first file (they carry no line), and name each
// such case once. The expected lines are found with the standard library:
// the lowest lines of the second file that start a service and are not
// held already (every start of this log lacks an arrival or enqueue
// before it: wait_no_enqueue).
func TestCaseSamplesNameTheirFile(t *testing.T) {
	lines := gzipLines(t, filepath.Join("..", "testdata", "patients", "patients.csv.gz"))
	head, rows := lines[0], lines[1:]
	first, second := rows[:1500], rows[1000:] // the log lists all starts first (2,721)
	prof, err := os.ReadFile(filepath.Join("..", "testdata", "patients", "profile.yaml"))
	if err != nil {
		t.Fatal(err)
	}
	e := newEnv(t, nil)
	e.dataset(t, "p", "patients", func(s *DatasetSpec) { s.Profile = prof; s.Historical = true })
	body := func(rs []string) []byte { return []byte(head + "\n" + strings.Join(rs, "\n") + "\n") }
	e.ingest(t, "p", "patients", body(first), "night1.csv")
	res := e.ingest(t, "p", "patients", body(second), "night2.csv")

	held := map[string]bool{}
	for _, r := range first {
		held[r] = true
	}
	typ := slices.Index(strings.Split(head, ","), "registration_type")
	var want []int64
	for i, r := range second {
		f, err := csv.NewReader(strings.NewReader(r)).Read()
		if err != nil {
			t.Fatal(err)
		}
		if !held[r] && f[typ] == "start" && len(want) < 5 {
			want = append(want, int64(i+2))
		}
	}
	var got []quality.Sample
	for _, f := range e.report(t, res.Version).Findings() {
		if f.Code == quality.CodeWaitNoEnqueue {
			got = f.Samples
		}
	}
	if len(got) != len(want) {
		t.Fatalf("samples %+v, want lines %v of night2.csv", got, want)
	}
	for i, s := range got {
		if s.File != "night2.csv" || s.Line != want[i] {
			t.Errorf("sample %d: %+v, want night2.csv line %d", i, s, want[i])
		}
	}

	// A third night of one new service start (a start of the log one
	// second later): its line first, then cases read back from stored
	// files (no line), each case once, in pseudonym order.
	cols := strings.Split(head, ",")
	tm := slices.Index(cols, "time")
	var row []string
	for _, r := range rows {
		if f, _ := csv.NewReader(strings.NewReader(r)).Read(); f[typ] == "start" {
			row = f
			break
		}
	}
	at, err := time.Parse(time.RFC3339, row[tm])
	if err != nil {
		t.Fatal(err)
	}
	row[tm] = at.Add(time.Second).Format(time.RFC3339)
	res = e.ingest(t, "p", "patients", body([]string{strings.Join(row, ",")}), "night3.csv")
	if res.Version == nil || res.Upload.Events.New != 1 {
		t.Fatalf("night 3: %s, events %+v", res.Upload.Status, res.Upload.Events)
	}
	got = nil
	for _, f := range e.report(t, res.Version).Findings() {
		if f.Code == quality.CodeWaitNoEnqueue {
			got = f.Samples
		}
	}
	if len(got) != 5 || got[0].File != "night3.csv" || got[0].Line != 2 {
		t.Fatalf("night 3 samples %+v: want night3.csv line 2 first, and 4 more", got)
	}
	for i, s := range got[1:] {
		if s.Line != 0 || s.File != "" || s.CaseID == "" || i > 0 && s.CaseID <= got[i].CaseID {
			t.Errorf("sample %d: %+v, want a case without a line, after the previous one's (%s)", i+1, s, got[i].CaseID)
		}
	}
}
