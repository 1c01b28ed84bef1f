package export

import (
	"bytes"
	"context"
	"encoding/xml"
	"errors"
	"io"
	"math"
	"os"
	"os/exec"
	"path/filepath"
	"slices"
	"strings"
	"testing"
	"time"

	"github.com/flowcat-catalog/flowcat/catalog"
	"github.com/flowcat-catalog/flowcat/schema"
)

const sepsisDir = "../../testdata/sepsis/"

// xmllintWellFormed checks path with xmllint (Debian libxml2-utils, an
// XML parser independent of Go's). Without it the check is skipped with
// the reason, except in CI, where .ci/run installs it.
func xmllintWellFormed(t *testing.T, path string) {
	t.Helper()
	lint, err := exec.LookPath("xmllint")
	if err != nil {
		msg := "xmllint check not run: needs xmllint (Debian package libxml2-utils)"
		if os.Getenv("CI") != "" {
			t.Fatal(msg)
		}
		t.Log(msg)
		return
	}
	// --noout: parse only; --nonet: no network; well-formedness is what
	// a plain parse checks (XML 1.0 section 2.1).
	out, err := exec.Command(lint, "--noout", "--nonet", path).CombinedOutput()
	if err != nil {
		t.Fatalf("xmllint: the XES export is not well formed: %v\n%s", err, out)
	}
}

// ingestSepsis stores the public sepsis log (testdata/sepsis) as
// hospital/sepsis version 1.
func ingestSepsis(t *testing.T, e *env) *catalog.Version {
	t.Helper()
	prof, err := os.ReadFile(sepsisDir + "profile.yaml")
	if err != nil {
		t.Fatal(err)
	}
	data, err := os.ReadFile(sepsisDir + "sepsis-cases.csv.gz")
	if err != nil {
		t.Fatal(err)
	}
	ctx := context.Background()
	if _, err := e.s.CreateProject(ctx, "hospital", "", "curator"); err != nil {
		t.Fatal(err)
	}
	if _, err := e.s.CreateDataset(ctx, catalog.DatasetSpec{Project: "hospital", Name: "sepsis", Profile: prof, Historical: true}, "curator"); err != nil {
		t.Fatal(err)
	}
	return e.ingest(t, "hospital", "sepsis", data, "sepsis-cases.csv.gz")
}

// caseFigures returns the number of cases and the mean case duration
// (first to last event) in seconds.
func caseFigures(evs []schema.Event) (int, float64) {
	first, last := map[string]time.Time{}, map[string]time.Time{}
	for _, e := range evs {
		if f, ok := first[e.CaseID]; !ok || e.OccurredAt.Before(f) {
			first[e.CaseID] = e.OccurredAt
		}
		if l, ok := last[e.CaseID]; !ok || e.OccurredAt.After(l) {
			last[e.CaseID] = e.OccurredAt
		}
	}
	var total float64
	for id, f := range first {
		total += last[id].Sub(f).Seconds()
	}
	return len(first), total / float64(len(first))
}

