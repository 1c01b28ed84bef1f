package catalog

import (
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"os"
	"slices"
	"strconv"
	"strings"
	"testing"
	"time"

	"github.com/apache/arrow-go/v18/arrow"
	"github.com/apache/arrow-go/v18/arrow/array"
	"github.com/apache/arrow-go/v18/parquet/file"

	"github.com/flowcat-catalog/flowcat/catalog/arrowtest"
	"github.com/flowcat-catalog/flowcat/schema"
)

// An invented walk-in clinic: each event of a visit records the age the
// desk typed at that step, the postal code of the room's catchment, the
// day of the step, the bed number and the acuity code; sex is a case
// attribute. The profile lists them out of name order on purpose.
const eventAttrProfile = `fields:
  site: {value: harbour}
  case_id: visit
  subject_id: person
  event_type: step
  occurred_at: at
attributes:
  sex: {column: SEX, role: quasi, type: code}
  step_age: {column: AGE, role: sensitive, type: age, band: 10, level: event}
  catchment: {column: POSTAL, role: plain, type: code, keep: 3, level: event}
  seen_on: {column: SEEN, role: plain, type: date, period: week, level: event}
  bed: {column: BED, role: plain, type: integer, level: event}
  acuity: {column: ACUITY, role: sensitive, type: code, level: event}
drop: [REMARK]
`

// eventAttrRows are the raw rows: visit, person, step, minute, then AGE,
// POSTAL, SEEN, BED, ACUITY, SEX. Ages over 89 and full postal codes are
// planted: none may reach disk (45 CFR 164.514(b)(2)(i)(B) and (C)).
var eventAttrRows = [][]string{
	{"v1", "h1", "arrival", "0", "93.0625", "02139-4307", "2026-03-04", "12", "A2", "F"},
	{"v1", "h1", "departure", "50", "94", "02139-4307", "2026-03-08", "12", "A1", "F"},
	{"v2", "h2", "arrival", "7", "41", "10117", "2026-03-01", "", "B", "M"},
	{"v2", "h2", "start", "9", "", "", "", "3", "", "M"},
	{"v3", "h3", "arrival", "12", "101.5", "99501", "2026-03-09", "-4", "C", ""},
}

const eventAttrHeader = "visit,person,step,at,AGE,POSTAL,SEEN,BED,ACUITY,SEX,REMARK\n"

func eventAttrCSV(remark string) []byte {
	var b strings.Builder
	b.WriteString(eventAttrHeader)
	t0 := time.Date(2026, 3, 9, 8, 0, 0, 0, time.UTC)
	for _, r := range eventAttrRows {
		m, _ := strconv.Atoi(r[3])
		fmt.Fprintf(&b, "%s,%s,%s,%s,%s,%s,%s,%s,%s,%s,%q\n", r[0], r[1], r[2], t0.Add(time.Duration(m)*time.Minute).Format(time.RFC3339),
			r[4], r[5], r[6], r[7], r[8], r[9], remark)
	}
	return []byte(b.String())
}

// wantEventAttrs computes the stored values of one raw row with the
// standard library alone, from the rules as the README states them (not
// from schema's functions): ages in 10-year bands with every age of 90 or
// over as "90+" (45 CFR 164.514(b)(2)(i)(C)); the first 3 characters of a
// postal code; a date as the Monday of its ISO 8601 week (ISO 8601-1:2019,
// weeks start on Monday); integers in decimal. Keys are the column names.
func wantEventAttrs(r []string) map[string]string {
	out := map[string]string{"acuity": r[8], "bed": r[7], "catchment": "", "seen_on": "", "step_age": ""}
	if r[4] != "" {
		f, _ := strconv.ParseFloat(r[4], 64)
		a := int(f)
		if a >= 90 {
			out["step_age"] = "90+"
		} else {
			out["step_age"] = fmt.Sprintf("%02d-%02d", a/10*10, a/10*10+9)
		}
	}
	if r[5] != "" {
		out["catchment"] = r[5][:3]
	}
	if r[6] != "" {
		d, _ := time.Parse("2006-01-02", r[6])
		for d.Weekday() != time.Monday {
			d = d.AddDate(0, 0, -1)
		}
		out["seen_on"] = d.Format("2006-01-02")
	}
	return out
}

