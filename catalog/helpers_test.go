package catalog

import (
	"bytes"
	"compress/gzip"
	"context"
	"crypto/sha256"
	"encoding/csv"
	"fmt"
	"github.com/parquet-go/parquet-go"
	"io"
	"io/fs"
	"log/slog"
	"math/rand/v2"
	"os"
	"path/filepath"
	"slices"
	"strings"
	"sync"
	"testing"
	"time"

	bolt "go.etcd.io/bbolt"

	"github.com/flowcat-catalog/flowcat/anonymize"
	"github.com/flowcat-catalog/flowcat/catalog/blob"
	"github.com/flowcat-catalog/flowcat/catalog/blob/localfs"
	"github.com/flowcat-catalog/flowcat/quality"
	"github.com/flowcat-catalog/flowcat/schema"
)

// testNow is the clock of every test store: later than all generated
// events, so no event is "later than the upload".
var testNow = time.Date(2026, 6, 1, 12, 0, 0, 0, time.UTC)

// genBase is the earliest generated event.
var genBase = time.Date(2026, 3, 2, 0, 0, 0, 0, time.UTC)

// env is one catalog on disk: bbolt file, blobs and temp dir under dir.
type env struct {
	dir    string
	dbPath string
	tmp    string
	blobs  *localfs.Store
	master anonymize.MasterKey
	logs   *syncBuffer
	s      *Store
}

type syncBuffer struct {
	mu sync.Mutex
	b  bytes.Buffer
}

func (b *syncBuffer) Write(p []byte) (int, error) {
	b.mu.Lock()
	defer b.mu.Unlock()
	return b.b.Write(p)
}

func (b *syncBuffer) String() string {
	b.mu.Lock()
	defer b.mu.Unlock()
	return b.b.String()
}

// newEnv opens a fresh store; mod may change its options.
func newEnv(t testing.TB, mod func(*Options)) *env {
	t.Helper()
	mk, err := anonymize.GenerateMasterKey()
	if err != nil {
		t.Fatal(err)
	}
	dir := t.TempDir()
	e := &env{dir: dir, dbPath: filepath.Join(dir, "catalog.db"), tmp: filepath.Join(dir, "tmp"), master: mk, logs: &syncBuffer{}}
	if err := os.Mkdir(e.tmp, 0o700); err != nil {
		t.Fatal(err)
	}
	e.blobs, err = localfs.New(filepath.Join(dir, "blobs"))
	if err != nil {
		t.Fatal(err)
	}
	e.open(t, mod)
	t.Cleanup(func() {
		if e.s != nil {
			e.s.Close()
		}
	})
	return e
}

func (e *env) options(mod func(*Options)) Options {
	opt := Options{
		Master:  e.master,
		TempDir: e.tmp,
		Logger:  slog.New(slog.NewTextHandler(e.logs, &slog.HandlerOptions{Level: slog.LevelDebug})),
		Now:     func() time.Time { return testNow },
	}
	if mod != nil {
		mod(&opt)
	}
	return opt
}

// open (re)opens the store of e.
func (e *env) open(t testing.TB, mod func(*Options)) {
	t.Helper()
	if e.s != nil {
		if err := e.s.Close(); err != nil {
			t.Fatal(err)
		}
		e.s = nil
	}
	s, err := Open(e.dbPath, e.blobs, e.options(mod))
	if err != nil {
		t.Fatal(err)
	}
	e.s = s
}

// dataset creates project p (if new) and dataset d in it.
func (e *env) dataset(t testing.TB, p, d string, mod func(*DatasetSpec)) *Dataset {
	t.Helper()
	ctx := context.Background()
	if _, err := e.s.Project(ctx, p); err != nil {
		if _, err := e.s.CreateProject(ctx, p, "", "curator"); err != nil {
			t.Fatal(err)
		}
	}
	spec := DatasetSpec{Project: p, Name: d}
	if mod != nil {
		mod(&spec)
	}
	ds, err := e.s.CreateDataset(ctx, spec, "curator")
	if err != nil {
		t.Fatal(err)
	}
	return ds
}

func (e *env) ingest(t testing.TB, p, d string, data []byte, name string) *IngestResult {
	t.Helper()
	res, err := e.s.Ingest(context.Background(), p, d, bytes.NewReader(data), IngestOptions{Filename: name, By: "site-uploader"})
	if err != nil {
		t.Fatalf("ingest %s into %s/%s: %v", name, p, d, err)
	}
	return res
}

// blobIDs lists the blob store.
// blobIDs lists the stored snapshot (event) files; case tables, which
// every version adds, are told apart by their Parquet metadata and listed
// by caseTableIDs.
func (e *env) blobIDs(t testing.TB) []blob.ID {
	t.Helper()
	ids, _ := e.splitBlobs(t)
	return ids
}

