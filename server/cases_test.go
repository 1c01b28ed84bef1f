package server

import (
	"bytes"
	"compress/gzip"
	"encoding/csv"
	"fmt"
	"math"
	"net/http"
	"os"
	"path/filepath"
	"slices"
	"testing"
	"time"

	"github.com/apache/arrow-go/v18/arrow/array"
	"github.com/apache/arrow-go/v18/parquet/file"

	"github.com/flowcat-catalog/flowcat/catalog/arrowtest"
	"github.com/flowcat-catalog/flowcat/catalog/summary"
	"github.com/flowcat-catalog/flowcat/server/api"
)

// TestSepsisCases sends the public "Sepsis Cases" log (testdata/sepsis)
// with its profile and default settings, then checks the case figures in
// the upload's report, the version's report, the stored summary and the
// case table (downloaded over HTTP, read by Apache Arrow) against the
// figures published with the log and against the test's own reading of
// the raw CSV with the standard library.
func TestSepsisCases(t *testing.T) {
	data, err := os.ReadFile(filepath.Join(sepsisDir, "sepsis-cases.csv.gz"))
	if err != nil {
		t.Fatal(err)
	}
	profile, err := os.ReadFile(filepath.Join(sepsisDir, "profile.yaml"))
	if err != nil {
		t.Fatal(err)
	}
	e := newEnv(t)
	e.createProject("hospital")
	e.createDataset("hospital", "sepsis", string(profile))
	r := e.upload("hospital", "sepsis", e.partner("hospital/sepsis"), "sepsis-cases.csv.gz", data)
	e.mustStatus(r, http.StatusCreated, "upload the sepsis log")
	var res api.UploadResult
	e.decode(r, &res)
	v := res.Version
	vq := e.versionReport("hospital", "sepsis", v.Number)

	// Published with the log (testdata/sepsis/README.md): 1050 cases, mean
	// case duration 2459733.94 s, min 122 s, max 3.6488789E7 s, events per
	// case 3 to 185, mean 14.49. The catalog holds a row equal to another in
	// every mapped column once (7 of the 15214 rows: lab values measured
	// twice at one instant differ only in unmapped columns), so events per
	// case come from the raw file's distinct mapped rows, read here with
	// the standard library; durations are unchanged by that.
	want := sepsisCasesRaw(t, filepath.Join(sepsisDir, "sepsis-cases.csv.gz"))
	var distinctRows int64
	minEv, maxEv := int64(math.MaxInt64), int64(0)
	for _, c := range want {
		distinctRows += c.ev
		minEv, maxEv = min(minEv, c.ev), max(maxEv, c.ev)
	}
	if distinctRows != 15214-7 || minEv != 3 || maxEv != 184 {
		t.Errorf("raw file: %d distinct mapped rows, %d..%d per case", distinctRows, minEv, maxEv)
	}
	meanEv := float64(distinctRows) / 1050
	for name, q := range map[string]struct {
		n                    int64
		mean, lo, hi, meanEv float64
		loEv, hiEv           int64
	}{
		"upload report":  {res.Upload.Report.Cases.Count, res.Upload.Report.Cases.MeanDurationSeconds, res.Upload.Report.Cases.MinDurationSeconds, res.Upload.Report.Cases.MaxDurationSeconds, res.Upload.Report.Cases.MeanEvents, res.Upload.Report.Cases.MinEvents, res.Upload.Report.Cases.MaxEvents},
		"version report": {vq.Cases.Count, vq.Cases.MeanDurationSeconds, vq.Cases.MinDurationSeconds, vq.Cases.MaxDurationSeconds, vq.Cases.MeanEvents, vq.Cases.MinEvents, vq.Cases.MaxEvents},
	} {
		if q.n != 1050 || math.Abs(q.mean-2459733.94) > 0.005 || q.lo != 122 || q.hi != 3.6488789e7 ||
			math.Abs(q.meanEv-meanEv) > 1e-12 || q.loEv != minEv || q.hiEv != maxEv {
			t.Errorf("%s: %+v; published 1050 cases, mean 2459733.94 s, 122..3.6488789E7 s; %d..%d events, mean %.4f", name, q, minEv, maxEv, meanEv)
		}
	}
	if vq.Stages.Cases != 1050 {
		t.Errorf("stage coverage over %d cases, want 1050", vq.Stages.Cases)
	}

	member := e.member("hospital")
	base := "/api/v1/projects/hospital/datasets/sepsis/versions/1"
	sr := e.do(http.MethodGet, base+"/summary", member, nil, map[string]string{"Accept-Encoding": "identity"})
	e.mustStatus(sr, http.StatusOK, "summary")
	var s summary.Summary
	e.decode(sr, &s)
	if s.Cases.Value != 1050 || !s.Cases.Exact || s.LengthOfStay.N != 1050 || math.Abs(s.LengthOfStay.Mean-2459733.94) > 0.005 ||
		s.LengthOfStay.Min != 122 || s.LengthOfStay.Max != 36488789 || s.Resources.Value != 26 {
		t.Errorf("summary cases %+v, stays n %d mean %.4f min %v max %v, resources %v; published 1050, 2459733.94, 122, 36488789, 26 org:group values",
			s.Cases, s.LengthOfStay.N, s.LengthOfStay.Mean, s.LengthOfStay.Min, s.LengthOfStay.Max, s.Resources.Value)
	}

	// Events per case as above. The gaps between consecutive events of a
	// case sum to the case durations, so their mean is the published total
	// 2.582720637E9 s over (events - cases) gaps.
	if ev := s.EventsPerCase; ev.N != 1050 || ev.Min != float64(minEv) || ev.Max != float64(maxEv) || math.Abs(ev.Mean-meanEv) > 1e-12 {
		t.Errorf("events per case %+v, want %d..%d, mean %.4f", ev, minEv, maxEv, meanEv)
	}
	gaps := uint64(distinctRows - 1050)
	if b := s.BetweenEvents; b.N != gaps || math.Abs(b.Mean-2.582720637e9/float64(gaps)) > 1e-3 {
		t.Errorf("between events n %d mean %.4f, want %d and %.4f", b.N, b.Mean, gaps, 2.582720637e9/float64(gaps))
	}
	// A log of completions alone: no waits, no services, no exits for
	// Little's law, and it says so.
	if len(s.NotMeasurable) != 3 || s.NotMeasurable[0].Figure != "waits" || s.NotMeasurable[1].Figure != "services" || s.NotMeasurable[2].Figure != "littles_law" {
		t.Errorf("not measurable %+v, want waits, services and littles_law", s.NotMeasurable)
	}

	// The case table over HTTP, through Arrow: one row per case id, each
	// with the events and duration the standard library reads in the raw
	// file (Europe/Amsterdam wall clock, as the README says).
	ct := v.Manifest.CaseTable
	if ct == nil {
		t.Fatal("no case table in the manifest")
	}
	cr := e.get(fmt.Sprintf("%s/files/%s", base, ct.SHA256), member)
	e.mustStatus(cr, http.StatusOK, "case table download")
	pf, err := file.NewParquetReader(bytes.NewReader(cr.Body))
	if err != nil {
		t.Fatalf("arrow cannot open the case table: %v", err)
	}
	tbl := arrowtest.Table(t, pf)
	defer tbl.Release()
	if tbl.NumRows() != 1050 || ct.Rows != 1050 {
		t.Errorf("case table has %d rows (manifest %d), want 1050", tbl.NumRows(), ct.Rows)
	}
	col := func(name string) []any {
		idx := tbl.Schema().FieldIndices(name)
		if len(idx) != 1 {
			t.Fatalf("no %s column in %v", name, tbl.Schema())
		}
		var out []any
		for _, ch := range tbl.Column(idx[0]).Data().Chunks() {
			for i := 0; i < ch.Len(); i++ {
				switch a := ch.(type) {
				case *array.String:
					out = append(out, a.Value(i))
				case *array.Int64:
					out = append(out, a.Value(i))
				case *array.Float64:
					if a.IsNull(i) {
						out = append(out, nil)
					} else {
						out = append(out, a.Value(i))
					}
				default:
					t.Fatalf("%s: arrow type %T", name, ch)
				}
			}
		}
		return out
	}
	ids, evs, durs, waits := col("case_id"), col("events"), col("duration_seconds"), col("wait_seconds")
	seen := map[string]bool{}
	var got []casePair
	for i := range ids {
		id := ids[i].(string)
		if seen[id] {
			t.Fatalf("case %s twice in the case table", id)
		}
		if i > 0 && id < ids[i-1].(string) {
			t.Fatal("case table not in case_id order")
		}
		seen[id] = true
		got = append(got, casePair{evs[i].(int64), durs[i].(float64)})
		if waits[i] != nil {
			t.Errorf("case %s: a wait in a completion-only log", id)
		}
	}
	cmpPair := func(a, b casePair) int {
		if a.ev != b.ev {
			return int(a.ev - b.ev)
		}
		switch {
		case a.dur < b.dur:
			return -1
		case a.dur > b.dur:
			return 1
		}
		return 0
	}
	slices.SortFunc(got, cmpPair)
	slices.SortFunc(want, cmpPair)
	if !slices.Equal(got, want) {
		t.Errorf("case table (events, duration) differ from the standard library's reading of the raw file")
	}
}