// The profile's event attributes are stored as typed columns after the
// schema's, generalized, named with their roles in the manifest, read back
// by arrow-go equal to a standard-library computation from the raw rows;
// the raw values appear nowhere on disk, in the logs or in the results.
func TestEventAttributes(t *testing.T) {
	e := newEnv(t, func(o *Options) { o.RunEvents = 2 }) // spill the sorts
	e.dataset(t, "p", "d", func(s *DatasetSpec) { s.Profile = []byte(eventAttrProfile) })
	ctx := context.Background()
	const remark = "PLANTED remark: the visitor spoke about her neighbour"
	res := e.ingest(t, "p", "d", eventAttrCSV(remark), "desk.csv")
	m := res.Version.Manifest
	if len(m.Files) != 1 || m.Files[0].Attributes == nil {
		t.Fatalf("files %+v", m.Files)
	}
	var cols []string
	for _, c := range m.Files[0].Attributes.Columns() {
		cols = append(cols, c.Name+":"+string(c.Type)+":"+string(c.Role))
	}
	// Profile order, which is by name (the profile's normal form).
	if got := strings.Join(cols, ","); got != "acuity:code:sensitive,bed:integer:plain,catchment:code:plain,seen_on:date:plain,step_age:age:sensitive" {
		t.Errorf("manifest columns %s", got)
	}
	if ca := m.CaseAttributes; ca == nil || len(ca.Columns) != 1 || ca.Columns[0].Name != "sex" {
		t.Errorf("case attributes %+v", ca)
	}

	// arrow-go reads the file: the schema's columns first, unchanged, then
	// the attributes with their types.
	b := e.blobBytes(t, m.Files[0].SHA256)
	pf, err := file.NewParquetReader(bytes.NewReader(b))
	if err != nil {
		t.Fatal(err)
	}
	tbl := arrowtest.Table(t, pf)
	defer tbl.Release()
	var names []string
	for _, f := range tbl.Schema().Fields() {
		names = append(names, f.Name)
	}
	var want []string
	for _, f := range schema.Fields {
		want = append(want, string(f))
	}
	want = append(want, "acuity", "bed", "catchment", "seen_on", "step_age")
	if strings.Join(names, ",") != strings.Join(want, ",") {
		t.Fatalf("columns %v, want %v", names, want)
	}
	types := map[string]arrow.Type{"acuity": arrow.STRING, "bed": arrow.INT64, "catchment": arrow.STRING, "seen_on": arrow.DATE32, "step_age": arrow.STRING}
	col := func(name string) arrow.Array {
		c := tbl.Column(tbl.Schema().FieldIndices(name)[0]).Data()
		if len(c.Chunks()) != 1 {
			t.Fatalf("%s: %d chunks", name, len(c.Chunks()))
		}
		return c.Chunk(0)
	}
	text := func(name string, i int) string {
		a := col(name)
		if a.IsNull(i) {
			return ""
		}
		switch a := a.(type) {
		case *array.String:
			return a.Value(i)
		case *array.Int64:
			return strconv.FormatInt(a.Value(i), 10)
		case *array.Date32:
			return a.Value(i).ToTime().Format("2006-01-02")
		}
		t.Fatalf("%s: %T", name, a)
		return ""
	}
	for name, tp := range types {
		if got := col(name).DataType().ID(); got != tp {
			t.Errorf("%s is %v, want %v", name, got, tp)
		}
	}
	if tbl.NumRows() != int64(len(eventAttrRows)) {
		t.Fatalf("%d rows", tbl.NumRows())
	}
	// Rows are in time order.
	ordered := slices.Clone(eventAttrRows)
	slices.SortStableFunc(ordered, func(a, b []string) int {
		x, _ := strconv.Atoi(a[3])
		y, _ := strconv.Atoi(b[3])
		return x - y
	})
	for i, r := range ordered {
		if got := text("case_id", i); got != e.pseudo(t, r[0]) {
			t.Fatalf("row %d is case %s, want %s's", i, got, r[0])
		}
		for name, w := range wantEventAttrs(r) {
			if got := text(name, i); got != w {
				t.Errorf("row %d %s = %q, want %q", i, name, got, w)
			}
		}
	}

	// The catalog's own reader gives the same values back.
	var got []string
	err = ReadSnapshot(bytes.NewReader(b), int64(len(b)), func(ev *schema.Event) error {
		got = append(got, strings.ReplaceAll(ev.Attrs, "\x00", "|"))
		return nil
	})
	if err != nil {
		t.Fatal(err)
	}
	for i, r := range ordered {
		w := wantEventAttrs(r)
		if s := strings.Join([]string{w["acuity"], w["bed"], w["catchment"], w["seen_on"], w["step_age"]}, "|"); got[i] != s {
			t.Errorf("ReadSnapshot row %d: %q, want %q", i, got[i], s)
		}
	}

	// The leak scan.
	needles := []string{"93.0625", "101.5", "02139-4307", "02139", "10117", "99501", "PLANTED"}
	for _, h := range grepDir(t, e.dir, needles) {
		t.Error(h)
	}
	vj, _ := json.Marshal(res)
	ups, _ := e.s.Uploads(ctx, "p", "d")
	uj, _ := json.Marshal(ups)
	for what, s := range map[string]string{"logs": e.logs.String(), "result": string(vj), "uploads": string(uj)} {
		mustContainNone(t, what, s, needles)
	}

	// A bad value rejects its row naming the column and the attribute,
	// never the value; free text in a code attribute is refused.
	bad := eventAttrHeader +
		"v9,h9,arrival,2026-03-10T08:00:00Z,PLANTED-AGE,02139-4307,2026-03-10,1,A,F,\n" +
		"v9,h9,start,2026-03-10T08:05:00Z,40,02139-4307,2026-03-10,1,PLANTED acuity the visitor said much,F,\n" +
		"v9,h9,departure,2026-03-10T08:09:00Z,40,02139-4307,2026-03-10,1,A,F,\n"
	r2, err := e.s.Ingest(ctx, "p", "d", strings.NewReader(bad), IngestOptions{Filename: "bad.csv", By: "site", Mode: ModeAppend})
	if err != nil && !errors.Is(err, ErrRejected) {
		t.Fatal(err)
	}
	rj, _ := json.Marshal(r2)
	mustContainNone(t, "rejections", string(rj)+e.logs.String(), []string{"PLANTED", "02139-4307"})
	var rules []string
	for _, rc := range r2.Upload.Report.Rejections {
		for _, s := range rc.Samples {
			rules = append(rules, fmt.Sprintf("%d:%s:%s", s.Line, s.Column, rc.Reason))
		}
	}
	if strings.Join(rules, ",") != "2:AGE:bad_value,3:ACUITY:bad_value" {
		t.Errorf("rejections %v", rules)
	}
	for _, h := range grepDir(t, e.dir, needles) {
		t.Error(h)
	}
}