func (e *env) splitBlobs(t testing.TB) (events, tables []blob.ID) {
	t.Helper()
	groups := e.groupBlobs(t)
	err := e.blobs.List(context.Background(), func(i blob.Info) error {
		if _, made := madeGroupBlobs.Load(i.ID); made || groups[i.ID] {
			return nil // derived: the case groups of a dataset's latest version
		}
		b := e.blobBytes(t, i.ID)
		f, err := parquet.OpenFile(bytes.NewReader(b), int64(len(b)))
		if err != nil { // not Parquet: a test's own bytes
			events = append(events, i.ID)
			return nil
		}
		if v, _ := f.Lookup("flowcat.table"); v == "cases" {
			tables = append(tables, i.ID)
		} else {
			events = append(events, i.ID)
		}
		return nil
	})
	if err != nil {
		t.Fatal(err)
	}
	return events, tables
}

// madeGroupBlobs are the blobs of every case group stored by the tests of
// this process: derived data, referenced or left for the collector, which
// splitBlobs leaves out.
var madeGroupBlobs sync.Map

func init() { testHookGroupBlob = func(id blob.ID) { madeGroupBlobs.Store(id, true) } }

// groupBlobs returns the blobs of the stored case groups.
func (e *env) groupBlobs(t testing.TB) map[blob.ID]bool {
	t.Helper()
	refs := map[blob.ID]bool{}
	if e.s == nil {
		return refs
	}
	err := e.s.db.View(func(tx *bolt.Tx) error { return groupBlobs(tx, nil, refs) })
	if err != nil {
		t.Fatal(err)
	}
	return refs
}

// blobBytes returns the stored bytes of id and checks they hash to it.
func (e *env) blobBytes(t testing.TB, id blob.ID) []byte {
	t.Helper()
	r, err := e.blobs.Open(context.Background(), id)
	if err != nil {
		t.Fatal(err)
	}
	defer r.Close()
	b, err := io.ReadAll(r)
	if err != nil {
		t.Fatal(err)
	}
	if sha256.Sum256(b) != id {
		t.Fatalf("blob %s does not hash to its id", id)
	}
	return b
}

// events reads a snapshot file back.
func readEvents(t testing.TB, data []byte) []schema.Event {
	t.Helper()
	var out []schema.Event
	err := ReadSnapshot(bytes.NewReader(data), int64(len(data)), func(e *schema.Event) error {
		out = append(out, *e)
		return nil
	})
	if err != nil {
		t.Fatal(err)
	}
	return out
}

// assertTempEmpty fails when any file is left in the store's temp dir or
// in the blob store's own temp dir.
func (e *env) assertTempEmpty(t testing.TB) {
	t.Helper()
	for _, d := range []string{e.tmp, filepath.Join(e.dir, "blobs", "tmp")} {
		ents, err := os.ReadDir(d)
		if err != nil {
			t.Fatal(err)
		}
		for _, ent := range ents {
			t.Errorf("left in %s: %s", d, ent.Name())
		}
	}
}

// grepDir returns the files under dir whose bytes contain any of needles.
func grepDir(t testing.TB, dir string, needles []string) []string {
	t.Helper()
	var hits []string
	err := filepath.WalkDir(dir, func(p string, d fs.DirEntry, err error) error {
		if err != nil || d.IsDir() {
			return err
		}
		b, err := os.ReadFile(p)
		if err != nil {
			return err
		}
		for _, n := range needles {
			if holdsNeedle(b, n) {
				hits = append(hits, fmt.Sprintf("%s holds %q", p, n))
			}
		}
		return nil
	})
	if err != nil {
		t.Fatal(err)
	}
	return hits
}

// holdsNeedle reports whether b holds n anywhere but inside a run of 32
// or more hex digits: a SHA-256 or HMAC in hex (snapshot ids, blob ids)
// holds any five-digit number now and then by chance (about one upload
// in 300 of TestEventAttributes had "10117" inside a snapshot id), and a
// raw value is never written as part of one.
func holdsNeedle(b []byte, n string) bool {
	isHex := func(c byte) bool { return c >= '0' && c <= '9' || c >= 'a' && c <= 'f' || c >= 'A' && c <= 'F' }
	for from := 0; ; {
		i := bytes.Index(b[from:], []byte(n))
		if i < 0 {
			return false
		}
		i += from
		lo, hi := i, i+len(n)
		for lo > 0 && isHex(b[lo-1]) {
			lo--
		}
		for hi < len(b) && isHex(b[hi]) {
			hi++
		}
		if hi-lo < 32 || !isHexRun(b[i:i+len(n)], isHex) {
			return true
		}
		from = i + 1
	}
}

func isHexRun(b []byte, isHex func(byte) bool) bool {
	for _, c := range b {
		if !isHex(c) {
			return false
		}
	}
	return true
}

// row is one source row in schema field order.
type row [12]string

var header = row{"site", "case_id", "subject_id", "resource_id", "event_type", "activity", "queue", "occurred_at", "priority", "channel", "outcome", "event_id"}

// genOpt shapes a generated file.
type genOpt struct {
	Seed     uint64
	N        int
	CasePfx  string // raw case ids are CasePfx + number
	Cases    int    // distinct cases; default N/4+1
	Invalid  int    // every Invalid-th row (1-based) gets an unknown event type; 0 = none
	Shuffle  bool   // rows in random order rather than time order
	Coarse   bool   // times on whole minutes only, so many rows tie
	Header   row    // default header
	DropCols []int  // columns to leave out of header and rows
}