// sepsisCasesRaw reads the raw sepsis CSV with the standard library: per
// case, its events (distinct rows of the mapped columns) and its duration
// in seconds, wall-clock times read in Europe/Amsterdam.
func sepsisCasesRaw(t *testing.T, path string) []casePair {
	t.Helper()
	f, err := os.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	zr, err := gzip.NewReader(f)
	if err != nil {
		t.Fatal(err)
	}
	r := csv.NewReader(zr)
	r.Comma = ';'
	head, err := r.Read()
	if err != nil {
		t.Fatal(err)
	}
	ci, ti := slices.Index(head, "Case ID"), slices.Index(head, "Complete Timestamp")
	ai, gi, li := slices.Index(head, "Activity"), slices.Index(head, "org:group"), slices.Index(head, "lifecycle:transition")
	seen := map[[5]string]bool{}
	ams, err := time.LoadLocation("Europe/Amsterdam")
	if err != nil {
		t.Fatal(err)
	}
	type acc struct {
		n      int64
		lo, hi time.Time
	}
	m := map[string]*acc{}
	recs, err := r.ReadAll()
	if err != nil {
		t.Fatal(err)
	}
	for _, rec := range recs {
		// One event per distinct row of the mapped columns (profile.yaml).
		k := [5]string{rec[ci], rec[ai], rec[ti], rec[gi], rec[li]}
		if seen[k] {
			continue
		}
		seen[k] = true
		ts, err := time.ParseInLocation("2006/01/02 15:04:05.000", rec[ti], ams)
		if err != nil {
			t.Fatal(err)
		}
		a := m[rec[ci]]
		if a == nil {
			m[rec[ci]] = &acc{1, ts, ts}
			continue
		}
		a.n++
		if ts.Before(a.lo) {
			a.lo = ts
		}
		if ts.After(a.hi) {
			a.hi = ts
		}
	}
	var out []casePair
	for _, a := range m {
		out = append(out, casePair{a.n, a.hi.Sub(a.lo).Seconds()})
	}
	return out
}

// casePair is a case's events and duration in seconds.
type casePair struct {
	ev  int64
	dur float64
}
