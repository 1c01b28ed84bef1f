package catalog

import (
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"maps"
	"math/rand/v2"
	"os"
	"path/filepath"
	"reflect"
	"slices"
	"strings"
	"testing"
	"time"

	"github.com/apache/arrow-go/v18/arrow"
	"github.com/apache/arrow-go/v18/arrow/array"
	"github.com/apache/arrow-go/v18/parquet/file"

	"github.com/flowcat-catalog/flowcat/anonymize"
	"github.com/flowcat-catalog/flowcat/catalog/arrowtest"
	"github.com/flowcat-catalog/flowcat/quality"
	"github.com/flowcat-catalog/flowcat/schema"
)

// arrowRows reads every file of v with arrow-go, an independent Parquet
// reader, and returns its rows as "value|value|...|" in schema order,
// sorted (the format of versionRows).
func (e *env) arrowRows(t testing.TB, v *Version) []string {
	t.Helper()
	var out []string
	for _, f := range v.Manifest.Files {
		pf, err := file.NewParquetReader(bytes.NewReader(e.blobBytes(t, f.SHA256)))
		if err != nil {
			t.Fatalf("arrow cannot open %s: %v", f.SHA256, err)
		}
		tbl := arrowtest.Table(t, pf)
		n := int(tbl.NumRows())
		rows := make([]strings.Builder, n)
		for _, fl := range schema.Fields {
			idx := tbl.Schema().FieldIndices(string(fl))
			if len(idx) != 1 {
				t.Fatalf("column %s: %v", fl, idx)
			}
			r := 0
			for _, ch := range tbl.Column(idx[0]).Data().Chunks() {
				for i := 0; i < ch.Len(); i++ {
					var v string
					switch a := ch.(type) {
					case *array.Timestamp:
						if tt := a.DataType().(*arrow.TimestampType); tt.Unit != arrow.Microsecond {
							t.Fatalf("arrow type %v", tt)
						}
						v = time.UnixMicro(int64(a.Value(i))).UTC().Format("2006-01-02T15:04:05.000000Z07:00")
					case *array.String:
						if !a.IsNull(i) {
							v = a.Value(i)
						}
					case *array.Binary:
						if !a.IsNull(i) {
							v = string(a.Value(i))
						}
					default:
						t.Fatalf("%s: arrow array %T", fl, ch)
					}
					rows[r].WriteString(v)
					rows[r].WriteByte('|')
					r++
				}
			}
		}
		tbl.Release()
		pf.Close()
		if int64(n) != f.Rows {
			t.Fatalf("file %s: arrow reads %d rows, the manifest says %d", f.SHA256, n, f.Rows)
		}
		for i := range rows {
			out = append(out, rows[i].String())
		}
	}
	slices.Sort(out)
	return out
}

// expectRows turns source rows into the stored form of versionRows:
// pseudonymized under project p's key, instants in UTC microseconds.
func (e *env) expectRows(t testing.TB, p string, rows []row) []string {
	t.Helper()
	proj, err := e.s.Project(context.Background(), p)
	if err != nil {
		t.Fatal(err)
	}
	pz, err := anonymize.OpenProjectKey(e.master, p, proj.Key)
	if err != nil {
		t.Fatal(err)
	}
	out := make([]string, 0, len(rows))
	for _, r := range rows {
		ev := schema.Event{Site: r[0], CaseID: r[1], SubjectID: r[2], ResourceID: r[3], Type: schema.EventType(r[4]),
			Activity: r[5], Queue: r[6], OccurredAt: atOf(t, r).Truncate(time.Microsecond).UTC(), Priority: r[8], Channel: r[9], Outcome: r[10], EventID: r[11]}
		pz.Apply(&ev)
		var b strings.Builder
		for _, fl := range schema.Fields {
			if fl == schema.FieldOccurredAt {
				b.WriteString(ev.OccurredAt.Format("2006-01-02T15:04:05.000000Z07:00"))
			} else {
				b.WriteString(ev.Value(fl))
			}
			b.WriteByte('|')
		}
		out = append(out, b.String())
	}
	slices.Sort(out)
	return out
}

func distinct(s []string) []string { return slices.Compact(slices.Clone(s)) }

