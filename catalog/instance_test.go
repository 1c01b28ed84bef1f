package catalog

import (
	"bytes"
	"context"
	"encoding/json"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/apache/arrow-go/v18/arrow/array"
	"github.com/apache/arrow-go/v18/parquet/file"

	"github.com/flowcat-catalog/flowcat/anonymize"
	"github.com/flowcat-catalog/flowcat/catalog/arrowtest"
	"github.com/flowcat-catalog/flowcat/catalog/summary"
	"github.com/flowcat-catalog/flowcat/schema"
)

// instanceProfile maps an activity-instance column.
const instanceProfile = `format: csv
fields:
  site: {value: "clinic"}
  case_id: "visit"
  instance_id: "step"
  resource_id: "staff"
  activity: "what"
  event_type: "kind"
  occurred_at: "at"
`

// TestInstanceIDStored: instance_id mapped by a profile is stored as a
// pseudonym (never the raw value), NULL where the row has none, read
// back by an independent Parquet reader (arrow-go); the services pair by
// it, so one case scanning twice at once gives the two durations worked
// out by hand (40 and 35 minutes), not the one a pairing by activity
// would give.
func TestInstanceIDStored(t *testing.T) {
	raw := []string{"RAW-INST-40101", "RAW-INST-40102", "RAW-INST-40103"}
	data := []byte(`visit,step,staff,what,kind,at
V1,,,,arrival,2026-03-02T08:00:00Z
V1,RAW-INST-40101,S1,scan,start,2026-03-02T08:00:00Z
V1,RAW-INST-40102,S2,scan,start,2026-03-02T08:10:00Z
V1,RAW-INST-40101,S1,scan,complete,2026-03-02T08:40:00Z
V1,RAW-INST-40102,S2,scan,complete,2026-03-02T08:45:00Z
V1,,,,departure,2026-03-02T08:50:00Z
V2,,,,arrival,2026-03-02T09:00:00Z
V2,RAW-INST-40103,S1,scan,start,2026-03-02T09:05:00Z
V2,RAW-INST-40103,S1,scan,complete,2026-03-02T09:35:00Z
V2,,,,departure,2026-03-02T09:40:00Z
`)
	e := newEnv(t, nil)
	e.dataset(t, "p", "d", func(s *DatasetSpec) { s.Profile = []byte(instanceProfile) })
	v := e.ingest(t, "p", "d", data, "steps.csv").Version

	// arrow-go: NULL on the four rows without an instance, pseudonyms on
	// the six with one, equal where the raw ids were equal.
	b := e.blobBytes(t, v.Manifest.Files[0].SHA256)
	pf, err := file.NewParquetReader(bytes.NewReader(b))
	if err != nil {
		t.Fatal(err)
	}
	defer pf.Close()
	tbl := arrowtest.Table(t, pf)
	defer tbl.Release()
	idx := tbl.Schema().FieldIndices("instance_id")
	if len(idx) != 1 {
		t.Fatalf("instance_id column: %v", idx)
	}
	nulls, distinct := 0, map[string]int{}
	for _, ch := range tbl.Column(idx[0]).Data().Chunks() {
		for i := 0; i < ch.Len(); i++ {
			if ch.IsNull(i) {
				nulls++
				continue
			}
			var s string
			switch a := ch.(type) {
			case *array.String:
				s = a.Value(i)
			case *array.Binary:
				s = string(a.Value(i))
			default:
				t.Fatalf("instance_id as %T", ch)
			}
			if !anonymize.IsPseudonym(s) {
				t.Errorf("instance_id %q is not a pseudonym", s)
			}
			distinct[s]++
		}
	}
	if nulls != 4 || len(distinct) != 3 {
		t.Errorf("instance_id: %d nulls, %d distinct values %v; want 4 and 3 (two rows each)", nulls, len(distinct), distinct)
	}
	for _, n := range distinct {
		if n != 2 {
			t.Errorf("instance_id counts %v, want 2 each", distinct)
			break
		}
	}
	for _, hit := range grepDir(t, e.dir, raw) {
		t.Error(hit)
	}

	js, err := e.s.Summary(context.Background(), "p/d", v.Number)
	if err != nil {
		t.Fatal(err)
	}
	var s summary.Summary
	if err := json.Unmarshal(js, &s); err != nil {
		t.Fatal(err)
	}
	if len(s.Activities) != 1 || s.Activities[0].Service.N != 3 || math.Abs(s.Activities[0].Service.Mean-(40+35+30)*60/3.0) > 1e-9 {
		t.Errorf("activities %+v; want scan: 3 services, mean 35 min (40, 35, 30 by hand)", s.Activities)
	}
	// Two starts of one activity at one instant are no duplicate when they
	// name different instances; the two scans of V1 overlap at no resource.
	q := e.report(t, v)
	if n := q.Count("duplicate_case_type_time"); n != 0 {
		t.Errorf("duplicate_case_type_time %d, want 0", n)
	}
	if n := q.Count("resource_overlap"); n != 0 {
		t.Errorf("resource_overlap %d, want 0 (S1 and S2 each serve one scan at a time)", n)
	}
}

// TestOldSnapshotsRead: the snapshot files of every golden data directory
// (written before instance_id existed) read through today's reader, every
// row, with instance_id empty.
func TestOldSnapshotsRead(t *testing.T) {
	paths, err := filepath.Glob("../testdata/golden/*/data/blobs/sha256/*/*")
	if err != nil || len(paths) == 0 {
		t.Fatalf("no golden blobs (%v)", err)
	}
	snapshots := 0
	for _, p := range paths {
		b, err := os.ReadFile(p)
		if err != nil {
			t.Fatal(err)
		}
		pf, err := file.NewParquetReader(bytes.NewReader(b))
		if err != nil {
			continue // not Parquet
		}
		rows := pf.NumRows()
		isSnapshot := pf.MetaData().Schema.ColumnIndexByName("event_type") >= 0
		hasInstance := pf.MetaData().Schema.ColumnIndexByName("instance_id") >= 0
		pf.Close()
		if !isSnapshot {
			continue // a case table
		}
		snapshots++
		if hasInstance {
			t.Errorf("%s: an old snapshot with an instance_id column?", p)
		}
		var n int64
		err = ReadSnapshot(bytes.NewReader(b), int64(len(b)), func(e *schema.Event) error {
			n++
			if e.InstanceID != "" || e.CaseID == "" {
				t.Errorf("%s: event %+v", filepath.Base(p), e)
			}
			return nil
		})
		if err != nil || n != rows {
			t.Errorf("%s: read %d of %d rows: %v", strings.TrimPrefix(p, "../"), n, rows, err)
		}
	}
	if snapshots == 0 {
		t.Error("no snapshots among the golden blobs")
	}
}
