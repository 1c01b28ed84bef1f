package catalog

import (
	"context"
	"crypto/sha256"
	"encoding/csv"
	"encoding/json"
	"fmt"
	"io"
	"reflect"
	"slices"
	"strings"
	"testing"
	"time"

	"github.com/flowcat-catalog/flowcat/anonymize"
	"github.com/flowcat-catalog/flowcat/quality"
	"github.com/flowcat-catalog/flowcat/schema"
)

// brokenRows counts, with the standard library alone (encoding/csv and
// time.Parse), the rows of a semicolon CSV file that cannot be events of
// the sepsis profile: a field count other than the header's, or a
// timestamp that does not parse in the log's layout. It returns each
// broken row's text, one entry per row.
func brokenRows(t *testing.T, file string) []string {
	t.Helper()
	r := csv.NewReader(strings.NewReader(file))
	r.Comma, r.FieldsPerRecord, r.LazyQuotes = ';', -1, true
	head, err := r.Read()
	if err != nil {
		t.Fatal(err)
	}
	ts := slices.Index(head, "Complete Timestamp")
	var out []string
	for {
		rec, err := r.Read()
		if err == io.EOF {
			return out
		}
		if err != nil {
			t.Fatal(err)
		}
		if len(rec) != len(head) {
			out = append(out, strings.Join(rec, ";"))
			continue
		}
		if _, err := time.Parse("2006/01/02 15:04:05.000", rec[ts]); err != nil {
			out = append(out, strings.Join(rec, ";"))
		}
	}
}

// TestResentBrokenRowCountsOnce: three nightly exports of the sepsis log
// (testdata/sepsis) that overlap, as partners re-send the last days each
// night: nights 1 and 2 both hold a row with a broken timestamp and a row
// that lost a field; night 2 adds a broken row of its own, which night 3
// sends again. Each upload's report counts the broken rows of its file;
// the version's report counts each broken row once, as many as the
// standard library finds distinct among the three files, and tells how
// many were sent again. Merging every file's report again (as a
// replacement does) gives the same rows and rejections as the appends.
func TestResentBrokenRowCountsOnce(t *testing.T) {
	lines := sepsisLines(t)
	head, rows := lines[0], slices.Clone(lines[1:])
	ts := slices.Index(strings.Split(head, ";"), "Complete Timestamp")
	breakTime := func(i int) {
		f := strings.Split(rows[i], ";")
		f[ts] = "2014/13/45 08:00:00.000"
		rows[i] = strings.Join(f, ";")
	}
	breakTime(300)
	rows[700] = strings.Replace(rows[700], ";", "", 1) // a field lost: field_count
	breakTime(1500)
	e, _ := sepsisDataset(t)
	body := func(rs []string) string { return head + "\n" + strings.Join(rs, "\n") + "\n" }
	nights := []string{body(rows[:1000]), body(rows[500:2000]), body(rows[1200:3000])}

	distinct := map[string]bool{}
	var all int
	var res *IngestResult
	for n, file := range nights {
		broken := brokenRows(t, file)
		all += len(broken)
		var before int64 // broken rows an earlier night had
		for _, b := range broken {
			if distinct[b] {
				before++
			}
		}
		for _, b := range broken {
			distinct[b] = true
		}
		res = e.ingest(t, "p", "sepsis", []byte(file), "night"+string(rune('1'+n))+".csv")
		if res.Version == nil || res.Upload.Report == nil {
			t.Fatalf("night %d: %s", n+1, res.Upload.Status)
		}
		// The upload's own report counts every broken row of its file,
		// and the upload how many an earlier night had.
		if got := res.Upload.Report.Rows.Rejected; got != int64(len(broken)) {
			t.Errorf("night %d: upload rejected %d rows, the file has %d broken", n+1, got, len(broken))
		}
		if res.Upload.RejectedBefore != before {
			t.Errorf("night %d: %d rows rejected before, the standard library finds %d", n+1, res.Upload.RejectedBefore, before)
		}
	}
	if len(distinct) != 3 || all != 5 {
		t.Fatalf("the standard library finds %d broken rows, %d distinct; the test means 5 and 3", all, len(distinct))
	}
	v := res.Version
	vrep := e.report(t, v)
	want := int64(len(distinct))
	if r := vrep.Rows; r.Rejected != want || r.Again != int64(all)-want || r.Accepted != v.Manifest.Rows || r.Total != r.Accepted+want {
		t.Errorf("version rows %+v; want %d rejected, %d again, %d accepted (its rows)", r, want, all-int(want), v.Manifest.Rows)
	}
	byReason := map[string]int64{}
	for _, rc := range vrep.Rejections {
		byReason[string(rc.Reason)] = rc.Count
		for _, s := range rc.Samples {
			// Each broken row is shown from the first file that held it.
			if s.File != "night1.csv" && !(s.File == "night2.csv" && s.Line == 1500-500+2) {
				t.Errorf("sample %+v: a row sent again is shown", s)
			}
		}
	}
	if !reflect.DeepEqual(byReason, map[string]int64{"bad_timestamp": 2, "field_count": 1}) {
		t.Errorf("version rejections by reason %v", byReason)
	}
	var text strings.Builder
	if err := vrep.Text(&text, false); err != nil || !strings.Contains(text.String(), "2 rejected rows sent again by later files (the same text), counted once above") {
		t.Errorf("version report text: %v\n%s", err, text.String())
	}

	// Night 1 again in other bytes (CRLF): every event held, its two
	// broken rows rejected before.
	dup := e.ingest(t, "p", "sepsis", []byte(strings.ReplaceAll(nights[0], "\n", "\r\n")), "night1-again.csv")
	if u := dup.Upload; u.Status != UploadDuplicate || u.RejectedBefore != 2 || !strings.HasSuffix(u.Sentence(), "; 2 rows rejected (all rejected before: sent again); nothing stored") {
		t.Errorf("night 1 again: %s, %d rejected before, %q", u.Status, u.RejectedBefore, u.Sentence())
	}

	// Every file's report merged again, as a replacement merges them.
	rebuilt, err := e.s.mergeQuality(context.Background(), v, &filePlan{files: v.Manifest.Files}, nil, ModeReplaceAll, nil, quality.Repeats{})
	if err != nil {
		t.Fatal(err)
	}
	a, _ := json.Marshal([]any{rebuilt.Rows, rebuilt.Rejections})
	b, _ := json.Marshal([]any{vrep.Rows, vrep.Rejections})
	if string(a) != string(b) {
		t.Errorf("rebuilt from the files:\n%s\nby appends:\n%s", a, b)
	}
}