// A day's file, then the same file with one late event: the latest version
// holds the day's rows and the late event once each, and its quality and
// summary are those of the day with the late event.
func TestHeldDayThenLateEvent(t *testing.T) {
	e := newEnv(t, func(o *Options) { o.RunEvents = 100; o.RowGroupRows = 64 })
	e.dataset(t, "p", "d", nil)
	e.dataset(t, "p", "once", nil)
	ctx := context.Background()
	day := genRows(genOpt{Seed: 7, N: 300, Cases: 61, Shuffle: true})
	late := day[17]
	late[4], late[7], late[11] = "departure", atOf(t, late).Add(90*time.Minute).Format(time.RFC3339Nano), "late-1"
	withLate := append(slices.Clone(day), late)

	v1 := e.ingest(t, "p", "d", csvBytes(header, day), "day.csv")
	res := e.ingest(t, "p", "d", csvBytes(header, withLate), "day-again.csv")
	if res.Upload.Status != UploadAccepted || res.Version.Number != 2 {
		t.Fatalf("second upload: %s v%d", res.Upload.Status, res.Upload.Version)
	}
	ev := res.Upload.Events
	if ev.Read != 301 || ev.New != 1 || ev.Held != 300 || ev.Copies != 0 || ev.Changed != 0 {
		t.Errorf("upload counts %+v, want 301 read, 1 new, 300 held", ev)
	}
	if l := res.Version.Manifest.Lineage.Events; l == nil || l.New != 1 || l.Held != 300 || l.Sites != nil {
		t.Errorf("lineage counts %+v", l)
	}
	if got := ev.Sentence(res.Version.Number); got != "v2: 1 new event, 300 already held, 0 changed" {
		t.Errorf("sentence %q", got)
	}
	got := e.arrowRows(t, res.Version)
	want := e.expectRows(t, "p", withLate)
	if !slices.Equal(got, want) {
		t.Fatalf("version 2 holds %d rows (arrow-go), want %d = rows(day) + 1", len(got), len(want))
	}
	if res.Version.Manifest.Rows != 301 || v1.Version.Manifest.Rows != 300 {
		t.Errorf("manifest rows %d then %d", v1.Version.Manifest.Rows, res.Version.Manifest.Rows)
	}

	// The same events in one upload, in a second dataset of the project:
	// every event-level figure of quality and summary agrees. (Per-case
	// figures of a case split across files come from the case table.)
	one := e.ingest(t, "p", "once", csvBytes(header, withLate), "day.csv")
	q2, q1 := e.report(t, res.Version), e.report(t, one.Version)
	if q2.Rows != q1.Rows || q2.Count(quality.CodeExactDuplicate) != 0 || len(q1.Raw.Sites) != len(q2.Raw.Sites) {
		t.Fatalf("quality of v2: rows %+v, exact duplicates %d; of one upload: rows %+v", q2.Rows, q2.Count(quality.CodeExactDuplicate), q1.Rows)
	}
	for i := range q1.Raw.Sites {
		a, b := q1.Raw.Sites[i], q2.Raw.Sites[i]
		if a.Site != b.Site || a.Events != b.Events || !maps.Equal(a.NonEmpty, b.NonEmpty) || !reflect.DeepEqual(a.Hours, b.Hours) || !maps.Equal(a.Grid, b.Grid) {
			t.Errorf("site %s: version counts differ from one upload's", a.Site)
		}
	}
	var s1, s2 map[string]any
	for _, x := range []struct {
		ref string
		n   int
		dst *map[string]any
	}{{"p/d", 2, &s2}, {"p/once", 1, &s1}} {
		b, err := e.s.Summary(ctx, x.ref, x.n)
		if err != nil {
			t.Fatal(err)
		}
		if err := json.Unmarshal(b, x.dst); err != nil {
			t.Fatal(err)
		}
	}
	for _, k := range []string{"events", "event_types", "cases", "subjects", "resources", "from", "to", "exposure_hours"} {
		if !reflect.DeepEqual(s1[k], s2[k]) {
			t.Errorf("summary %s: v2 %v, one upload %v", k, s2[k], s1[k])
		}
	}
	if a1, a2 := s1["arrivals"].(map[string]any), s2["arrivals"].(map[string]any); !reflect.DeepEqual(a1["total"], a2["total"]) || s2["events"] != float64(301) {
		t.Errorf("arrivals %v / %v, events %v", a2["total"], a1["total"], s2["events"])
	}
}

// Exact copies inside one file are stored once and counted.
func TestHeldCopiesWithinFile(t *testing.T) {
	e := newEnv(t, func(o *Options) { o.RunEvents = 50 })
	e.dataset(t, "p", "d", nil)
	rows := genRows(genOpt{Seed: 3, N: 200, Shuffle: true})
	sent := append(slices.Clone(rows), rows[3], rows[3], rows[150], rows[0])
	res := e.ingest(t, "p", "d", csvBytes(header, sent), "n.csv")
	ev := res.Upload.Events
	if ev.Read != 204 || ev.New != 200 || ev.Copies != 4 || ev.Held != 0 {
		t.Errorf("counts %+v, want 204 read, 200 new, 4 copies", ev)
	}
	if !slices.Equal(e.arrowRows(t, res.Version), e.expectRows(t, "p", rows)) || res.Version.Manifest.Rows != 200 {
		t.Errorf("version holds %d rows, want the 200 distinct", res.Version.Manifest.Rows)
	}
	if r := res.Upload.Report; r.Rows.Accepted != 200 || r.Count(quality.CodeExactDuplicate) != 0 {
		t.Errorf("quality saw %d rows, %d exact duplicates", r.Rows.Accepted, r.Count(quality.CodeExactDuplicate))
	}
	if !strings.Contains(ev.Sentence(1), "4 copies within the file stored once") {
		t.Errorf("sentence %q", ev.Sentence(1))
	}
	// Copies are stored once in a replacement too.
	r2, err := e.ingestOpt(t, "p", "d", csvBytes(header, sent), IngestOptions{Mode: ModeReplaceAll})
	if err != nil {
		t.Fatal(err)
	}
	if r2.Upload.Events.Copies != 4 || r2.Version.Manifest.Rows != 200 || r2.Upload.Events.Held != 0 {
		t.Errorf("replace-all: %+v, %d rows", r2.Upload.Events, r2.Version.Manifest.Rows)
	}
}

// stableProfile maps the schema's own columns and declares event_id stable.
const stableProfile = `format: csv
fields:
  site: site
  case_id: case_id
  subject_id: subject_id
  resource_id: resource_id
  event_type: event_type
  activity: activity
  queue: queue
  occurred_at: occurred_at
  priority: priority
  channel: channel
  outcome: outcome
  event_id:
    column: event_id
    stable: true
`

