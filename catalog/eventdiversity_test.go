package catalog

import (
	"context"
	"fmt"
	"maps"
	"slices"
	"strings"
	"testing"
	"time"
)

// An invented night clinic: the ward is a case quasi-identifier, each
// step of a visit may record a diagnosis code (event-level, sensitive)
// and a room (event-level, plain: it enters no figure).
const eventDivProfile = `fields:
  site: {value: lantern}
  case_id: visit
  subject_id: person
  event_type: step
  occurred_at: at
attributes:
  ward: {column: WARD, role: quasi, type: code}
  dx: {column: DX, role: sensitive, type: code, level: event}
  room: {column: ROOM, role: plain, type: code, level: event}
`

// eventDivRows are the raw rows of the two uploads: visit, person, step,
// minute, WARD, DX, ROOM. Classes by ward, and the diagnoses their
// visits' events carry:
//
//	upload 1:  W1: k1 {A}, k2 {A}        -> {A}    l 1
//	           W2: k3 {B}, k4 {C}        -> {B,C}  l 2
//	           W3: k5 {D}, k6 {}         -> {D}    l 1
//	upload 2 (append): k1 gains E, k6 gains D
//	version 2: W1 {A,E} l 2, W2 {B,C} l 2, W3 {D} l 1 (k5, k6)
//
// k1's diagnoses span the two uploads (two files of version 2).
var eventDivRows = [][][]string{
	{
		{"k1", "h1", "arrival", "0", "W1", "A", "r9"},
		{"k1", "h1", "start", "5", "W1", "A", "r9"},
		{"k1", "h1", "complete", "30", "W1", "", "r8"},
		{"k2", "h2", "arrival", "1", "W1", "A", "r7"},
		{"k3", "h3", "arrival", "2", "W2", "B", ""},
		{"k4", "h4", "arrival", "3", "W2", "C", "r1"},
		{"k4", "h4", "departure", "40", "W2", "", "r2"},
		{"k5", "h5", "arrival", "4", "W3", "D", "r3"},
		{"k6", "h6", "arrival", "6", "W3", "", "r4"},
	},
	{
		{"k1", "h1", "departure", "90", "W1", "E", "r5"},
		{"k6", "h6", "departure", "95", "W3", "D", "r6"},
	},
}

func eventDivCSV(rows [][]string) []byte {
	var b strings.Builder
	b.WriteString("visit,person,step,at,WARD,DX,ROOM\n")
	t0 := time.Date(2026, 4, 2, 22, 0, 0, 0, time.UTC)
	for _, r := range rows {
		var m int
		fmt.Sscan(r[3], &m)
		fmt.Fprintf(&b, "%s,%s,%s,%s,%s,%s,%s\n", r[0], r[1], r[2], t0.Add(time.Duration(m)*time.Minute).Format(time.RFC3339), r[4], r[5], r[6])
	}
	return []byte(b.String())
}

// wantEventDiversity computes, from the raw rows of the uploads so far
// with the standard library alone, each class's distinct l (the number of
// distinct non-empty diagnoses any event of any of its visits carries),
// the least of them, the classes with exactly one and their visits with a
// diagnosis.
func wantEventDiversity(uploads [][][]string) (perClass map[string]int, l, homogeneous, cases int64) {
	ward := map[string]string{}
	dx := map[string]map[string]bool{}
	for _, rows := range uploads {
		for _, r := range rows {
			ward[r[0]] = r[4]
			if dx[r[0]] == nil {
				dx[r[0]] = map[string]bool{}
			}
			if r[5] != "" {
				dx[r[0]][r[5]] = true
			}
		}
	}
	classVals := map[string]map[string]bool{}
	classCases := map[string]int64{} // visits with a diagnosis
	for c, w := range ward {
		if classVals[w] == nil {
			classVals[w] = map[string]bool{}
		}
		for v := range dx[c] {
			classVals[w][v] = true
		}
		if len(dx[c]) > 0 {
			classCases[w]++
		}
	}
	perClass = map[string]int{}
	for _, w := range slices.Sorted(maps.Keys(classVals)) {
		n := len(classVals[w])
		perClass[w] = n
		if l == 0 || int64(n) < l {
			l = int64(n)
		}
		if n == 1 {
			homogeneous++
			cases += classCases[w]
		}
	}
	return perClass, l, homogeneous, cases
}