var genTypes = []string{"arrival", "enqueue", "start", "complete", "departure", "abandon", "transfer"}

// genRows returns deterministic rows. Times spread over about a week from
// genBase, with sub-microsecond digits so truncation is exercised.
func genRows(o genOpt) []row {
	r := rand.New(rand.NewPCG(o.Seed, 0x5eed))
	cases := o.Cases
	if cases == 0 {
		cases = o.N/4 + 1
	}
	if o.CasePfx == "" {
		o.CasePfx = "C-"
	}
	rows := make([]row, o.N)
	for i := range rows {
		c := r.IntN(cases)
		at := genBase.Add(time.Duration(r.Int64N(int64(7 * 24 * time.Hour))))
		if o.Coarse {
			at = genBase.Add(time.Duration(r.IntN(o.N/3+1)) * time.Minute)
		}
		typ := genTypes[r.IntN(len(genTypes))]
		if o.Invalid > 0 && (i+1)%o.Invalid == 0 {
			typ = "teleport"
		}
		sub := ""
		if r.IntN(5) > 0 {
			sub = fmt.Sprintf("P-%d", c%97)
		}
		rows[i] = row{
			[]string{"north", "south", "east"}[c%3],
			fmt.Sprintf("%s%d", o.CasePfx, c),
			sub,
			fmt.Sprintf("R-%d", r.IntN(12)),
			typ,
			[]string{"triage", "consult", ""}[r.IntN(3)],
			[]string{"q1", "q2"}[r.IntN(2)],
			at.Format(time.RFC3339Nano),
			fmt.Sprint(1 + r.IntN(5)),
			[]string{"phone", "walk-in", ""}[r.IntN(3)],
			"",
			fmt.Sprintf("ev-%d", i),
		}
	}
	if !o.Shuffle {
		// Time order, ties by generation order.
		sortRowsByTime(rows)
	}
	return rows
}

func sortRowsByTime(rows []row) {
	type kv struct {
		t time.Time
		i int
		r row
	}
	ks := make([]kv, len(rows))
	for i, r := range rows {
		t, _ := time.Parse(time.RFC3339Nano, r[7])
		ks[i] = kv{t, i, r}
	}
	slices.SortFunc(ks, func(a, b kv) int {
		if c := a.t.Compare(b.t); c != 0 {
			return c
		}
		return a.i - b.i
	})
	for i := range ks {
		rows[i] = ks[i].r
	}
}

// csvBytes writes header and rows as CSV, leaving out drop columns.
func csvBytes(h row, rows []row, drop ...int) []byte {
	var buf bytes.Buffer
	w := csv.NewWriter(&buf)
	keep := func(r row) []string {
		var out []string
		for i, v := range r {
			if !containsInt(drop, i) {
				out = append(out, v)
			}
		}
		return out
	}
	w.Write(keep(h))
	for _, r := range rows {
		w.Write(keep(r))
	}
	w.Flush()
	return buf.Bytes()
}

func genCSV(o genOpt) []byte {
	h := o.Header
	if h == (row{}) {
		h = header
	}
	return csvBytes(h, genRows(o), o.DropCols...)
}

func containsInt(s []int, v int) bool {
	for _, x := range s {
		if x == v {
			return true
		}
	}
	return false
}

func gzipBytes(b []byte) []byte {
	var buf bytes.Buffer
	zw := gzip.NewWriter(&buf)
	zw.Write(b)
	zw.Close()
	return buf.Bytes()
}

// mustContainNone fails when s holds any of needles.
func mustContainNone(t testing.TB, what, s string, needles []string) {
	t.Helper()
	for _, n := range needles {
		if holdsNeedle([]byte(s), n) {
			t.Errorf("%s holds raw identifier %q", what, n)
		}
	}
}

// report returns v's stored quality report.
func (e *env) report(t testing.TB, v *Version) *quality.Report {
	t.Helper()
	r, err := e.s.Report(context.Background(), v)
	if err != nil {
		t.Fatal(err)
	}
	return r
}

func TestHoldsNeedle(t *testing.T) {
	digest := "de9a275d39518a79793a650572a53ac09f2085685382dd770961011759dd0527"
	for _, c := range []struct {
		b    string
		want bool
	}{
		{`{"zip":"10117"}`, true},
		{`,10117,`, true},
		{digest, false},
		{`"snapshot_id":"` + digest + `"`, false},
		{digest + ` zip 10117`, true},
		{`10117` + digest[:20], true}, // a hex run under 32 digits is not a digest
		{`02139-4307`, true},
	} {
		n := "10117"
		if strings.Contains(c.b, "02139") {
			n = "02139-4307"
		}
		if got := holdsNeedle([]byte(c.b), n); got != c.want {
			t.Errorf("holdsNeedle(%q, %q) = %v, want %v", c.b, n, got, c.want)
		}
	}
}
