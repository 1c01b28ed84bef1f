package export

import (
	"bytes"
	"context"
	"encoding/csv"
	"encoding/json"
	"fmt"
	"io"
	"testing"
	"time"

	"github.com/apache/arrow-go/v18/parquet/file"
	"github.com/parquet-go/parquet-go"

	"github.com/flowcat-catalog/flowcat/catalog/summary"
	"github.com/flowcat-catalog/flowcat/schema"
)

// The README accepts instants of the years 0001-9999 and stores them as
// TIMESTAMP(MICROS, UTC). An int64 of nanoseconds holds only 1677-09-21
// to 2262-04-11 (2^63 ns is about 292 years either side of 1970, Go's
// time package documentation of UnixNano), so each case below sits at
// the edges of the accepted range or just outside the nanosecond one.
var instantCases = []struct {
	name string
	at   []string // RFC 3339, microseconds, UTC
}{
	{"year-1", []string{"0001-01-01T00:00:00.000000Z", "0001-01-01T00:00:00.000001Z", "0001-01-02T23:59:59.999999Z"}},
	{"nanosecond-low-edge", []string{"1677-09-20T12:00:00.000001Z", "1677-09-21T00:12:43.145224Z", "1677-09-21T00:12:43.145225Z"}},
	{"nanosecond-high-edge", []string{"2262-04-11T23:47:16.854775Z", "2262-04-11T23:47:16.854776Z", "2262-04-12T00:00:00.000000Z"}},
	{"year-2300", []string{"2300-01-01T00:00:00.000000Z", "2300-01-01T08:30:00.123456Z"}},
	{"year-9999", []string{"9999-12-30T00:00:00.000000Z", "9999-12-31T23:59:59.999998Z", "9999-12-31T23:59:59.999999Z"}},
}

// TestInstantsRoundTrip stores events at the edges of the accepted range
// and reads them back through every read path: the catalog's snapshot
// reader, the stored file through an independent Parquet reader (arrow),
// the merged event stream with and without a time filter, the CSV export
// and the Parquet export read by arrow. Each must give the instant that
// went in, to the microsecond.
func TestInstantsRoundTrip(t *testing.T) {
	e := newEnv(t, 2)
	ctx := context.Background()
	for _, tc := range instantCases {
		t.Run(tc.name, func(t *testing.T) {
			want := make([]time.Time, len(tc.at))
			var rows [][]string
			for i, s := range tc.at {
				w, err := time.Parse(time.RFC3339Nano, s)
				if err != nil {
					t.Fatal(err)
				}
				want[i] = w
				rows = append(rows, []string{"north", fmt.Sprint("C-", i), "", "", "arrival", "", "", s, "", "", "", ""})
			}
			e.dataset(t, "edge", tc.name)
			v := e.ingest(t, "edge", tc.name, csvBytes(rows), tc.name+".csv")
			check := func(path string, got []time.Time) {
				t.Helper()
				checkTimes(t, path, got, want)
			}

			var snap []time.Time
			for _, ev := range e.allEvents(t, v.Manifest.Files) {
				snap = append(snap, ev.OccurredAt)
			}
			check("ReadSnapshot", snap)

			r, err := e.s.Blobs().Open(ctx, v.Manifest.Files[0].SHA256)
			if err != nil {
				t.Fatal(err)
			}
			stored := make([]byte, r.Size())
			if _, err := r.ReadAt(stored, 0); err != nil {
				t.Fatal(err)
			}
			r.Close()
			check("stored file via arrow", arrowMicros(t, stored))

			evs, _ := collect(t, e, v.Manifest.Files, Filter{})
			check("Events", eventTimes(evs))
			evs, _ = collect(t, e, v.Manifest.Files, Filter{From: want[0], To: want[len(want)-1].Add(time.Microsecond)})
			check("Events with a window", eventTimes(evs))
			evs, _ = collect(t, e, v.Manifest.Files, Filter{From: want[1]})
			checkTimes(t, "Events from the second instant", eventTimes(evs), want[1:])
			evs, _ = collect(t, e, v.Manifest.Files, Filter{To: want[1]})
			checkTimes(t, "Events before the second instant", eventTimes(evs), want[:1])

			// A filtered summary is built over the filtered event stream.
			acc := summary.New(summary.Options{Location: time.UTC})
			for i := range evs {
				acc.Observe(&evs[i])
			}
			sum := acc.SummaryFor(summary.Selection{})
			if sum.From == nil || !sum.From.Equal(want[0]) || !sum.To.Equal(want[0]) || sum.Events != 1 {
				t.Errorf("summary of the first event: %+v", sum)
			}
			if b, err := json.Marshal(sum); err != nil {
				t.Errorf("summary does not encode: %v", err)
			} else if !bytes.Contains(b, []byte(`"from":"`+tc.at[0][:19])) {
				t.Errorf("summary JSON does not hold %s: %.300s", tc.at[0], b)
			}

			var out bytes.Buffer
			if _, err := WriteCSV(ctx, &out, Source{Open: e.opener(), TempDir: e.tmp}, v.Manifest.Files, Filter{Columns: []schema.Field{schema.FieldOccurredAt}}); err != nil {
				t.Fatal(err)
			}
			recs, err := csv.NewReader(&out).ReadAll()
			if err != nil {
				t.Fatal(err)
			}
			for i, rec := range recs[1:] {
				if i < len(tc.at) && rec[0] != tc.at[i] {
					t.Errorf("CSV export: row %d reads %s, want %s", i+1, rec[0], tc.at[i])
				}
			}
			if len(recs) != len(tc.at)+1 {
				t.Errorf("CSV export: %d records, want %d", len(recs), len(tc.at)+1)
			}

			out.Reset()
			if _, err := WriteParquet(ctx, &out, Source{Open: e.opener(), TempDir: e.tmp}, v.Manifest.Files, Filter{}, ParquetOptions{}); err != nil {
				t.Fatal(err)
			}
			check("Parquet export via arrow", arrowMicros(t, out.Bytes()))
		})
	}
}