// A stable event_id: a changed event is refused with its line and field
// under the default policy, and replaces the old one under correct.
func TestHeldStableEventIDChanges(t *testing.T) {
	e := newEnv(t, func(o *Options) { o.RowGroupRows = 32 })
	e.dataset(t, "p", "refuse", func(s *DatasetSpec) { s.Profile = []byte(stableProfile) })
	e.dataset(t, "p", "correct", func(s *DatasetSpec) { s.Profile = []byte(stableProfile); s.Changes = ChangesCorrect })
	day := mkRows("north", "A", 0, 90)
	changed := slices.Clone(day)
	changed[40][10] = "admitted"                                                        // outcome
	changed[70][7] = atOf(t, changed[70]).Add(3 * time.Minute).Format(time.RFC3339Nano) // occurred_at
	changed[70][3] = "R-2"                                                              // resource_id
	for _, ds := range []string{"refuse", "correct"} {
		v1 := e.ingest(t, "p", ds, csvBytes(header, day), "day.csv")
		if v1.Upload.Events.Identity != IdentityEventID {
			t.Fatalf("identity %s", v1.Upload.Events.Identity)
		}
		res, err := e.ingestOpt(t, "p", ds, csvBytes(header, changed), IngestOptions{Filename: "day2.csv"})
		switch ds {
		case "refuse":
			ue := res.Upload.Error
			if !errors.Is(err, ErrRejected) || res.Upload.Status != UploadRejected || ue == nil || ue.Rule != RuleChangedEvent {
				t.Fatalf("refuse: %v %+v", err, res.Upload)
			}
			// Line 42: the header is line 1, row 40 (0-based) is line 42.
			if ue.Line != 42 || ue.Column != "outcome" || !strings.Contains(ue.Message, "72 (resource_id, occurred_at)") || !strings.Contains(ue.Message, "2 events in all") {
				t.Errorf("refusal %+v", ue)
			}
			mustContainNone(t, "the refusal", ue.Message+err.Error(), []string{"admitted", "R-2", "A-ev40"})
			if res.Upload.Events.Changed != 2 || res.Upload.Events.Held != 88 {
				t.Errorf("counts %+v", res.Upload.Events)
			}
			if v, _ := e.s.Version(context.Background(), "p", ds, 0); v.Number != 1 {
				t.Errorf("latest is v%d", v.Number)
			}
		case "correct":
			if err != nil || res.Upload.Status != UploadAccepted {
				t.Fatalf("correct: %v %+v", err, res.Upload)
			}
			l := res.Version.Manifest.Lineage
			if l.Events.Changed != 2 || l.Events.Removed != 2 || l.RowsRemoved != 2 || l.Events.Held != 88 || res.Version.Manifest.Rows != 90 {
				t.Errorf("lineage %+v %+v, rows %d", l, l.Events, res.Version.Manifest.Rows)
			}
			if got, want := e.arrowRows(t, res.Version), e.expectRows(t, "p", changed); !slices.Equal(got, want) {
				t.Errorf("the corrected version holds %d rows, not the corrected day's %d", len(got), len(want))
			}
			if q := e.report(t, res.Version); q.Rows.Accepted != 90 {
				t.Errorf("quality of the corrected version counts %d rows", q.Rows.Accepted)
			}
			if !strings.Contains(res.Upload.Events.Sentence(2), "v2: 0 new events, 88 already held, 2 changed (2 old events replaced)") {
				t.Errorf("sentence %q", res.Upload.Events.Sentence(2))
			}
		}
	}
	e.assertTempEmpty(t)
	// Two contents of one id within one upload: refused under both policies.
	twice := append(mkRows("north", "B", 3, 10), mkRows("north", "B", 3, 10)[4])
	twice[10][10] = "home"
	res, err := e.ingestOpt(t, "p", "correct", csvBytes(header, twice), IngestOptions{})
	if !errors.Is(err, ErrRejected) || res.Upload.Error == nil || res.Upload.Error.Rule != RuleConflictingEvent || res.Upload.Error.Line != 12 || res.Upload.Error.Column != "outcome" {
		t.Errorf("conflict: %v %+v", err, res.Upload.Error)
	}
}

// seriesOpt shapes a run of nightly uploads of overlapping windows.
type seriesOpt struct {
	Seed    uint64
	Nights  int
	PerDay  int
	Window  int     // days per upload
	Late    float64 // share of events first sent 1-3 nights late
	Correct float64 // share of events re-sent with another outcome from a later night on
	Copies  float64 // share of rows sent twice in one upload
}

// seriesEvent is one event of the series: its row, the night it is first
// sent, and (for a corrected one) its corrected row and the night from
// which that is sent instead.
type seriesEvent struct {
	r, fixed   row
	first, fix int
}

// seriesAt returns event k of day d, a pure function of o, d and k, so
// that a long series needs no memory.
func seriesAt(o seriesOpt, d, k int) seriesEvent {
	r := rand.New(rand.NewPCG(o.Seed^uint64(d)<<32, uint64(k)))
	step := 24 * time.Hour / time.Duration(o.PerDay)
	at := genBase.Add(time.Duration(d)*24*time.Hour + time.Duration(k)*step + time.Duration(r.Int64N(int64(step))))
	c := d*o.PerDay/5 + k/5
	ev := seriesEvent{first: d, fix: -1, r: row{
		[]string{"north", "south"}[c%2], fmt.Sprintf("S-%d", c), fmt.Sprintf("P-%d", c%131), fmt.Sprintf("R-%d", r.IntN(9)),
		genTypes[k%5], []string{"triage", "consult"}[r.IntN(2)], "q1", at.Format(time.RFC3339Nano),
		fmt.Sprint(1 + r.IntN(5)), "phone", "home", fmt.Sprintf("e-%d-%d", d, k),
	}}
	if r.Float64() < o.Late {
		ev.first = d + 1 + r.IntN(3)
	}
	if r.Float64() < o.Correct {
		ev.fix = ev.first + 1 + r.IntN(3)
		ev.fixed = ev.r
		ev.fixed[10] = "admitted"
	}
	return ev
}

// eachNightRow calls fn for the rows of night n's upload: the events of
// the window's days sent by then, corrected ones as corrected, some rows
// twice, in time order up to the late ones.
func eachNightRow(o seriesOpt, n int, fn func(row)) {
	r := rand.New(rand.NewPCG(o.Seed^uint64(n), 0xc0b1e5))
	for d := max(0, n-o.Window+1); d <= n; d++ {
		for k := 0; k < o.PerDay; k++ {
			ev := seriesAt(o, d, k)
			if ev.first > n {
				continue
			}
			x := ev.r
			if ev.fix >= 0 && n >= ev.fix {
				x = ev.fixed
			}
			fn(x)
			if r.Float64() < o.Copies {
				fn(x)
			}
		}
	}
}

// night returns the rows of night n's upload, shuffled.
func night(o seriesOpt, n int) []row {
	var out []row
	eachNightRow(o, n, func(x row) { out = append(out, x) })
	r := rand.New(rand.NewPCG(o.Seed^uint64(n), 0x5401e))
	r.Shuffle(len(out), func(i, j int) { out[i], out[j] = out[j], out[i] })
	return out
}

