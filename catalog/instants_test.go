package catalog

import (
	"slices"
	"testing"
	"time"
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
