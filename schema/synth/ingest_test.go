package synth

import (
	"bytes"
	"errors"
	"io"
	"testing"

	"github.com/flowcat-catalog/flowcat/schema"
)

// TestThroughSchemaReader reads every night's export through the schema
// package's own profile parser and reader: the planted defects that ingest
// rejects are rejected with the matching reasons, in the stated numbers,
// and every other row is accepted.
func TestThroughSchemaReader(t *testing.T) {
	sc := QuillonBay(21, firstDay, 7)
	for _, site := range sites {
		p, err := schema.ParseProfile(sc.Profile(site))
		if err != nil {
			t.Fatalf("%s: profile: %v", site, err)
		}
		for d := range sc.Days {
			data, st := night(t, sc, site, d)
			rd, err := schema.NewReader(bytes.NewReader(data), p, schema.ReaderOptions{Name: site})
			if err != nil {
				t.Fatalf("%s day %d: %v", site, d, err)
			}
			reasons := map[schema.Reason]int{}
			accepted := 0
			var e schema.Event
			for {
				rej, err := rd.Next(&e)
				if errors.Is(err, io.EOF) {
					break
				}
				if err != nil {
					t.Fatalf("%s day %d: %v", site, d, err)
				}
				if rej != nil {
					reasons[rej.Reason]++
					continue
				}
				if e.Site != site {
					t.Fatalf("%s day %d: site %q", site, d, e.Site)
				}
				accepted++
			}
			want := map[schema.Reason]int{
				schema.ReasonUnknownCode:     st.Defects[DefectUnknownCode],
				schema.ReasonBadTimestamp:    st.Defects[DefectBadTimestamp],
				schema.ReasonMissingRequired: st.Defects[DefectEmptyCaseID],
			}
			rejected := 0
			for r, n := range reasons {
				rejected += n
				if want[r] != n {
					t.Errorf("%s day %d: %d rejected for %s, want %d (all: %v)", site, d, n, r, want[r], reasons)
				}
			}
			if accepted+rejected != st.Events {
				t.Errorf("%s day %d: %d accepted + %d rejected != %d events", site, d, accepted, rejected, st.Events)
			}
		}
	}
}

func TestStreamThroughSchemaReader(t *testing.T) {
	const n = 50_000
	rd, err := schema.NewReader(NewStream(2, n), schema.DefaultProfile(), schema.ReaderOptions{Name: "stream"})
	if err != nil {
		t.Fatal(err)
	}
	var e schema.Event
	rows := 0
	for {
		rej, err := rd.Next(&e)
		if errors.Is(err, io.EOF) {
			break
		}
		if err != nil {
			t.Fatal(err)
		}
		if rej != nil {
			t.Fatalf("row rejected: %v", rej)
		}
		rows++
	}
	if rows != n {
		t.Fatalf("%d events, want %d", rows, n)
	}
}