// A quasi-identifier at event level is refused by name, with its line.
func TestEventAttributeDeclarations(t *testing.T) {
	base := "fields:\n  site: {value: harbour}\n  case_id: visit\n  event_type: step\n  occurred_at: at\nattributes:\n"
	for _, c := range []struct{ decl, want string }{
		{"  zip: {column: Z, role: quasi, type: code, keep: 3, level: event}\n", "profile: line 7: attributes.zip.role: event_quasi: a quasi-identifier is a property of the person"},
		{"  zip: {column: Z, role: plain, type: code, level: visit}\n", "profile: line 7: attributes.zip.level: unknown level \"visit\" (want case or event)"},
		{"  note: {column: N, role: plain, type: text, level: event}\n", "profile: line 7: attributes.note.type: free text cannot be kept as an attribute: list the column under drop"},
		{"  day: {column: D, role: sensitive, type: date, period: fortnight, level: event}\n", "profile: line 7: attributes.day.period: unknown period \"fortnight\""},
	} {
		_, err := schema.ParseProfile([]byte(base + c.decl))
		if err == nil || !strings.HasPrefix(err.Error(), c.want) {
			t.Errorf("%s: %v, want %s", strings.TrimSpace(c.decl), err, c.want)
		}
	}
	var pe *schema.ProfileError
	_, err := schema.ParseProfile([]byte(base + "  zip: {column: Z, role: quasi, type: code, keep: 3, level: event}\n"))
	if !errors.As(err, &pe) || pe.Rule != schema.RuleEventQuasi || pe.Line != 7 {
		t.Errorf("%#v", err)
	}
	// level: case is the default, stored as absent: the profile's hash is
	// the one it had before levels existed.
	p1, err := schema.ParseProfile([]byte(base + "  zip: {column: Z, role: plain, type: code, level: case}\n"))
	if err != nil {
		t.Fatal(err)
	}
	p2, err := schema.ParseProfile([]byte(base + "  zip: {column: Z, role: plain, type: code}\n"))
	if err != nil {
		t.Fatal(err)
	}
	if p1.Hash() != p2.Hash() {
		t.Error("level: case changes the profile's hash")
	}
}