// TestXESSepsisRoundTrip exports the public sepsis log as XES, checks the
// file with xmllint and Go's XML decoder, reads it back through the XES
// reader with XESProfile (the same events, field by field) and through a
// second catalog dataset, and checks the figures published with the log.
func TestXESSepsisRoundTrip(t *testing.T) {
	e := newEnv(t, 0)
	v := ingestSepsis(t, e)
	src := Source{Open: e.opener(), TempDir: e.tmp}
	var buf bytes.Buffer
	// A small run size makes the sort by case spill and merge runs.
	st, err := WriteXES(context.Background(), &buf, src, v.Manifest.Files, Filter{}, XESOptions{
		Dataset: "hospital/sepsis", Version: v.Number, SnapshotID: v.SnapshotID.String(), RunEvents: 1000,
	})
	if err != nil {
		t.Fatal(err)
	}
	path := filepath.Join(t.TempDir(), "sepsis.xes")
	if err := os.WriteFile(path, buf.Bytes(), 0o600); err != nil {
		t.Fatal(err)
	}
	xmllintWellFormed(t, path)

	// The same bytes again: the export depends only on the events.
	var again bytes.Buffer
	if _, err := WriteXES(context.Background(), &again, src, v.Manifest.Files, Filter{}, XESOptions{
		Dataset: "hospital/sepsis", Version: v.Number, SnapshotID: v.SnapshotID.String(),
	}); err != nil {
		t.Fatal(err)
	}
	if !bytes.Equal(buf.Bytes(), again.Bytes()) {
		t.Error("two exports of one version differ (run size 1000 and the default)")
	}

	// Structure, read with Go's XML decoder on its own: traces are
	// cases, each case once, a trace's concept:name its case pseudonym.
	traces, events := 0, 0
	seen := map[string]bool{}
	dec := xml.NewDecoder(bytes.NewReader(buf.Bytes()))
	depth := 0
	for {
		tok, err := dec.Token()
		if errors.Is(err, io.EOF) {
			break
		}
		if err != nil {
			t.Fatal(err)
		}
		switch s := tok.(type) {
		case xml.StartElement:
			depth++
			switch s.Name.Local {
			case "trace":
				traces++
			case "event":
				events++
			case "string":
				if depth == 3 && attr(s, "key") == "concept:name" { // <log><trace><string>
					if seen[attr(s, "value")] {
						t.Fatalf("case %s has two traces", attr(s, "value"))
					}
					seen[attr(s, "value")] = true
				}
			}
		case xml.EndElement:
			depth--
		}
	}
	stored := e.allEvents(t, v.Manifest.Files)
	if traces != 1050 || len(seen) != 1050 { // traces (cases): 1050, testdata/sepsis/README.md
		t.Errorf("%d traces, %d distinct trace names; want 1050", traces, len(seen))
	}
	if events != len(stored) || st.RowsEmitted != int64(len(stored)) {
		t.Errorf("%d events in the XES, %d emitted; the version holds %d", events, st.RowsEmitted, len(stored))
	}

	// Back through the XES reader: the same events, every field.
	prof, err := schema.ParseProfile([]byte(XESProfile))
	if err != nil {
		t.Fatal(err)
	}
	rd, err := schema.NewReader(bytes.NewReader(buf.Bytes()), prof, schema.ReaderOptions{Name: "sepsis.xes"})
	if err != nil {
		t.Fatal(err)
	}
	var back []schema.Event
	for {
		var ev schema.Event
		rej, err := rd.Next(&ev)
		if err == io.EOF {
			break
		}
		if err != nil {
			t.Fatal(err)
		}
		if rej != nil {
			t.Fatalf("rejected: %+v", rej)
		}
		ev.Line = 0
		back = append(back, ev)
	}
	// lifecycle:transition repeats event_type in the standard's words.
	if u := rd.Unmapped(); !slices.Equal(u, []string{"lifecycle:transition"}) {
		t.Errorf("attributes left unmapped by XESProfile: %v, want only lifecycle:transition", u)
	}
	cmp := func(a, b schema.Event) int { return Compare(&a, &b) }
	slices.SortFunc(back, cmp)
	want := slices.Clone(stored)
	slices.SortFunc(want, cmp)
	if len(back) != len(want) {
		t.Fatalf("read back %d events, stored %d", len(back), len(want))
	}
	for i := range want {
		if Compare(&back[i], &want[i]) != 0 {
			t.Fatalf("event %d read back as %+v, stored as %+v", i, back[i], want[i])
		}
	}

	// Figures published with the log (testdata/sepsis/README.md).
	n, mean := caseFigures(back)
	if n != 1050 {
		t.Errorf("%d cases read back, want 1050", n)
	}
	if math.Abs(mean-2459733.94) > 0.01 { // case duration, mean: 2459733.94 s
		t.Errorf("mean case duration %.4f s read back, want 2459733.94 s", mean)
	}

	// And as an upload of its own: the catalog takes the XES file whole.
	ctx := context.Background()
	if _, err := e.s.CreateDataset(ctx, catalog.DatasetSpec{Project: "hospital", Name: "sepsis-xes", Profile: []byte(XESProfile), Historical: true}, "curator"); err != nil {
		t.Fatal(err)
	}
	v2 := e.ingest(t, "hospital", "sepsis-xes", buf.Bytes(), "sepsis.xes")
	again2 := e.allEvents(t, v2.Manifest.Files)
	if len(again2) != len(stored) {
		t.Errorf("the XES upload stored %d events, the CSV upload %d", len(again2), len(stored))
	}
	if n, mean := caseFigures(again2); n != 1050 || math.Abs(mean-2459733.94) > 0.01 {
		t.Errorf("the XES upload: %d cases, mean case duration %.4f s; want 1050 and 2459733.94 s", n, mean)
	}
	t.Logf("XES export: %d bytes, %d traces, %d events", buf.Len(), traces, events)
}

func attr(s xml.StartElement, name string) string {
	for _, a := range s.Attr {
		if a.Name.Local == name {
			return a.Value
		}
	}
	return ""
}

// TestXESEscaping: values holding XML's special characters come back
// exactly; the output stays well formed.
func TestXESEscaping(t *testing.T) {
	e := newEnv(t, 0)
	e.dataset(t, "er", "visits")
	rows := genRows(7, 200, 0) // activities hold quotes, commas, line breaks
	rows[0][5] = `a<b>&"c'`
	rows[1][6] = "q]]>x"
	v := e.ingest(t, "er", "visits", csvBytes(rows), "night.csv")
	var buf bytes.Buffer
	if _, err := WriteXES(context.Background(), &buf, Source{Open: e.opener(), TempDir: e.tmp}, v.Manifest.Files, Filter{}, XESOptions{Dataset: "er/visits", Version: 1}); err != nil {
		t.Fatal(err)
	}
	path := filepath.Join(t.TempDir(), "v.xes")
	os.WriteFile(path, buf.Bytes(), 0o600)
	xmllintWellFormed(t, path)
	prof, err := schema.ParseProfile([]byte(XESProfile))
	if err != nil {
		t.Fatal(err)
	}
	rd, err := schema.NewReader(bytes.NewReader(buf.Bytes()), prof, schema.ReaderOptions{})
	if err != nil {
		t.Fatal(err)
	}
	var back []schema.Event
	for {
		var ev schema.Event
		rej, err := rd.Next(&ev)
		if err == io.EOF {
			break
		}
		if err != nil || rej != nil {
			t.Fatal(err, rej)
		}
		ev.Line = 0
		back = append(back, ev)
	}
	want := e.allEvents(t, v.Manifest.Files)
	cmp := func(a, b schema.Event) int { return Compare(&a, &b) }
	slices.SortFunc(back, cmp)
	slices.SortFunc(want, cmp)
	if len(back) != len(want) {
		t.Fatalf("%d events back, %d stored", len(back), len(want))
	}
	for i := range want {
		if Compare(&back[i], &want[i]) != 0 {
			t.Fatalf("event %d: %+v back, %+v stored", i, back[i], want[i])
		}
	}
	if !strings.Contains(buf.String(), "a&lt;b&gt;&amp;&#34;c&#39;") {
		t.Error("special characters not escaped as expected")
	}
}