func checkTimes(t *testing.T, path string, got, want []time.Time) {
	t.Helper()
	if len(got) != len(want) {
		t.Fatalf("%s: %d events, want %d", path, len(got), len(want))
	}
	for i := range want {
		if !got[i].Equal(want[i]) {
			t.Errorf("%s: event %d at %s, want %s", path, i, got[i].UTC().Format(time.RFC3339Nano), want[i].Format(time.RFC3339Nano))
		}
	}
}

func eventTimes(evs []schema.Event) []time.Time {
	out := make([]time.Time, len(evs))
	for i := range evs {
		out[i] = evs[i].OccurredAt
	}
	return out
}

// arrowMicros reads the occurred_at column of a Parquet file with arrow's
// reader as raw int64 microseconds, without any time conversion.
func arrowMicros(t *testing.T, data []byte) []time.Time {
	t.Helper()
	pf, err := file.NewParquetReader(bytes.NewReader(data))
	if err != nil {
		t.Fatal(err)
	}
	defer pf.Close()
	idx := pf.MetaData().Schema.ColumnIndexByName(string(schema.FieldOccurredAt))
	var out []time.Time
	for g := 0; g < pf.NumRowGroups(); g++ {
		cr, err := pf.RowGroup(g).Column(idx)
		if err != nil {
			t.Fatal(err)
		}
		ir, ok := cr.(*file.Int64ColumnChunkReader)
		if !ok {
			t.Fatalf("occurred_at is read by %T, want int64", cr)
		}
		vals := make([]int64, pf.MetaData().RowGroup(g).NumRows())
		defs := make([]int16, len(vals))
		_, n, err := ir.ReadBatch(int64(len(vals)), vals, defs, nil)
		if err != nil {
			t.Fatal(err)
		}
		for _, us := range vals[:n] {
			out = append(out, time.UnixMicro(us).UTC())
		}
	}
	return out
}

// TestEventReaderMatchesGenericReader checks that the catalog's event
// reader decodes every other field as parquet-go's own reader does.
func TestEventReaderMatchesGenericReader(t *testing.T) {
	e, vs := fixture(t, 100)
	got := e.allEvents(t, vs[len(vs)-1].Manifest.Files)
	var want []schema.Event
	for _, f := range vs[len(vs)-1].Manifest.Files {
		r, err := e.s.Blobs().Open(context.Background(), f.SHA256)
		if err != nil {
			t.Fatal(err)
		}
		evs, err := readGeneric(r, r.Size())
		r.Close()
		if err != nil {
			t.Fatal(err)
		}
		want = append(want, evs...)
	}
	if len(got) != len(want) || len(got) == 0 {
		t.Fatalf("%d events, parquet-go reads %d", len(got), len(want))
	}
	for i := range want {
		if got[i] != want[i] {
			t.Fatalf("event %d: %+v, parquet-go reads %+v", i, got[i], want[i])
		}
	}
}

// readGeneric reads a snapshot file with parquet-go's generic reader.
func readGeneric(r io.ReaderAt, size int64) ([]schema.Event, error) {
	f, err := parquet.OpenFile(r, size)
	if err != nil {
		return nil, err
	}
	pr := parquet.NewGenericReader[schema.Event](f)
	defer pr.Close()
	out := make([]schema.Event, pr.NumRows())
	n, err := pr.Read(out)
	if err != nil && err != io.EOF {
		return nil, err
	}
	return out[:n], nil
}
