package catalog

import (
	"bytes"
	"slices"
	"testing"
	"time"

	"github.com/flowcat-catalog/flowcat/schema/cases"
)

// TestReplaceWindowKeepsFarInstants: a replace-window that rewrites a file
// copies the events outside the window from the stored file; those read
// back through int64 nanoseconds would wrap (2300-01-01 reads as
// 1715-06-13, 2^63 ns being about 292 years either side of 1970, Go's
// time documentation of UnixNano) and be stored wrapped for good.
func TestReplaceWindowKeepsFarInstants(t *testing.T) {
	e := newEnv(t, nil)
	e.dataset(t, "lab", "far", nil)
	mk := func(id, at string) row {
		return row{"north", id, "", "", "arrival", "", "", at, "", "", "", ""}
	}
	old := []row{
		mk("A", "2300-01-01T00:00:00.000001Z"),
		mk("B", "2300-01-02T12:00:00Z"),
		mk("C", "2300-01-03T12:00:00Z"),
	}
	e.ingest(t, "lab", "far", csvBytes(header, old), "far.csv")
	from := time.Date(2300, 1, 2, 0, 0, 0, 0, time.UTC)
	res, err := e.ingestOpt(t, "lab", "far", csvBytes(header, []row{mk("D", "2300-01-02T13:00:00Z")}),
		IngestOptions{Mode: ModeReplaceWindow, From: from, To: from.Add(24 * time.Hour)})
	if err != nil {
		t.Fatal(err)
	}
	var got []string
	for _, f := range res.Version.Manifest.Files {
		for _, ev := range readEvents(t, e.blobBytes(t, f.SHA256)) {
			got = append(got, ev.OccurredAt.UTC().Format(time.RFC3339Nano))
		}
	}
	slices.Sort(got)
	want := []string{"2300-01-01T00:00:00.000001Z", "2300-01-02T13:00:00Z", "2300-01-03T12:00:00Z"}
	if !slices.Equal(got, want) {
		t.Fatalf("after replace-window the version holds %v, want %v", got, want)
	}
}

// TestCaseTableFarInstants: the case table's instants read back exactly
// outside the reach of int64 nanoseconds, at both ends of the accepted
// range.
func TestCaseTableFarInstants(t *testing.T) {
	e := newEnv(t, nil)
	mk := func(id, typ, at string) row {
		return row{"north", id, "", "", typ, "", "", at, "", "", "", ""}
	}
	// One dataset per end: a span of ten thousand years is another
	// matter (per-day state), not this test's.
	for _, tc := range []struct {
		name string
		rows []row
		want string
	}{
		{"year-1", []row{mk("A", "arrival", "0001-01-01T00:00:00.000001Z"), mk("A", "departure", "0001-01-01T03:00:00Z")},
			"0001-01-01T00:00:00.000001Z 0001-01-01T03:00:00Z arrival 0001-01-01T00:00:00.000001Z"},
		{"year-9999", []row{mk("B", "arrival", "9999-12-31T20:00:00Z"), mk("B", "departure", "9999-12-31T23:59:59.999999Z")},
			"9999-12-31T20:00:00Z 9999-12-31T23:59:59.999999Z arrival 9999-12-31T20:00:00Z"},
	} {
		e.dataset(t, "lab", tc.name, nil)
		res := e.ingest(t, "lab", tc.name, csvBytes(header, tc.rows), "far.csv")
		ct := res.Version.Manifest.CaseTable
		if ct == nil {
			t.Fatal("the version has no case table")
		}
		data := e.blobBytes(t, ct.SHA256)
		var got []string
		err := ReadCaseTable(bytes.NewReader(data), int64(len(data)), func(r *cases.Row) error {
			s := r.FirstAt.Format(time.RFC3339Nano) + " " + r.LastAt.Format(time.RFC3339Nano)
			if r.ArrivalAt != nil {
				s += " arrival " + r.ArrivalAt.Format(time.RFC3339Nano)
			}
			got = append(got, s)
			return nil
		})
		if err != nil {
			t.Fatal(err)
		}
		if len(got) != 1 || got[0] != tc.want {
			t.Errorf("%s: case table instants %q, want %q", tc.name, got, tc.want)
		}
	}
}

// TestAppendHoldsFarInstants: an append drops the events the latest
// version already holds, read back from its files; far instants read back
// wrapped would never match and be stored twice.
func TestAppendHoldsFarInstants(t *testing.T) {
	e := newEnv(t, nil)
	e.dataset(t, "lab", "far", nil)
	mk := func(id, at string) row {
		return row{"north", id, "", "", "arrival", "", "", at, "", "", "", ""}
	}
	first := []row{mk("A", "2300-01-01T00:00:00.000001Z"), mk("B", "2300-01-01T01:00:00Z")}
	e.ingest(t, "lab", "far", csvBytes(header, first), "one.csv")
	res := e.ingest(t, "lab", "far", csvBytes(header, append(first, mk("C", "2300-01-01T02:00:00Z"))), "two.csv")
	if got := res.Version.Manifest.Rows; got != 3 {
		t.Errorf("the version holds %d events after the append, want 3 (two held, one new)", got)
	}
}
