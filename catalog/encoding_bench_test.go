package catalog

import (
	"bytes"
	"context"
	"reflect"
	"strings"
	"testing"

	"github.com/apache/arrow-go/v18/arrow/memory"
	"github.com/apache/arrow-go/v18/parquet/file"
	"github.com/apache/arrow-go/v18/parquet/pqarrow"
	"github.com/parquet-go/parquet-go"

	"github.com/flowcat-catalog/flowcat/schema"
	"github.com/flowcat-catalog/flowcat/schema/synth"
)

// encodingCandidates are the encodings measured for the high-cardinality
// string columns (case_id, subject_id, event_id); "" is parquet-go's
// default for strings, DELTA_LENGTH_BYTE_ARRAY, which releases up to
// 8a7be85 wrote.
var encodingCandidates = []struct {
	name string
	tags map[schema.Field]string // field -> parquet-go encoding tag
}{
	{"delta-length", map[schema.Field]string{schema.FieldCaseID: "", schema.FieldSubjectID: "", schema.FieldEventID: ""}},
	{"plain", map[schema.Field]string{schema.FieldCaseID: "plain", schema.FieldSubjectID: "plain", schema.FieldEventID: "plain"}},
	{"dict", map[schema.Field]string{schema.FieldCaseID: "dict", schema.FieldSubjectID: "dict", schema.FieldEventID: "dict"}},
	{"delta-byte-array", map[schema.Field]string{schema.FieldCaseID: "delta", schema.FieldSubjectID: "delta", schema.FieldEventID: "delta"}},
	{"dict-ids-plain-event_id", map[schema.Field]string{schema.FieldCaseID: "dict", schema.FieldSubjectID: "dict", schema.FieldEventID: "plain"}},
}

// schemaWithEncodings is schema.Event's Parquet schema with the encoding
// of some string fields replaced.
func schemaWithEncodings(tags map[schema.Field]string) *parquet.Schema {
	var fields []reflect.StructField
	for i := range eventType.NumField() {
		sf := eventType.Field(i)
		tag := sf.Tag.Get("parquet")
		name, _, _ := strings.Cut(tag, ",")
		if name == "-" {
			continue
		}
		if enc, ok := tags[schema.Field(name)]; ok {
			parts := []string{name}
			if strings.Contains(tag, ",optional") {
				parts = append(parts, "optional")
			}
			if enc != "" {
				parts = append(parts, enc)
			}
			sf.Tag = reflect.StructTag(`parquet:"` + strings.Join(parts, ",") + `"`)
		}
		fields = append(fields, sf)
	}
	return parquet.SchemaOf(reflect.New(reflect.StructOf(fields)).Elem().Interface())
}

// BenchmarkEncodings writes and reads back (Apache Arrow's Go reader) one
// snapshot file of the pseudonymized events of synth.NewStream in each
// candidate encoding: bytes per event, write and read time per event.
//
//	FLOWCAT_BENCH_EVENTS=200000 go test ./catalog -run '^$' -bench Encodings -count 3
func BenchmarkEncodings(b *testing.B) {
	n := benchEvents(b)
	e := newEnv(b, nil)
	e.dataset(b, "bench", "enc", nil)
	res, err := e.s.Ingest(context.Background(), "bench", "enc", synth.NewStream(1, n), IngestOptions{Filename: "s.csv"})
	if err != nil {
		b.Fatal(err)
	}
	var evs []schema.Event
	for _, f := range res.Version.Manifest.Files {
		r, err := e.s.Blobs().Open(context.Background(), f.SHA256)
		if err != nil {
			b.Fatal(err)
		}
		err = ReadSnapshot(r, r.Size(), func(ev *schema.Event) error {
			c := *ev
			for _, s := range []*string{&c.Site, &c.CaseID, &c.SubjectID, &c.ResourceID, &c.Activity, &c.Queue, &c.Priority, &c.Channel, &c.Outcome, &c.EventID} {
				*s = strings.Clone(*s)
			}
			evs = append(evs, c)
			return nil
		})
		r.Close()
		if err != nil {
			b.Fatal(err)
		}
	}
	for _, c := range encodingCandidates {
		sch := schemaWithEncodings(c.tags)
		write := func() []byte {
			var buf bytes.Buffer
			w := NewEventWriter(&buf, schema.Fields, EventWriterOptions{RowGroupRows: 1 << 16, schema: sch})
			for i := range evs {
				if err := w.Write(&evs[i]); err != nil {
					b.Fatal(err)
				}
			}
			if err := w.Close(); err != nil {
				b.Fatal(err)
			}
			return buf.Bytes()
		}
		data := write()
		b.Run("write/"+c.name, func(b *testing.B) {
			for b.Loop() {
				write()
			}
			b.ReportMetric(float64(b.Elapsed().Nanoseconds())/float64(b.N)/float64(len(evs)), "ns/event")
			b.ReportMetric(float64(len(data))/float64(len(evs)), "bytes/event")
		})
		b.Run("read/"+c.name, func(b *testing.B) {
			for b.Loop() {
				pf, err := file.NewParquetReader(bytes.NewReader(data))
				if err != nil {
					b.Fatal(err)
				}
				fr, err := pqarrow.NewFileReader(pf, pqarrow.ArrowReadProperties{BatchSize: 1 << 16}, memory.DefaultAllocator)
				if err != nil {
					b.Fatal(err)
				}
				tbl, err := fr.ReadTable(context.Background())
				if err != nil {
					b.Fatal(err)
				}
				if tbl.NumRows() != int64(len(evs)) {
					b.Fatalf("%d rows", tbl.NumRows())
				}
				tbl.Release()
			}
			b.ReportMetric(float64(b.Elapsed().Nanoseconds())/float64(b.N)/float64(len(evs)), "ns/event")
		})
	}
}
