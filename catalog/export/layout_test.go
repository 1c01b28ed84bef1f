package export

import (
	"bytes"
	"context"
	"fmt"
	"net/url"
	"os"
	"path/filepath"
	"slices"
	"strings"
	"testing"
	"time"

	"github.com/apache/arrow-go/v18/arrow"
	"github.com/apache/arrow-go/v18/arrow/array"
	"github.com/apache/arrow-go/v18/parquet/file"

	"github.com/flowcat-catalog/flowcat/catalog"
	"github.com/flowcat-catalog/flowcat/catalog/arrowtest"
	"github.com/flowcat-catalog/flowcat/schema"
)

// oddSite is a site whose name needs escaping in a folder name.
const oddSite = "St. Mary's / East=Wing 2"

// layoutFixture is the three-night fixture plus a night at oddSite.
func layoutFixture(t *testing.T) (*env, *catalog.Version) {
	t.Helper()
	e, _ := fixture(t, 500)
	rows := genRows(9, 200, 1)
	for _, r := range rows {
		r[0] = oddSite
	}
	v := e.ingest(t, "er", "visits", csvBytes(rows), "odd.csv")
	return e, v
}

// eventKey is an event as one comparable string: every field, the time in
// microseconds.
func eventKey(vals map[schema.Field]string) string {
	var b strings.Builder
	for _, f := range schema.Fields {
		b.WriteString(vals[f])
		b.WriteByte(0)
	}
	return b.String()
}

func goKey(e *schema.Event) string {
	vals := map[schema.Field]string{}
	for _, f := range schema.Fields {
		vals[f] = e.Value(f)
	}
	vals[schema.FieldOccurredAt] = fmt.Sprint(e.OccurredAt.UnixMicro())
	return eventKey(vals)
}

// arrowKeys reads a layout file with Apache Arrow's Go reader and returns
// its rows as keys, with site given (the folder holds it), and the file's
// column names.
func arrowKeys(t *testing.T, path, site string) ([]string, []string) {
	t.Helper()
	data, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	pf, err := file.NewParquetReader(bytes.NewReader(data))
	if err != nil {
		t.Fatal(err)
	}
	tbl := arrowtest.Table(t, pf)
	defer tbl.Release()
	var names []string
	for i := range int(tbl.NumCols()) {
		names = append(names, tbl.Schema().Field(i).Name)
	}
	keys := make([]map[schema.Field]string, tbl.NumRows())
	for i := range keys {
		keys[i] = map[schema.Field]string{schema.FieldSite: site}
	}
	for c := range int(tbl.NumCols()) {
		f := schema.Field(names[c])
		row := 0
		for _, ch := range tbl.Column(c).Data().Chunks() {
			for i := range ch.Len() {
				v := ""
				if ch.IsValid(i) {
					switch a := ch.(type) {
					case *array.String:
						v = a.Value(i)
					case *array.Timestamp:
						if a.DataType().(*arrow.TimestampType).Unit != arrow.Microsecond {
							t.Fatalf("%s: %s not in microseconds", path, f)
						}
						v = fmt.Sprint(int64(a.Value(i)))
					default:
						t.Fatalf("%s: column %s of type %s", path, f, ch.DataType())
					}
				}
				keys[row][f] = v
				row++
			}
		}
	}
	out := make([]string, len(keys))
	for i, k := range keys {
		out[i] = eventKey(k)
	}
	return out, names
}

// TestLayout writes a version as a partitioned layout and reads every file
// back with Apache Arrow's Go reader: the same events as the version's
// snapshot files, each in the folder of its site and day (in the zone
// given), site escaped as Hive does, no site column in the files; the same
// bytes whatever the number of partitions written at once.
func TestLayout(t *testing.T) {
	e, v := layoutFixture(t)
	ctx := context.Background()
	src := Source{Open: e.opener(), TempDir: e.tmp}
	want := map[string][]string{} // by path
	la, _ := time.LoadLocation("America/Los_Angeles")
	evs := e.allEvents(t, v.Manifest.Files)
	for i := range evs {
		p := PartitionPath(evs[i].Site, evs[i].OccurredAt.In(la).Format(time.DateOnly))
		want[p] = append(want[p], goKey(&evs[i]))
	}
	dir := filepath.Join(t.TempDir(), "layout")
	meta := map[string]string{"flowcat.dataset": "er/visits"}
	files, err := WriteLayout(ctx, src, v.Manifest.Files, dir, LayoutOptions{Zone: la, RowGroupRows: 100, Metadata: meta})
	if err != nil {
		t.Fatal(err)
	}
	if len(files) != len(want) {
		t.Errorf("%d files, want %d partitions", len(files), len(want))
	}
	var total int64
	for _, f := range files {
		got, cols := arrowKeys(t, filepath.Join(dir, filepath.FromSlash(f.Path)), f.Site)
		if int64(len(got)) != f.Rows {
			t.Errorf("%s: %d rows read, %d reported", f.Path, len(got), f.Rows)
		}
		total += f.Rows
		if slices.Contains(cols, "site") || len(cols) != len(schema.Fields)-1 {
			t.Errorf("%s: columns %v, want every field but site", f.Path, cols)
		}
		w := slices.Clone(want[f.Path])
		slices.Sort(w)
		slices.Sort(got)
		if !slices.Equal(got, w) {
			t.Errorf("%s: %d events differ from the version's %d of that site and day", f.Path, len(got), len(w))
		}
		// The folder names the site and day the file holds.
		parts := strings.Split(f.Path, "/")
		site, err := url.PathUnescape(strings.TrimPrefix(parts[0], "site="))
		if err != nil || site != f.Site || parts[1] != "date="+f.Date || parts[2] != LayoutFileName {
			t.Errorf("path %s for site %q, date %s", f.Path, f.Site, f.Date)
		}
		checkEngineFriendly(t, mustRead(t, filepath.Join(dir, filepath.FromSlash(f.Path))))
	}
	if total != v.Manifest.Rows {
		t.Errorf("%d rows in the layout, the version has %d", total, v.Manifest.Rows)
	}
	if !slices.ContainsFunc(files, func(f LayoutFile) bool {
		return f.Path == "site=St.%20Mary%27s%20%2F%20East%3DWing%202/date=2026-03-02/"+LayoutFileName
	}) {
		t.Errorf("no escaped folder for %q in %v", oddSite, files)
	}
	// Events before 08:00 UTC fall on the day before in Los Angeles.
	if !slices.ContainsFunc(files, func(f LayoutFile) bool { return f.Date == "2026-03-01" }) {
		t.Error("no partition of 2026-03-01 in the Los Angeles zone")
	}

	// Fewer partitions at once: more passes, the same files.
	openPartitions = 2
	defer func() { openPartitions = LayoutOpenPartitions }()
	dir2 := filepath.Join(t.TempDir(), "layout")
	files2, err := WriteLayout(ctx, src, v.Manifest.Files, dir2, LayoutOptions{Zone: la, RowGroupRows: 100, Metadata: meta})
	if err != nil {
		t.Fatal(err)
	}
	if !slices.Equal(files, files2) {
		t.Errorf("two partitions at a time wrote other files:\n%v\n%v", files, files2)
	}
	// A folder that holds something is refused.
	if _, err := WriteLayout(ctx, src, v.Manifest.Files, dir, LayoutOptions{}); err == nil || !strings.Contains(err.Error(), "not empty") {
		t.Errorf("layout into a full folder: %v", err)
	}
}

func mustRead(t *testing.T, p string) []byte {
	t.Helper()
	b, err := os.ReadFile(p)
	if err != nil {
		t.Fatal(err)
	}
	return b
}