// Thirty nightly uploads of overlapping 7-day windows, with late events,
// corrections and copies: the final version is exactly the distinct events
// sent (content identity), or the latest content of each event id (stable
// id, corrections taken), and every lineage count adds up.
func TestHeldThirtyNightSeries(t *testing.T) {
	o := seriesOpt{Seed: 1, Nights: 30, PerDay: 120, Window: 7, Late: 0.03, Correct: 0.01, Copies: 0.005}
	e := newEnv(t, func(o *Options) { o.RunEvents = 300; o.RowGroupRows = 100 })
	e.dataset(t, "p", "content", nil)
	e.dataset(t, "p", "ids", func(s *DatasetSpec) { s.Profile = []byte(stableProfile); s.Changes = ChangesCorrect })
	ctx := context.Background()
	var sent []row
	latest := map[string]row{}
	for n := 0; n < o.Nights; n++ {
		rows := night(o, n)
		sent = append(sent, rows...)
		for _, r := range rows {
			latest[r[11]] = r
		}
		for _, ds := range []string{"content", "ids"} {
			res := e.ingest(t, "p", ds, csvBytes(header, rows), fmt.Sprintf("night-%02d.csv", n))
			ev := res.Upload.Events
			if ev.Read != int64(len(rows)) || ev.Read != ev.New+ev.Held+ev.Copies+ev.Changed {
				t.Fatalf("%s night %d: %d rows, counts %+v", ds, n, len(rows), ev)
			}
			if ds == "content" && ev.Changed != 0 {
				t.Errorf("content identity counted changes: %+v", ev)
			}
			if res.Upload.Status != UploadAccepted {
				continue
			}
			v := res.Version.Manifest
			var parentRows int64
			if v.Parent > 0 {
				p, err := e.s.Version(ctx, "p", ds, v.Parent)
				if err != nil {
					t.Fatal(err)
				}
				parentRows = p.Manifest.Rows
			}
			l := v.Lineage.Events
			if v.Rows != parentRows+l.New+l.Changed-l.Removed || l.Removed != v.Lineage.RowsRemoved || (ds == "ids" && l.Removed != l.Changed) {
				t.Errorf("%s v%d: rows %d != parent %d + new %d + changed %d - removed %d", ds, v.Version, v.Rows, parentRows, l.New, l.Changed, l.Removed)
			}
			if q := e.report(t, res.Version); q.Rows.Accepted != v.Rows {
				t.Errorf("%s v%d: quality counts %d rows of %d", ds, v.Version, q.Rows.Accepted, v.Rows)
			}
		}
	}
	for _, ds := range []string{"content", "ids"} {
		v, err := e.s.Version(ctx, "p", ds, 0)
		if err != nil {
			t.Fatal(err)
		}
		var want []string
		if ds == "content" {
			want = distinct(e.expectRows(t, "p", sent))
		} else {
			var rs []row
			for _, r := range latest {
				rs = append(rs, r)
			}
			want = e.expectRows(t, "p", rs)
		}
		got := e.arrowRows(t, v)
		if !slices.Equal(got, want) {
			t.Errorf("%s: the final version holds %d rows (%d distinct), want exactly the %d distinct events", ds, len(got), len(distinct(got)), len(want))
		}
		ups, err := e.s.Uploads(ctx, "p", ds)
		if err != nil {
			t.Fatal(err)
		}
		var alerts []string
		for _, u := range ups {
			for _, a := range u.Alerts {
				if a.Code == AlertHeldShareJump {
					alerts = append(alerts, u.ID.String()+" "+a.Site)
				}
			}
		}
		if len(alerts) > 0 {
			t.Errorf("%s: held-share alerts on a steady series: %v", ds, alerts)
		}
		t.Logf("%s: %d uploads, %d rows sent, %d events held by v%d", ds, len(ups), len(sent), v.Manifest.Rows, v.Number)
	}
}

// A partner that suddenly re-sends everything: the held share jumps
// against the site's history and an alert is raised, also when the upload
// is all held (a duplicate).
func TestHeldShareJumpAlert(t *testing.T) {
	o := seriesOpt{Seed: 2, Nights: 12, PerDay: 60, Window: 2}
	e := newEnv(t, nil)
	e.dataset(t, "p", "d", nil)
	for n := 0; n < 10; n++ {
		res := e.ingest(t, "p", "d", csvBytes(header, night(o, n)), "n.csv")
		if len(res.Upload.Alerts) > 0 {
			t.Errorf("night %d: alerts %+v", n, res.Upload.Alerts)
		}
	}
	var all []row
	for n := 0; n < 10; n++ {
		all = append(all, night(seriesOpt{Seed: o.Seed, PerDay: o.PerDay, Window: 1}, n)...)
	}
	res := e.ingest(t, "p", "d", csvBytes(header, all), "everything.csv")
	if res.Upload.Status != UploadDuplicate || res.Upload.Events.Held != int64(len(all)) {
		t.Fatalf("re-send of everything: %s %+v", res.Upload.Status, res.Upload.Events)
	}
	var sites []string
	for _, a := range res.Upload.Alerts {
		if a.Code == AlertHeldShareJump && a.Value == 1 && a.Median > 0.4 && a.Median < 0.6 {
			sites = append(sites, a.Site)
		}
	}
	if !slices.Equal(sites, []string{"north", "south"}) {
		t.Errorf("alerts %+v", res.Upload.Alerts)
	}
}