// TestEventDiversity checks the distinct l-diversity of an event-level
// sensitive attribute on a worked example through real ingests, the
// second an append whose visit k1 carries a diagnosis its first-upload
// events did not. Distinct l-diversity: the number of distinct sensitive
// values in an equivalence class, the report giving the least over
// classes (Machanavajjhala et al., "l-Diversity: Privacy Beyond
// k-Anonymity", ACM TKDD 2007, section on distinct l-diversity; recalled
// from memory).
func TestEventDiversity(t *testing.T) {
	e := newEnv(t, nil)
	e.dataset(t, "p", "d", func(s *DatasetSpec) { s.Profile = []byte(eventDivProfile) })
	ctx := context.Background()
	if _, err := e.s.SetDisclosurePolicy(ctx, "p", DisclosurePolicy{K: 2, MaxRisk: 1}, "curator"); err != nil {
		t.Fatal(err)
	}
	// The hand-checked figures of the table above, beside the ones
	// computed from the raw rows.
	hand := []struct {
		perClass              map[string]int
		l, homogeneous, cases int64
	}{
		{map[string]int{"W1": 1, "W2": 2, "W3": 1}, 1, 2, 3},
		{map[string]int{"W1": 2, "W2": 2, "W3": 1}, 1, 1, 2},
	}
	for i, rows := range eventDivRows {
		res, err := e.ingestOpt(t, "p", "d", eventDivCSV(rows), IngestOptions{Filename: fmt.Sprintf("u%d.csv", i+1), Mode: ModeAppend})
		if err != nil {
			t.Fatal(err)
		}
		v := res.Version
		if len(v.Manifest.Files) != i+1 {
			t.Fatalf("version %d has %d files, want %d", v.Number, len(v.Manifest.Files), i+1)
		}
		perClass, l, hom, cases := wantEventDiversity(eventDivRows[:i+1])
		h := hand[i]
		if !maps.Equal(perClass, h.perClass) || l != h.l || hom != h.homogeneous || cases != h.cases {
			t.Fatalf("version %d: computed l per class %v, l %d, %d homogeneous with %d cases; by hand %+v", v.Number, perClass, l, hom, cases, h)
		}
		r := e.disclosure(t, v.Number)
		if r.Cases != 6 || r.Classes != 3 {
			t.Errorf("version %d: %d cases in %d classes, want 6 in 3", v.Number, r.Cases, r.Classes)
		}
		if len(r.Sensitive) != 0 || !slices.Equal(r.EventSensitive, []string{"dx"}) {
			t.Errorf("version %d: sensitive %v, event-level %v; want none and [dx]", v.Number, r.Sensitive, r.EventSensitive)
		}
		if len(r.Diversity) != 1 {
			t.Fatalf("version %d: diversity %+v, want one entry", v.Number, r.Diversity)
		}
		d := r.Diversity[0]
		if d.Attribute != "dx" || d.Level != "event" || d.L != l || d.Homogeneous != hom || d.CasesInThem != cases {
			t.Errorf("version %d: diversity %+v; want dx at event level, l %d, %d homogeneous classes with %d cases", v.Number, d, l, hom, cases)
		}
	}
}

// TestEventDiversityNone: a profile with case attributes only gives a
// report without any event-level member (the report of a version from
// before them, byte for byte, is covered by TestCaseAttributes).
func TestEventDiversityNone(t *testing.T) {
	e := newEnv(t, nil)
	e.dataset(t, "p", "d", func(s *DatasetSpec) { s.Profile = []byte(attrProfile) })
	res := e.ingest(t, "p", "d", attrCSV(attrCases, 2, "words"), "a.csv")
	b, _, err := e.s.DisclosureReport(context.Background(), "p", "d", res.Version.Number)
	if err != nil {
		t.Fatal(err)
	}
	for _, k := range []string{`"level"`, `"event_sensitive"`} {
		if strings.Contains(string(b), k) {
			t.Errorf("report has %s: %s", k, b)
		}
	}
}