func goldenSnapshotEvents() []schema.Event {
	t0 := time.Date(2026, 3, 2, 8, 0, 0, 0, time.UTC)
	return []schema.Event{
		{Site: "north", CaseID: "c-aa", SubjectID: "s-1", Type: schema.Arrival, OccurredAt: t0, Channel: "walk-in"},
		{Site: "north", CaseID: "c-aa", Type: schema.Enqueue, Queue: "triage", OccurredAt: t0.Add(time.Minute)},
		{Site: "north", CaseID: "c-bb", ResourceID: "r-9", Type: schema.Start, Activity: "assess", OccurredAt: t0.Add(2 * time.Minute), Priority: "2", InstanceID: "i-1"},
		{Site: "north", CaseID: "c-bb", ResourceID: "r-9", Type: schema.Complete, Activity: "assess", OccurredAt: t0.Add(9 * time.Minute), InstanceID: "i-1", EventID: "e-77"},
		{Site: "south", CaseID: "c-cc", Type: schema.Abandon, Queue: "triage", OccurredAt: t0.Add(11 * time.Minute), Outcome: "left"},
	}
}

// A snapshot without event attributes is byte for byte the file the
// writer of main wrote before they existed (testdata/eventattrs/README.md).
func TestSnapshotWithoutAttributesUnchanged(t *testing.T) {
	want, err := os.ReadFile("testdata/eventattrs/main-snapshot.parquet")
	if err != nil {
		t.Fatal(err)
	}
	for _, mk := range []func() (*snapshotWriter, error){
		func() (*snapshotWriter, error) { return newSnapshotWriter(t.TempDir(), 3, "k-fixed") },
		func() (*snapshotWriter, error) { return newAttrSnapshotWriter(t.TempDir(), 3, "k-fixed", nil) },
	} {
		sw, err := mk()
		if err != nil {
			t.Fatal(err)
		}
		for _, ev := range goldenSnapshotEvents() {
			if err := sw.Write(&ev); err != nil {
				t.Fatal(err)
			}
		}
		if _, _, err := sw.Finish(); err != nil {
			t.Fatal(err)
		}
		got, err := os.ReadFile(sw.f.Name())
		sw.Remove()
		if err != nil {
			t.Fatal(err)
		}
		if !bytes.Equal(got, want) {
			t.Errorf("the snapshot differs from main's: %d bytes, want %d", len(got), len(want))
		}
	}
	// main's file reads back, without attributes.
	n := 0
	err = ReadSnapshot(bytes.NewReader(want), int64(len(want)), func(ev *schema.Event) error {
		if w := goldenSnapshotEvents()[n]; *ev != w {
			t.Errorf("event %d: %+v, want %+v", n, *ev, w)
		}
		n++
		return nil
	})
	if err != nil || n != 5 {
		t.Fatalf("%d events: %v", n, err)
	}
}