// Only the held files whose time range reaches the upload's events are
// opened, and of them only the row groups that reach them.
func TestHeldReadsOnlyOverlap(t *testing.T) {
	e := newEnv(t, func(o *Options) { o.RowGroupRows = 50 })
	e.dataset(t, "p", "d", nil)
	for d := 0; d < 10; d++ {
		e.ingest(t, "p", "d", csvBytes(header, mkRows("north", fmt.Sprintf("D%d", d), d, 500)), "day.csv")
	}
	var st heldStats
	testHookHeldStats = func(s heldStats) { st = s }
	defer func() { testHookHeldStats = nil }()
	// Day 10, and one event late for the last hour of day 9.
	up := append(mkRows("north", "D10", 10, 500), mkRows("north", "L", 9, 500)[470])
	res := e.ingest(t, "p", "d", csvBytes(header, up), "day10.csv")
	if res.Upload.Events.New != 501 {
		t.Fatalf("counts %+v", res.Upload.Events)
	}
	// Day 9's file: 500 rows in 10 groups of 50; the event at minute 470
	// lies in the last group.
	if st.FilesOpened != 1 || st.RowGroupsRead != 1 || st.RowGroupsSkipped != 9 || st.RowsRead != 50 {
		t.Errorf("held reading %+v, want one file, one row group of 50 rows", st)
	}
}

// A site whose events of the night were all held has no events in the
// upload's report: no drift alert may be raised for it (its completeness
// would read 0).
func TestHeldSiteAllHeldNoDriftAlert(t *testing.T) {
	e := newEnv(t, nil)
	e.dataset(t, "p", "d", nil)
	for d := 0; d < 7; d++ {
		rows := append(mkRows("north", fmt.Sprintf("N%d-", d), d, 60), mkRows("south", fmt.Sprintf("S%d-", d), d, 60)...)
		if res := e.ingest(t, "p", "d", csvBytes(header, rows), "n.csv"); len(res.Upload.Alerts) > 0 {
			t.Fatalf("night %d: alerts %+v", d, res.Upload.Alerts)
		}
	}
	rows := append(mkRows("north", "N7-", 7, 60), mkRows("south", "S6-", 6, 60)...)
	res := e.ingest(t, "p", "d", csvBytes(header, rows), "n.csv")
	if res.Upload.Status != UploadAccepted || res.Upload.Events.Held != 60 {
		t.Fatalf("%s %+v", res.Upload.Status, res.Upload.Events)
	}
	for _, a := range res.Upload.Alerts {
		if a.Code != AlertHeldShareJump {
			t.Errorf("alert %s at %s: %s", a.Code, a.Site, a.Sentence)
		}
	}
}

// A held file that cannot be read fails the upload with an error naming
// it; nothing is stored, no hold or temp file is left, and the dataset
// takes uploads again.
func TestHeldFileMissing(t *testing.T) {
	e := newEnv(t, nil)
	e.dataset(t, "p", "d", nil)
	ctx := context.Background()
	v1 := e.ingest(t, "p", "d", csvBytes(header, mkRows("north", "A", 0, 30)), "a.csv")
	f := v1.Version.Manifest.Files[0]
	data := e.blobBytes(t, f.SHA256)
	if err := e.blobs.Delete(ctx, f.SHA256); err != nil {
		t.Fatal(err)
	}
	_, err := e.ingestOpt(t, "p", "d", csvBytes(header, mkRows("north", "A", 0, 31)), IngestOptions{})
	if err == nil || !strings.Contains(err.Error(), "held events") {
		t.Fatalf("upload against a missing held file: %v", err)
	}
	if v, _ := e.s.Version(ctx, "p", "d", 0); v.Number != 1 {
		t.Errorf("latest is v%d", v.Number)
	}
	e.s.mu.Lock()
	holds := len(e.s.pending)
	e.s.mu.Unlock()
	if holds != 0 {
		t.Errorf("%d blob holds left", holds)
	}
	e.assertTempEmpty(t)
	if err := e.blobs.Put(ctx, f.SHA256, bytes.NewReader(data)); err != nil {
		t.Fatal(err)
	}
	res := e.ingest(t, "p", "d", csvBytes(header, mkRows("north", "A", 0, 31)), "a2.csv")
	if res.Upload.Events.New != 1 || res.Upload.Events.Held != 30 {
		t.Errorf("after the file is back: %+v", res.Upload.Events)
	}
}

// Stable event ids far apart in time, among many events that never
// repeat: the upload's conflict 20 hours apart is found, and so is a held
// event whose re-sent time moved 20 hours; 25 hours is past the window,
// so the moved event is new. (The held filter keeps in its windows only
// the events whose identity the upload repeats or may hold: repeats.go.)
func TestHeldStableEventIDFarApart(t *testing.T) {
	e := newEnv(t, nil)
	e.dataset(t, "p", "far", func(s *DatasetSpec) { s.Profile = []byte(stableProfile) })
	day := mkRows("north", "F", 0, 1201) // one a minute: 20 hours
	conflict := day[0]                   // an array: a copy
	conflict[7], conflict[10] = day[1200][7], "home"
	res, err := e.ingestOpt(t, "p", "far", csvBytes(header, append(slices.Clone(day), conflict)), IngestOptions{Filename: "conflict.csv"})
	if ue := res.Upload.Error; !errors.Is(err, ErrRejected) || ue == nil || ue.Rule != RuleConflictingEvent || ue.Line != 1203 || !strings.Contains(ue.Message, "line 2") {
		t.Fatalf("conflict 20 h apart: %v %+v", err, res.Upload.Error)
	}
	e.ingest(t, "p", "far", csvBytes(header, day), "day.csv")
	for _, c := range []struct {
		shift   time.Duration
		changed int64
	}{{20 * time.Hour, 1}, {25 * time.Hour, 0}} {
		moved := slices.Clone(day)
		moved[10][7] = atOf(t, day[10]).Add(c.shift).Format(time.RFC3339Nano)
		res, err := e.ingestOpt(t, "p", "far", csvBytes(header, moved), IngestOptions{Filename: "moved.csv"})
		ev := res.Upload.Events
		if ev == nil || ev.Changed != c.changed || ev.Held != 1200 || ev.New != 1-c.changed {
			t.Fatalf("moved %v: %v, counts %+v", c.shift, err, ev)
		}
		if c.changed == 1 && (!errors.Is(err, ErrRejected) || res.Upload.Error.Rule != RuleChangedEvent || res.Upload.Error.Line != 12) {
			t.Errorf("moved %v: %v %+v", c.shift, err, res.Upload.Error)
		}
	}
}

