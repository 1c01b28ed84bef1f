package catalog

import (
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"math"
	"slices"
	"strings"
	"testing"
	"time"

	"github.com/apache/arrow-go/v18/arrow"
	"github.com/apache/arrow-go/v18/arrow/array"
	"github.com/apache/arrow-go/v18/arrow/memory"
	"github.com/apache/arrow-go/v18/parquet/file"
	"github.com/apache/arrow-go/v18/parquet/pqarrow"

	"github.com/flowcat-catalog/flowcat/anonymize"
	"github.com/flowcat-catalog/flowcat/catalog/disclosure"
)

const attrProfile = `fields:
  site: {value: north}
  case_id: case
  subject_id: person
  event_type: type
  occurred_at: at
attributes:
  age: {column: AGE, role: quasi, type: age, band: 10}
  sex: {column: SEX, role: quasi, type: code}
  zip: {column: ZIP, role: quasi, type: code, keep: 3}
  admitted: {column: ADMITTED, role: plain, type: date, period: month}
  diagnosis: {column: DX, role: sensitive, type: code}
  stay: {column: STAY, role: plain, type: integer}
drop: [NOTES]
`

const attrHeader = "case,person,type,at,AGE,SEX,ZIP,ADMITTED,DX,STAY,NOTES\n"

// attrCases are the worked example of the catalog tests: eight cases,
// each with an arrival and a departure row carrying its attributes.
// Classes over (age band, sex, zip prefix):
//
//	40-49 F 021   c1 c2 c3   diagnosis A B A
//	30-39 M 101   c4 c5      C C
//	90+   F 021   c6 c7      A B
//	(none)        c8         (none)
//
// c2's departure row gives diagnosis Z: a conflict; B, first in order, is kept.
var attrCases = [][]string{
	{"c1", "p1", "42", "F", "02139-4307", "2026-03-17", "A", "3"},
	{"c2", "p2", "47", "F", "02141", "2026-03-02", "B", "1"},
	{"c3", "p3", "44", "F", "02138", "2026-03-30", "A", ""},
	{"c4", "p4", "33", "M", "10115", "2026-02-27", "C", "5"},
	{"c5", "p5", "38", "M", "10117", "2026-03-03", "C", "2"},
	{"c6", "p6", "93.0625", "F", "02139", "2026-03-04", "A", "9"},
	{"c7", "p7", "101.5", "F", "02139", "2026-03-05", "B", "4"},
	{"c8", "p8", "", "", "", "", "", ""},
}

func attrCSV(rows [][]string, day int, notes string) []byte {
	var b strings.Builder
	b.WriteString(attrHeader)
	for i, r := range rows {
		at := time.Date(2026, 3, day, 8+i, 0, 0, 0, time.UTC)
		dx := r[6]
		for j, typ := range []string{"arrival", "departure"} {
			if j == 1 && r[0] == "c2" {
				dx = "Z"
			}
			fmt.Fprintf(&b, "%s,%s,%s,%s,%s,%s,%s,%s,%s,%s,%q\n", r[0], r[1], typ, at.Add(time.Duration(j)*time.Hour).Format(time.RFC3339),
				r[2], r[3], r[4], r[5], dx, r[7], notes)
		}
	}
	return []byte(b.String())
}

func (e *env) disclosure(t *testing.T, n int) *disclosure.Report {
	t.Helper()
	b, _, err := e.s.DisclosureReport(context.Background(), "p", "d", n)
	if err != nil {
		t.Fatal(err)
	}
	var r disclosure.Report
	if err := json.Unmarshal(b, &r); err != nil {
		t.Fatal(err)
	}
	return &r
}

func (e *env) attributeRows(t *testing.T, v *Version) map[string]map[string]string {
	t.Helper()
	at := v.Manifest.CaseAttributes
	b := e.blobBytes(t, at.SHA256)
	out := map[string]map[string]string{}
	err := ReadAttributeTable(bytes.NewReader(b), int64(len(b)), at.Columns, func(id string, vals []string) error {
		m := map[string]string{}
		for i, c := range at.Columns {
			m[c.Name] = vals[i]
		}
		out[id] = m
		return nil
	})
	if err != nil {
		t.Fatal(err)
	}
	return out
}