// TestResentBrokenRowAfterReplaceWindow: a replace-window rewrites the
// first night's file without its events in the window, and its report
// with them goes (a rewritten file's report holds no rejected rows): the
// broken row the replacement sends again is then counted once, as the
// replacement's, and not as one rejected before.
func TestResentBrokenRowAfterReplaceWindow(t *testing.T) {
	lines := sepsisLines(t)
	head, rows := lines[0], slices.Clone(lines[1:1001])
	cols := strings.Split(head, ";")
	ts := slices.Index(cols, "Complete Timestamp")
	f := strings.Split(rows[300], ";")
	f[ts] = "2014/13/45 08:00:00.000"
	broken := strings.Join(f, ";")
	rows[300] = broken
	e, _ := sepsisDataset(t)
	body := func(rs []string) []byte { return []byte(head + "\n" + strings.Join(rs, "\n") + "\n") }
	e.ingest(t, "p", "sepsis", body(rows), "night1.csv")

	// The window: October 2014 (Amsterdam time, as the profile reads the
	// log); the replacement sends that month's rows again and the broken row.
	ams, err := time.LoadLocation("Europe/Amsterdam")
	if err != nil {
		t.Fatal(err)
	}
	from, to := time.Date(2014, 10, 1, 0, 0, 0, 0, ams), time.Date(2014, 11, 1, 0, 0, 0, 0, ams)
	var again []string
	for _, r := range rows {
		at, err := time.ParseInLocation("2006/01/02 15:04:05.000", strings.Split(r, ";")[ts], ams)
		if err == nil && !at.Before(from) && at.Before(to) {
			again = append(again, r)
		}
	}
	if len(again) == 0 || len(again) == len(rows)-1 {
		t.Fatalf("%d rows in the window: the test needs some of the file's rows, not all", len(again))
	}
	again = append(again, broken)
	res, err := e.ingestOpt(t, "p", "sepsis", body(again), IngestOptions{Filename: "october.csv", Mode: ModeReplaceWindow, From: from, To: to})
	if err != nil || res.Version == nil {
		t.Fatalf("replace-window: %v", err)
	}
	rewritten := 0
	for _, f := range res.Version.Manifest.Files {
		if f.DerivedFrom != nil {
			rewritten++
		}
	}
	if rewritten != 1 {
		t.Fatalf("%d files rewritten, want the first night's", rewritten)
	}
	if res.Upload.RejectedBefore != 0 {
		t.Errorf("%d rows rejected before, want 0 (the rewritten file's rejected rows are not the version's)", res.Upload.RejectedBefore)
	}
	if r := e.report(t, res.Version).Rows; r.Rejected != 1 || r.Again != 0 || r.Accepted != res.Version.Manifest.Rows {
		t.Errorf("version rows %+v, want 1 rejected, none again, %d accepted", r, res.Version.Manifest.Rows)
	}
}

// TestRejectedRowsBound: an upload identifies at most maxRejectedRowKeys
// rejected rows, the first ones; rows without a digest are not kept; the
// packed form reads back as written.
func TestRejectedRowsBound(t *testing.T) {
	mk, err := anonymize.GenerateMasterKey()
	if err != nil {
		t.Fatal(err)
	}
	sk, err := anonymize.NewProjectKey(mk, "p")
	if err != nil {
		t.Fatal(err)
	}
	pz, err := anonymize.OpenProjectKey(mk, "p", sk)
	if err != nil {
		t.Fatal(err)
	}
	var rr rejectedRows
	rr.add(pz, &schema.Rejection{Line: 1, Reason: schema.ReasonMalformedRow}) // no digest
	for i := range maxRejectedRowKeys + 10 {
		rej := schema.Rejection{Line: int64(i + 2), Reason: schema.ReasonBadTimestamp, Row: schema.RowDigest(sha256.Sum256([]byte(fmt.Sprint(i))))}
		rr.add(pz, &rej)
	}
	if len(rr.rows) != maxRejectedRowKeys || rr.rows[0].line != 2 || rr.rows[len(rr.rows)-1].line != maxRejectedRowKeys+1 {
		t.Fatalf("%d rows kept, lines %d..%d", len(rr.rows), rr.rows[0].line, rr.rows[len(rr.rows)-1].line)
	}
	back, err := decodeRejectedRows(encodeRejectedRows(rr.rows))
	if err != nil || !reflect.DeepEqual(back, rr.rows) {
		t.Fatalf("packed rows read back differently: %v", err)
	}
	if _, err := decodeRejectedRows(encodeRejectedRows(rr.rows[:2])[:20]); err == nil {
		t.Error("a truncated record reads back without an error")
	}
}