// Event attributes are not part of an event's identity: a re-sent file
// whose events differ only in an attribute holds nothing new. A
// replace-window upload rewrites the files it cuts with their attributes.
func TestEventAttributesIdentityAndRewrite(t *testing.T) {
	e := newEnv(t, nil)
	e.dataset(t, "p", "d", func(s *DatasetSpec) { s.Profile = []byte(eventAttrProfile) })
	ctx := context.Background()
	first := e.ingest(t, "p", "d", eventAttrCSV(""), "desk.csv")
	// The same events, every bed number changed: already held.
	again := strings.ReplaceAll(string(eventAttrCSV("")), ",12,A", ",13,A")
	res, err := e.s.Ingest(ctx, "p", "d", strings.NewReader(again), IngestOptions{Filename: "again.csv", By: "site"})
	if err != nil {
		t.Fatal(err)
	}
	if ev := res.Upload.Events; res.Upload.Status != UploadDuplicate || ev == nil || ev.Held != 5 || ev.New != 0 {
		t.Fatalf("re-sent with other attributes: %s %+v", res.Upload.Status, res.Upload.Events)
	}

	// Replace v1's departure (minute 50); the file is rewritten without
	// it, keeping every other row's attributes.
	t0 := time.Date(2026, 3, 9, 8, 0, 0, 0, time.UTC)
	repl := eventAttrHeader + "v1,h1,departure," + t0.Add(55*time.Minute).Format(time.RFC3339) + ",70,55116,2026-03-10,8,A9,F,\n"
	res, err = e.s.Ingest(ctx, "p", "d", strings.NewReader(repl), IngestOptions{Filename: "fix.csv", By: "site",
		Mode: ModeReplaceWindow, From: t0.Add(40 * time.Minute), To: t0.Add(60 * time.Minute), Sites: []string{"harbour"}})
	if err != nil {
		t.Fatal(err)
	}
	m := res.Version.Manifest
	if len(m.Files) != 2 || m.Lineage.RowsRemoved != 1 {
		t.Fatalf("files %d, removed %d", len(m.Files), m.Lineage.RowsRemoved)
	}
	got := map[string]string{}
	for _, f := range m.Files {
		if f.Attributes == nil || len(f.Attributes.Columns()) != 5 {
			t.Errorf("file %s lost its attribute columns: %+v", f.SHA256, f.Attributes)
		}
		if f.SHA256 == first.Version.Manifest.Files[0].SHA256 {
			t.Error("the cut file was not rewritten")
		}
		b := e.blobBytes(t, f.SHA256)
		err := ReadSnapshot(bytes.NewReader(b), int64(len(b)), func(ev *schema.Event) error {
			got[ev.OccurredAt.Format("15:04")] = strings.ReplaceAll(ev.Attrs, "\x00", "|")
			return nil
		})
		if err != nil {
			t.Fatal(err)
		}
	}
	w := map[string]string{"08:00": "A2|12|021|2026-03-02|90+", "08:07": "B||101|2026-02-23|40-49", "08:09": "|3|||",
		"08:12": "C|-4|995|2026-03-09|90+", "08:55": "A9|8|551|2026-03-09|70-79"}
	if fmt.Sprint(got) != fmt.Sprint(w) {
		t.Errorf("after the replacement: %v\nwant %v", got, w)
	}
}