func TestCaseAttributes(t *testing.T) {
	e := newEnv(t, nil)
	e.dataset(t, "p", "d", func(s *DatasetSpec) { s.Profile = []byte(attrProfile) })
	ctx := context.Background()
	if _, err := e.s.SetDisclosurePolicy(ctx, "p", DisclosurePolicy{K: 2, MaxRisk: 0.5}, "curator"); err != nil {
		t.Fatal(err)
	}
	res := e.ingest(t, "p", "d", attrCSV(attrCases, 2, "free words"), "a.csv")
	v := res.Version
	m := v.Manifest
	if m.CaseAttributes == nil || m.CaseAttributes.Rows != m.CaseTable.Rows || m.CaseTable.Rows != 8 {
		t.Fatalf("attribute table %+v beside case table %+v", m.CaseAttributes, m.CaseTable)
	}
	var roles []string
	for _, c := range m.CaseAttributes.Columns {
		roles = append(roles, c.Name+":"+string(c.Role))
	}
	if got := strings.Join(roles, ","); got != "admitted:plain,age:quasi,diagnosis:sensitive,sex:quasi,stay:plain,zip:quasi" {
		t.Errorf("columns %s", got)
	}

	// Read back by an independent reader: types and NULLs.
	b := e.blobBytes(t, m.CaseAttributes.SHA256)
	pf, err := file.NewParquetReader(bytes.NewReader(b))
	if err != nil {
		t.Fatal(err)
	}
	fr, _ := pqarrow.NewFileReader(pf, pqarrow.ArrowReadProperties{BatchSize: 3}, memory.DefaultAllocator)
	tbl, err := fr.ReadTable(ctx)
	if err != nil {
		t.Fatal(err)
	}
	defer tbl.Release()
	col := func(name string) arrow.Array {
		c := tbl.Column(tbl.Schema().FieldIndices(name)[0]).Data()
		if len(c.Chunks()) != 1 {
			t.Fatalf("%s: %d chunks", name, len(c.Chunks()))
		}
		return c.Chunk(0)
	}
	if tp := col("admitted").DataType().ID(); tp != arrow.DATE32 {
		t.Errorf("admitted is %v, want DATE32", tp)
	}
	if tp := col("stay").DataType().ID(); tp != arrow.INT64 {
		t.Errorf("stay is %v, want INT64", tp)
	}
	ids := col("case_id").(*array.String)
	ages := col("age").(*array.String)
	zips := col("zip").(*array.String)
	stay := col("stay").(*array.Int64)
	var gotAges []string
	nulls := 0
	for i := range ids.Len() {
		if ages.IsNull(i) {
			nulls++
			continue
		}
		gotAges = append(gotAges, ages.Value(i))
		if !zips.IsNull(i) && len(zips.Value(i)) != 3 {
			t.Errorf("zip %q not truncated", zips.Value(i))
		}
		if i > 0 && ids.Value(i-1) >= ids.Value(i) {
			t.Error("rows are not in case_id order")
		}
	}
	slices.Sort(gotAges)
	if nulls != 1 || strings.Join(gotAges, ",") != "30-39,30-39,40-49,40-49,40-49,90+,90+" {
		t.Errorf("ages %v (%d null)", gotAges, nulls)
	}
	if stay.NullN() != 2 { // c3 gave none, c8 none at all
		t.Errorf("stay: %d nulls, want 2", stay.NullN())
	}

	// The worked example's figures (see attrCases).
	r := e.disclosure(t, v.Number)
	if r.Cases != 8 || r.Classes != 4 || r.Anonymity != 1 || r.Conflicts != 1 {
		t.Errorf("cases %d classes %d k %d conflicts %d; want 8, 4, 1, 1", r.Cases, r.Classes, r.Anonymity, r.Conflicts)
	}
	if r.BelowK.Cases != 1 || r.Risk.Max != 1 || math.Abs(r.Risk.Mean-0.5) > 1e-12 {
		t.Errorf("below k %+v, risk %+v; want 1 case, max 1, mean 4/8", r.BelowK, r.Risk)
	}
	if d := r.Diversity[0]; d.L != 0 || d.Homogeneous != 1 || d.CasesInThem != 2 {
		t.Errorf("diversity %+v; want l 0 (c8 has none), one homogeneous class of 2", d)
	}
	rows := e.attributeRows(t, v)
	if len(rows) != 8 {
		t.Fatalf("%d rows", len(rows))
	}
	var dx []string
	for _, r := range rows {
		dx = append(dx, r["diagnosis"])
	}
	slices.Sort(dx)
	if strings.Join(dx, "") != "AAABBCC" {
		t.Errorf("diagnoses %v; want c2's conflict resolved to B", dx)
	}

	// Above the threshold: a draft, publishable only with an override.
	if v.State != StateDraft || !m.Disclosure.AboveThreshold {
		t.Fatalf("state %s, disclosure %+v", v.State, m.Disclosure)
	}
	if _, err := e.s.Publish(ctx, "p", "d", v.Number, "curator"); !errors.Is(err, ErrRiskAboveThreshold) {
		t.Fatalf("publish above the threshold: %v", err)
	}
	if _, err := e.s.PublishOverride(ctx, "p", "d", v.Number, "curator", " "); !errors.Is(err, ErrInvalid) {
		t.Errorf("override without a reason: %v", err)
	}
	pv, err := e.s.PublishOverride(ctx, "p", "d", v.Number, "curator", "ethics board approval 2026-114")
	if err != nil {
		t.Fatal(err)
	}
	if pv.State != StatePublished || pv.RiskOverride == nil || pv.RiskOverride.Reason != "ethics board approval 2026-114" || pv.RiskOverride.MaxRisk != 1 || pv.RiskOverride.Threshold != 0.5 {
		t.Errorf("published %s with override %+v", pv.State, pv.RiskOverride)
	}
	audit, _ := e.s.Audit(ctx)
	if !slices.ContainsFunc(audit, func(a AuditEntry) bool { return a.Action == "version.publish.override" }) {
		t.Error("the override is not in the audit trail")
	}

	// An append: the parent's values stay for the cases it does not name.
	res = e.ingest(t, "p", "d", attrCSV([][]string{{"c9", "p9", "55", "M", "99501", "2026-03-09", "D", "7"}}, 9, ""), "b.csv")
	rows2 := e.attributeRows(t, res.Version)
	if len(rows2) != 9 {
		t.Fatalf("%d rows after the append, want 9", len(rows2))
	}
	for id, r := range rows {
		if fmt.Sprint(rows2[id]) != fmt.Sprint(r) {
			t.Errorf("case %s: %v, was %v", id, rows2[id], r)
		}
	}

	// Suppression below k = 3: c4 c5, c6 c7, c8 and c9 lose their
	// quasi-identifiers and make one class of 6; c1-c3 stay a class of 3.
	if _, err := e.s.SetDisclosurePolicy(ctx, "p", DisclosurePolicy{K: 3, MaxRisk: 0.5, Suppress: true}, "curator"); err != nil {
		t.Fatal(err)
	}
	res = e.ingest(t, "p", "d", attrCSV([][]string{{"c9", "p9", "55", "M", "99501", "2026-03-09", "D", "8"}}, 10, ""), "c.csv")
	v3 := res.Version
	r3 := e.disclosure(t, v3.Number)
	if v3.Manifest.Lineage.Suppressed != 6 || r3.Suppressed != 6 || r3.Anonymity != 3 || r3.Classes != 2 || r3.Risk.Max != 1.0/3 {
		t.Errorf("suppressed %d/%d, k %d, classes %d, max risk %v; want 6, 3, 2, 1/3", v3.Manifest.Lineage.Suppressed, r3.Suppressed, r3.Anonymity, r3.Classes, r3.Risk.Max)
	}
	if v3.State != StatePublished {
		t.Errorf("a version below the threshold is %s", v3.State)
	}
	for id, r := range e.attributeRows(t, v3) {
		kept := r["age"] != "" || r["sex"] != "" || r["zip"] != ""
		if kept != (id == e.pseudo(t, "c1") || id == e.pseudo(t, "c2") || id == e.pseudo(t, "c3")) {
			t.Errorf("case %s: quasi-identifiers %v", id, r)
		}
		if r["diagnosis"] == "" && id != e.pseudo(t, "c8") {
			t.Errorf("case %s lost its sensitive value", id)
		}
	}
}