// An append with stable ids whose held events within 24 h take more than
// Options.ChangeWindowBytes keeps no more of them at once: its look-around
// narrows (to about the span the bound fills at one event a minute: 100
// events, 50 minutes either way) from its first event on, and its counts
// say so. Exact re-sends are still all found; a change that moved the
// instant by 20 minutes is found, one moved by 3 hours is stored as new
// (the limit the counts name), where the unbounded filter finds both.
func TestHeldWindowNarrows(t *testing.T) {
	var st heldStats
	testHookHeldStats = func(s heldStats) { st = s }
	defer func() { testHookHeldStats = nil }()
	for _, bound := range []int{100, 0} {
		e := newEnv(t, func(o *Options) {
			o.ChangeWindowBytes = int64(bound) * (heldEntryCost + indexCost)
			o.RowGroupRows = 64
		})
		e.dataset(t, "p", "d", func(s *DatasetSpec) { s.Profile = []byte(stableProfile); s.Changes = ChangesCorrect })
		day := mkRows("north", "N", 0, 600) // one a minute: 10 hours
		e.ingest(t, "p", "d", csvBytes(header, day), "day.csv")
		first := atOf(t, day[0])
		again := append(slices.Clone(day), mkRows("north", "X", 0, 1)...) // one new event, so a version is made
		res := e.ingest(t, "p", "d", csvBytes(header, again), "again.csv")
		ev := res.Upload.Events
		if ev.Held != 600 || ev.New != 1 || ev.Changed != 0 {
			t.Fatalf("bound %d, a re-send: counts %+v", bound, ev)
		}
		if bound == 0 {
			if ev.ChangeWindow != nil || st.WindowPeak != 600*(heldEntryCost+indexCost) {
				t.Errorf("unbounded: change window %+v, peak %d", ev.ChangeWindow, st.WindowPeak)
			}
		} else {
			w := ev.ChangeWindow
			if w == nil || !w.From.Equal(first) || w.Bytes != int64(bound)*(heldEntryCost+indexCost) || w.Seconds < 45*60 || w.Seconds > 50*60 {
				t.Fatalf("bound %d: change window %+v, want from %v, about 50 minutes", bound, w, first)
			}
			if st.WindowPeak > w.Bytes {
				t.Errorf("bound %d: the window took %d bytes at once", bound, st.WindowPeak)
			}
			if s := ev.Sentence(2); !strings.Contains(s, "; changes looked for within 50m0s either way from 2026-03-02T00:00:00Z (the events kept reached 10,400 bytes)") {
				t.Errorf("sentence %q", s)
			}
		}
		// The afternoon re-sent, and the morning's events moved by 25 h
		// (new events): the upload's first event finds the morning's held
		// events behind it (their ids are in the upload) and the
		// afternoon's ahead.
		shifted := slices.Clone(day[300:])
		for _, r := range day[:300] {
			r[7] = atOf(t, r).Add(25 * time.Hour).Format(time.RFC3339Nano) // r is a copy
			shifted = append(shifted, r)
		}
		res = e.ingest(t, "p", "d", csvBytes(header, shifted), "afternoon.csv")
		if ev := res.Upload.Events; ev.Held != 300 || ev.New != 300 || (bound > 0) != (ev.ChangeWindow != nil) ||
			bound > 0 && (ev.ChangeWindow.Seconds < 45*60 || ev.ChangeWindow.Seconds > 50*60 || !ev.ChangeWindow.From.Equal(atOf(t, day[300]))) {
			t.Errorf("bound %d, the afternoon: counts %+v, change window %+v", bound, ev, ev.ChangeWindow)
		}
		if bound > 0 && st.WindowPeak > int64(bound)*(heldEntryCost+indexCost) {
			t.Errorf("bound %d, the afternoon: the window took %d bytes at once", bound, st.WindowPeak)
		}
		// Two corrections in the middle of the day: one 20 minutes later,
		// one 3 hours later (each still within 24 h).
		moved := slices.Clone(day)
		moved[300][7] = atOf(t, day[300]).Add(20 * time.Minute).Format(time.RFC3339Nano)
		moved[310][7] = atOf(t, day[310]).Add(3 * time.Hour).Format(time.RFC3339Nano)
		res = e.ingest(t, "p", "d", csvBytes(header, moved), "moved.csv")
		ev = res.Upload.Events
		want := EventCounts{Read: 600, Held: 598, Changed: 2}
		if bound > 0 {
			want.Changed, want.New = 1, 1
		}
		if ev.Read != want.Read || ev.Held != want.Held || ev.Changed != want.Changed || ev.New != want.New {
			t.Errorf("bound %d, moved: counts %+v, want %+v", bound, ev, want)
		}
	}
}

// The held events of one instant are all kept whatever the bound, so an
// exact re-send of a date-only day is found in full.
func TestHeldWindowOneInstant(t *testing.T) {
	var st heldStats
	testHookHeldStats = func(s heldStats) { st = s }
	defer func() { testHookHeldStats = nil }()
	e := newEnv(t, func(o *Options) { o.ChangeWindowBytes = 100 * (heldEntryCost + indexCost) })
	e.dataset(t, "p", "d", func(s *DatasetSpec) { s.Profile = []byte(stableProfile) })
	day := mkRows("north", "I", 0, 150)
	for i := range day {
		day[i][7] = day[0][7]
	}
	e.ingest(t, "p", "d", csvBytes(header, day), "day.csv")
	res := e.ingest(t, "p", "d", csvBytes(header, append(slices.Clone(day), mkRows("north", "J", 1, 1)...)), "again.csv")
	if ev := res.Upload.Events; ev.Held != 150 || ev.New != 1 || ev.ChangeWindow != nil || st.WindowPeak != 150*(heldEntryCost+indexCost) {
		t.Errorf("counts %+v, change window %+v, window peak %d", ev, ev.ChangeWindow, st.WindowPeak)
	}
}