// With a time shift, an event attribute's date moves by its subject's
// offset, as the event's time does, so intervals within a subject hold.
func TestEventAttributeTimeShift(t *testing.T) {
	e := newEnv(t, nil)
	e.dataset(t, "p", "d", func(s *DatasetSpec) {
		s.Profile = []byte("fields:\n  site: {value: harbour}\n  case_id: visit\n  subject_id: person\n  event_type: step\n  occurred_at: at\n" +
			"attributes:\n  booked: {column: BOOKED, role: plain, type: date, level: event}\ntime_shift_days: 90\n")
	})
	raw := "visit,person,step,at,BOOKED\n" +
		"v1,h1,arrival,2026-03-09T08:00:00Z,2026-03-01\n" +
		"v2,h2,arrival,2026-03-09T09:00:00Z,2026-02-11\n" +
		"v3,h3,arrival,2026-03-09T10:00:00Z,\n"
	res := e.ingest(t, "p", "d", []byte(raw), "shift.csv")
	b := e.blobBytes(t, res.Version.Manifest.Files[0].SHA256)
	rawAt := map[string]time.Time{}
	rawDate := map[string]string{}
	for _, line := range strings.Split(strings.TrimSpace(raw), "\n")[1:] {
		f := strings.Split(line, ",")
		rawAt[e.pseudo(t, f[0])], _ = time.Parse(time.RFC3339, f[3])
		rawDate[e.pseudo(t, f[0])] = f[4]
	}
	n := 0
	err := ReadSnapshot(bytes.NewReader(b), int64(len(b)), func(ev *schema.Event) error {
		n++
		shift := rawAt[ev.CaseID].Sub(ev.OccurredAt)
		if shift < 0 || shift > 90*24*time.Hour || shift%(24*time.Hour) != 0 {
			t.Errorf("case %s shifted by %v", ev.CaseID, shift)
		}
		want := ""
		if d := rawDate[ev.CaseID]; d != "" {
			rd, _ := time.Parse(time.DateOnly, d)
			want = rd.Add(-shift).Format(time.DateOnly)
		}
		if ev.Attrs != want {
			t.Errorf("case %s: booked %q, want %q (shift %v)", ev.CaseID, ev.Attrs, want, shift)
		}
		return nil
	})
	if err != nil || n != 3 {
		t.Fatalf("%d events: %v", n, err)
	}
}

// BenchmarkSnapshotWriterAttrs writes 100,000 events to a snapshot file,
// without event attributes and with five (two codes, an age band, an
// integer and a date), to show what the row path costs.
func BenchmarkSnapshotWriterAttrs(b *testing.B) {
	cols := AttributeColumns{
		{Name: "acuity", Type: schema.TypeCode}, {Name: "bed", Type: schema.TypeInteger},
		{Name: "catchment", Type: schema.TypeCode}, {Name: "seen_on", Type: schema.TypeDate}, {Name: "step_age", Type: schema.TypeAge},
	}
	t0 := time.Date(2026, 3, 2, 0, 0, 0, 0, time.UTC)
	evs := make([]schema.Event, 100000)
	for i := range evs {
		evs[i] = schema.Event{Site: "north", CaseID: fmt.Sprintf("case-%06d", i/5), Type: schema.EventTypes[i%5], Queue: "triage",
			OccurredAt: t0.Add(time.Duration(i) * time.Second), Activity: "assess"}
	}
	for _, with := range []bool{false, true} {
		b.Run(fmt.Sprintf("attributes=%t", with), func(b *testing.B) {
			var ac *AttributeColumns
			batch := slices.Clone(evs)
			if with {
				ac = &cols
				for i := range batch {
					batch[i].Attrs = schema.JoinAttrs([]string{"A" + strconv.Itoa(i%4), strconv.Itoa(i % 30), "021", "2026-03-02", "40-49"})
				}
			}
			for b.Loop() {
				sw, err := newAttrSnapshotWriter(b.TempDir(), 128<<10, "k", ac)
				if err != nil {
					b.Fatal(err)
				}
				for i := range batch {
					if err := sw.Write(&batch[i]); err != nil {
						b.Fatal(err)
					}
				}
				if _, _, err := sw.Finish(); err != nil {
					b.Fatal(err)
				}
				sw.Remove()
			}
			b.ReportMetric(float64(b.Elapsed().Nanoseconds())/float64(b.N*len(batch)), "ns/event")
		})
	}
}