// pseudo returns the case pseudonym of raw in project p.
func (e *env) pseudo(t *testing.T, raw string) string {
	t.Helper()
	proj, err := e.s.Project(context.Background(), "p")
	if err != nil {
		t.Fatal(err)
	}
	pz, err := anonymize.OpenProjectKey(e.master, "p", proj.Key)
	if err != nil {
		t.Fatal(err)
	}
	return pz.Pseudonym("case_id", raw)
}

// Planted raw attribute values (exact ages over 89, a full postal code,
// free text in a dropped column and in a code attribute, a malformed age)
// appear nowhere on disk, in the logs or in what the catalog returns.
func TestAttributeLeakScan(t *testing.T) {
	e := newEnv(t, func(o *Options) { o.RunEvents = 4 }) // spill the sorts too
	e.dataset(t, "p", "d", func(s *DatasetSpec) {
		s.Profile = []byte(attrProfile)
		r := 0.5
		s.RejectAbove = &r
	})
	ctx := context.Background()
	const freeText = "PLANTED free text: the patient mentioned her neighbour"
	const freeDX = "PLANTED-DX patient said it hurt a lot"
	const badAge = "PLANTED-AGE-X"
	data := attrCSV(attrCases, 2, freeText)
	data = append(data, fmt.Sprintf("c1,p1,start,2026-03-02T08:30:00Z,42,F,02139,2026-03-17,%s,3,\n", freeDX)...)
	data = append(data, fmt.Sprintf("c2,p2,start,2026-03-02T09:30:00Z,%s,F,02141,2026-03-02,B,1,\n", badAge)...)
	res, err := e.s.Ingest(ctx, "p", "d", bytes.NewReader(data), IngestOptions{Filename: "night.csv", By: "site"})
	if err != nil {
		t.Fatal(err)
	}
	if res.Upload.Report.Rows.Rejected != 2 {
		t.Fatalf("%d rows rejected, want the free-text diagnosis and the bad age", res.Upload.Report.Rows.Rejected)
	}
	// An undeclared column holding free text refuses its file.
	memo := strings.Replace(string(attrCSV(attrCases[:2], 3, "")), "NOTES\n", "MEMO\n", 1)
	memo = strings.Replace(memo, `""`+"\n", `"PLANTED memo about the neighbour's visit"`+"\n", 1)
	refused, err := e.s.Ingest(ctx, "p", "d", strings.NewReader(memo), IngestOptions{Filename: "memo.csv", By: "site"})
	if !errors.Is(err, ErrFileInvalid) || refused == nil || refused.Upload.Error == nil || refused.Upload.Error.Rule != "free_text" || refused.Upload.Error.Column != "MEMO" {
		t.Fatalf("undeclared free text: %v %+v", err, refused)
	}
	needles := []string{"93.0625", "101.5", "02139-4307", "02141", "02139", "PLANTED"}
	for _, h := range grepDir(t, e.dir, needles) {
		t.Error(h)
	}
	out, _ := json.Marshal([]any{res, refused, err.Error()})
	rep, v, err := e.s.DisclosureReport(ctx, "p", "d", 1)
	if err != nil {
		t.Fatal(err)
	}
	vj, _ := json.Marshal(v)
	ups, _ := e.s.Uploads(ctx, "p", "d")
	uj, _ := json.Marshal(ups)
	for what, s := range map[string]string{"logs": e.logs.String(), "result": string(out), "report": string(rep), "version": string(vj), "uploads": string(uj)} {
		mustContainNone(t, what, s, needles)
	}
	if !strings.Contains(string(vj), `"rule":"first 3 characters kept"`) {
		t.Errorf("the manifest does not describe the zip rule: %s", vj)
	}
}