// The upload's own events count against the bound too: a file that holds
// every event of a day twice (stable ids) keeps within it, still finds
// every copy (they share their instant), and finds a conflict 20 minutes
// apart but not one 3 hours apart once the look-around has narrowed (to
// about 100 events, 100 minutes back, at one event a minute), where the
// unbounded filter refuses both.
func TestUploadWindowNarrows(t *testing.T) {
	var st heldStats
	testHookHeldStats = func(s heldStats) { st = s }
	defer func() { testHookHeldStats = nil }()
	const budget = 100 * (windowEntryCost + indexCost + 150)
	for _, bounded := range []bool{true, false} {
		e := newEnv(t, func(o *Options) {
			if bounded {
				o.ChangeWindowBytes = budget
			}
		})
		day := mkRows("north", "W", 0, 600)
		for i, shift := range []time.Duration{20 * time.Minute, 3 * time.Hour} {
			name := fmt.Sprintf("d%d", i)
			e.dataset(t, "p", name, func(s *DatasetSpec) { s.Profile = []byte(stableProfile) })
			conflict := day[300] // an array: a copy
			conflict[7], conflict[10] = atOf(t, day[300]).Add(shift).Format(time.RFC3339Nano), "home"
			rows := append(append(slices.Clone(day), day...), conflict)
			res, err := e.ingestOpt(t, "p", name, csvBytes(header, rows), IngestOptions{Filename: "twice.csv"})
			ev := res.Upload.Events
			if ev == nil || ev.Copies != 600 {
				t.Fatalf("bounded %v, shift %v: %v, counts %+v", bounded, shift, err, ev)
			}
			refused := errors.Is(err, ErrRejected) && res.Upload.Error != nil && res.Upload.Error.Rule == RuleConflictingEvent
			if want := !bounded || shift < time.Hour; refused != want {
				t.Errorf("bounded %v, shift %v: refused %v (%v), want %v", bounded, shift, refused, err, want)
			}
			w := ev.ChangeWindow
			if bounded != (w != nil) || bounded && (w.Seconds < 20*60 || w.Seconds > 3*3600 || st.WindowPeak > budget+400) {
				t.Errorf("bounded %v, shift %v: change window %+v, peak %d bytes", bounded, shift, w, st.WindowPeak)
			}
			if !refused && ev.New != 601 {
				t.Errorf("bounded %v, shift %v: counts %+v", bounded, shift, ev)
			}
		}
	}
}

// TestHeldRealLogResend: the sepsis log (testdata/sepsis, provenance in
// its README) sent as its first 60% of rows, then whole as an append. The
// counts are those a set of the mapped columns' texts gives, built here
// with the standard library: the append holds every distinct event of
// the first part already, stores the other distinct events, and counts
// each further row equal to an earlier one as a copy.
func TestHeldRealLogResend(t *testing.T) {
	lines := sepsisLines(t)
	head, rows := lines[0], lines[1:]
	if len(rows) != 15214 { // the README: 15,214 events
		t.Fatalf("%d rows", len(rows))
	}
	cols := strings.Split(head, ";")
	mapped := []int{slices.Index(cols, "Case ID"), slices.Index(cols, "Activity"), slices.Index(cols, "org:group"),
		slices.Index(cols, "lifecycle:transition"), slices.Index(cols, "Complete Timestamp")}
	key := func(row string) string {
		f := strings.Split(row, ";")
		var k []string
		for _, i := range mapped {
			k = append(k, f[i])
		}
		return strings.Join(k, "\x00")
	}
	part := rows[:len(rows)*6/10]
	inPart := map[string]bool{}
	for _, r := range part {
		inPart[key(r)] = true
	}
	distinct := map[string]bool{}
	for _, r := range rows {
		distinct[key(r)] = true
	}
	e, _ := sepsisDataset(t)
	body := func(rs []string) []byte { return []byte(head + "\n" + strings.Join(rs, "\n") + "\n") }
	first := e.ingest(t, "p", "sepsis", body(part), "part.csv").Upload.Events
	if first.Read != int64(len(part)) || first.New != int64(len(inPart)) || first.Copies != int64(len(part)-len(inPart)) {
		t.Errorf("first part: %+v; standard library: %d rows, %d distinct", first, len(part), len(inPart))
	}
	res := e.ingest(t, "p", "sepsis", body(rows), "whole.csv")
	ev := res.Upload.Events
	if ev.Read != int64(len(rows)) || ev.Held != int64(len(inPart)) || ev.New != int64(len(distinct)-len(inPart)) ||
		ev.Copies != int64(len(rows)-len(distinct)) || ev.Changed != 0 || res.Version.Manifest.Rows != int64(len(distinct)) {
		t.Errorf("the whole log: %+v, %d rows stored; standard library: %d rows, %d distinct, %d of them in the first part",
			ev, res.Version.Manifest.Rows, len(rows), len(distinct), len(inPart))
	}
}

// sepsisDataset is a catalog with the dataset p/sepsis of the sepsis log's
// profile (testdata/sepsis), historical; it returns the profile too.
func sepsisDataset(t *testing.T) (*env, []byte) {
	t.Helper()
	prof, err := os.ReadFile(filepath.Join("..", "testdata", "sepsis", "profile.yaml"))
	if err != nil {
		t.Fatal(err)
	}
	e := newEnv(t, nil)
	e.dataset(t, "p", "sepsis", func(s *DatasetSpec) { s.Profile = prof; s.Historical = true })
	return e, prof
}