// A keyed time shift moves every event of a subject by one whole number
// of days and keeps every interval within the subject.
func TestTimeShift(t *testing.T) {
	e := newEnv(t, nil)
	e.dataset(t, "p", "d", func(s *DatasetSpec) {
		s.Profile = []byte("fields:\n  site: {value: north}\n  case_id: case\n  subject_id: person\n  event_type: type\n  occurred_at: at\ntime_shift_days: 60\n")
	})
	var b strings.Builder
	b.WriteString("case,person,type,at\n")
	raw := map[string][]time.Time{}
	for i := range 40 {
		subj := fmt.Sprint("s", i%10)
		at := time.Date(2026, 3, 1+i%20, 7+i%5, 13, 0, 0, time.UTC)
		for j, typ := range []string{"arrival", "start", "departure"} {
			ts := at.Add(time.Duration(j*17) * time.Minute)
			fmt.Fprintf(&b, "k%d,%s,%s,%s\n", i, subj, typ, ts.Format(time.RFC3339))
			raw[subj] = append(raw[subj], ts)
		}
	}
	res := e.ingest(t, "p", "d", []byte(b.String()), "s.csv")
	evs := readEvents(t, e.blobBytes(t, res.Version.Manifest.Files[0].SHA256))
	got := map[string][]time.Time{}
	for _, ev := range evs {
		got[ev.SubjectID] = append(got[ev.SubjectID], ev.OccurredAt)
	}
	proj, _ := e.s.Project(context.Background(), "p")
	pz, err := anonymize.OpenProjectKey(e.master, "p", proj.Key)
	if err != nil {
		t.Fatal(err)
	}
	offsets := map[time.Duration]bool{}
	for subj, ts := range raw {
		g := got[pz.Pseudonym("subject_id", subj)]
		slices.SortFunc(ts, time.Time.Compare)
		slices.SortFunc(g, time.Time.Compare)
		if len(g) != len(ts) {
			t.Fatalf("subject %s: %d events, want %d", subj, len(g), len(ts))
		}
		d := g[0].Sub(ts[0])
		if d%(24*time.Hour) != 0 || d > 0 || d < -60*24*time.Hour {
			t.Errorf("subject %s moved by %v", subj, d)
		}
		for i := range ts {
			if g[i].Sub(ts[i]) != d {
				t.Errorf("subject %s: event %d moved by %v, the first by %v", subj, i, g[i].Sub(ts[i]), d)
			}
		}
		offsets[d] = true
	}
	if len(offsets) < 5 {
		t.Errorf("ten subjects got only %d distinct offsets", len(offsets))
	}
}