// TestHeldResendWithBrokenRow: the sepsis log (testdata/sepsis) sent whole,
// then its first 500 rows again with the timestamp of one row broken. The
// re-send stores nothing (every valid event is held), and it still tells
// of the row it lost: its upload record and its sentence count one row
// rejected, named by line, column and rule, with the text read; no drift
// alert is raised from a report that holds rows only.
func TestHeldResendWithBrokenRow(t *testing.T) {
	lines := sepsisLines(t)
	head, rows := lines[0], lines[1:]
	e, prof := sepsisDataset(t)
	body := func(rs []string) []byte { return []byte(head + "\n" + strings.Join(rs, "\n") + "\n") }
	e.ingest(t, "p", "sepsis", body(rows), "whole.csv")

	again := slices.Clone(rows[:500])
	const broken = 200 // index in again; line 202 of the file (the header is line 1)
	ts := slices.Index(strings.Split(head, ";"), "Complete Timestamp")
	f := strings.Split(again[broken], ";")
	f[ts] = "2014/13/45 08:00:00.000"
	again[broken] = strings.Join(f, ";")
	res := e.ingest(t, "p", "sepsis", body(again), "again.csv")
	u := res.Upload
	if u.Status != UploadDuplicate || u.Events == nil || u.Events.Read != 499 || u.Events.New != 0 {
		t.Fatalf("re-send: %s, events %+v", u.Status, u.Events)
	}
	if u.Report == nil || u.Report.Rows.Rejected != 1 || len(u.Report.Rejections) != 1 {
		t.Fatalf("re-send's report %+v: want one row rejected", u.Report)
	}
	// The file's 500 rows: 499 held (read back by the standard library's
	// count above), 1 rejected, so 0.2% of the file, as the dataset's
	// threshold counts it.
	if r := u.Report.Rows; r.Held != 499 || r.Total+r.Held != 500 || u.Report.RejectedShare() != 1.0/500 {
		t.Errorf("re-send's rows %+v, rejected share %v: want 499 held of 500, 1/500 rejected", r, u.Report.RejectedShare())
	}
	var text strings.Builder
	if err := u.Report.Text(&text, false); err != nil || !strings.Contains(text.String(), "rows   500 in the file: 1 rejected (0.2%), 499 held already or copies") {
		t.Errorf("re-send's report text: %v\n%s", err, text.String())
	}
	rc := u.Report.Rejections[0]
	if rc.Reason != "bad_timestamp" || rc.Count != 1 || len(rc.Samples) != 1 {
		t.Fatalf("rejection %+v", rc)
	}
	if s := rc.Samples[0]; s.Line != broken+2 || s.Column != "Complete Timestamp" || s.Text != "2014/13/45 08:00:00.000" {
		t.Errorf("rejected row %+v: want line %d, column Complete Timestamp, the text read", s, broken+2)
	}
	if got := u.Sentence(); !strings.Contains(got, "499 already held, 0 changed; 1 row rejected; nothing stored") {
		t.Errorf("sentence %q", got)
	}
	if len(u.Alerts) != 0 {
		t.Errorf("alerts %+v", u.Alerts)
	}
	ups, err := e.s.Uploads(context.Background(), "p", "sepsis")
	if err != nil {
		t.Fatal(err)
	}
	if last := ups[len(ups)-1]; last.ID != u.ID || last.Report == nil || last.Report.Rows.Rejected != 1 {
		t.Errorf("stored upload %+v", last)
	}
	// The quality trend has the first upload's points and none of the
	// duplicate's (its report judged no event).
	points, _, err := e.s.Trend(context.Background(), "p", "sepsis", "")
	if err != nil {
		t.Fatal(err)
	}
	for _, p := range points {
		if p.Upload != ups[0].ID.String() {
			t.Errorf("trend point of upload %s (%s): %+v", p.Upload, p.Status, p)
		}
	}
	if len(points) == 0 {
		t.Error("no trend point for the first upload")
	}

	// The whole log in a fresh dataset, its first 500 rows first: the
	// second upload holds 500 rows already and adds the rest with one row
	// broken. Its own report counts the file's rows; the version's report
	// counts the version's (no held rows).
	e.dataset(t, "p", "second", func(s *DatasetSpec) { s.Profile = prof; s.Historical = true })
	e.ingest(t, "p", "second", body(rows[:500]), "first.csv")
	rest := slices.Clone(rows)
	f = strings.Split(rest[9000], ";")
	f[ts] = "2014/13/45 08:00:00.000"
	rest[9000] = strings.Join(f, ";")
	res = e.ingest(t, "p", "second", body(rest), "whole.csv")
	u = res.Upload
	if u.Status != UploadAccepted || u.Report == nil {
		t.Fatalf("whole log after its first part: %s", u.Status)
	}
	if r := u.Report.Rows; r.Held != u.Events.Held+u.Events.Copies || r.Total+r.Held != int64(len(rows)) || r.Rejected != 1 {
		t.Errorf("upload's rows %+v, events %+v: want %d rows in the file", r, u.Events, len(rows))
	}
	vrep, err := e.s.Report(context.Background(), res.Version)
	if err != nil {
		t.Fatal(err)
	}
	if r := vrep.Rows; r.Held != 0 || r.Accepted != res.Version.Manifest.Rows {
		t.Errorf("version's rows %+v, want %d accepted and none held", r, res.Version.Manifest.Rows)
	}
	// The stored report encodes again to its own bytes: Report's
	// MarshalJSON writes a full report member by member as declared.
	stored, err := e.s.QualityReport(context.Background(), res.Version)
	if err != nil {
		t.Fatal(err)
	}
	var decoded quality.Report
	if err := json.Unmarshal(stored, &decoded); err != nil || decoded.Version != quality.ReportVersion {
		t.Fatalf("stored report: %v, version %q", err, decoded.Version)
	}
	if again, err := json.Marshal(decoded); err != nil || !bytes.Equal(again, stored) {
		t.Errorf("the stored report does not encode again to its bytes (%v)", err)
	}
	if bytes.Contains(stored, []byte(`"rows_only"`)) || bytes.Contains(stored, []byte(`"held"`)) {
		t.Error("a version's report names rows_only or held rows: its bytes are not those of earlier releases' form")
	}
	// A duplicate's report is its rows and rejections, and nothing that
	// reads as a figure of events it never judged.
	b, err := json.Marshal(ups[len(ups)-1].Report)
	if err != nil {
		t.Fatal(err)
	}
	var members map[string]json.RawMessage
	if err := json.Unmarshal(b, &members); err != nil {
		t.Fatal(err)
	}
	if len(members) != 4 || members["rows_only"] == nil || members["rows"] == nil || members["rejections"] == nil || members["version"] == nil {
		t.Errorf("duplicate's report %s", b)
	}
}
