package export

import (
	"bytes"
	"context"
	"encoding/csv"
	"fmt"
	"io"
	"log/slog"
	"math/rand/v2"
	"os"
	"path/filepath"
	"slices"
	"testing"
	"time"

	"github.com/flowcat-catalog/flowcat/anonymize"
	"github.com/flowcat-catalog/flowcat/catalog"
	"github.com/flowcat-catalog/flowcat/catalog/blob/localfs"
	"github.com/flowcat-catalog/flowcat/schema"
)

var (
	testNow = time.Date(2026, 6, 1, 12, 0, 0, 0, time.UTC)
	genBase = time.Date(2026, 3, 2, 0, 0, 0, 0, time.UTC)
)

// env is a real catalog on disk: bbolt file and localfs blobs in a temp dir.
type env struct {
	s     *catalog.Store
	blobs *localfs.Store
	tmp   string // the store's temp dir
}

func newEnv(t testing.TB, rowGroupRows int64) *env {
	t.Helper()
	mk, err := anonymize.GenerateMasterKey()
	if err != nil {
		t.Fatal(err)
	}
	dir := t.TempDir()
	tmp := filepath.Join(dir, "tmp")
	if err := os.Mkdir(tmp, 0o700); err != nil {
		t.Fatal(err)
	}
	blobs, err := localfs.New(filepath.Join(dir, "blobs"))
	if err != nil {
		t.Fatal(err)
	}
	s, err := catalog.Open(filepath.Join(dir, "catalog.db"), blobs, catalog.Options{
		Master: mk, TempDir: tmp, RowGroupRows: rowGroupRows,
		Logger: slog.New(slog.NewTextHandler(io.Discard, nil)),
		Now:    func() time.Time { return testNow },
	})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { s.Close() })
	return &env{s: s, blobs: blobs, tmp: tmp}
}

// opener returns the store's blob opener.
func (e *env) opener() Opener { return e.s.Blobs().Open }

func (e *env) dataset(t testing.TB, p, d string) {
	t.Helper()
	ctx := context.Background()
	if _, err := e.s.Project(ctx, p); err != nil {
		if _, err := e.s.CreateProject(ctx, p, "", "curator"); err != nil {
			t.Fatal(err)
		}
	}
	if _, err := e.s.CreateDataset(ctx, catalog.DatasetSpec{Project: p, Name: d, Title: "Visits of " + d}, "curator"); err != nil {
		t.Fatal(err)
	}
}

func (e *env) ingest(t testing.TB, p, d string, data []byte, name string) *catalog.Version {
	t.Helper()
	res, err := e.s.Ingest(context.Background(), p, d, bytes.NewReader(data), catalog.IngestOptions{Filename: name, By: "site-uploader"})
	if err != nil {
		t.Fatalf("ingest %s: %v", name, err)
	}
	return res.Version
}

var header = []string{"site", "case_id", "subject_id", "resource_id", "event_type", "activity", "queue", "occurred_at", "priority", "channel", "outcome", "event_id"}

var genTypes = []string{"arrival", "enqueue", "start", "complete", "departure", "abandon", "transfer"}

// genRows returns n deterministic rows in schema field order. Times fall on
// whole minutes of a few days from genBase plus day, so many rows tie; a
// few activities hold commas, quotes and line breaks.
func genRows(seed uint64, n, day int) [][]string {
	r := rand.New(rand.NewPCG(seed, 0x5eed))
	rows := make([][]string, n)
	for i := range rows {
		c := r.IntN(n/4 + 1)
		at := genBase.AddDate(0, 0, day).Add(time.Duration(r.IntN(n/3+1)) * time.Minute)
		sub := ""
		if r.IntN(5) > 0 {
			sub = fmt.Sprintf("P-%d", c%97)
		}
		rows[i] = []string{
			[]string{"north", "south", "east"}[c%3],
			fmt.Sprintf("C-%d-%d", seed, c),
			sub,
			fmt.Sprintf("R-%d", r.IntN(12)),
			genTypes[r.IntN(len(genTypes))],
			[]string{"triage", "consult", "", "x-ray, chest", "say \"ah\"", "line\nbreak"}[r.IntN(6)],
			[]string{"q1", "q2", ""}[r.IntN(3)],
			at.Format(time.RFC3339Nano),
			fmt.Sprint(1 + r.IntN(5)),
			[]string{"phone", "walk-in", ""}[r.IntN(3)],
			"",
			fmt.Sprintf("ev-%d", r.IntN(n/2+1)), // repeats, so equal rows can occur across files
		}
	}
	return rows
}

func csvBytes(rows [][]string) []byte {
	var buf bytes.Buffer
	w := csv.NewWriter(&buf)
	w.Write(header)
	w.WriteAll(rows)
	return buf.Bytes()
}

// allEvents reads every file of v with the catalog's own reader.
func (e *env) allEvents(t testing.TB, files []catalog.FileEntry) []schema.Event {
	t.Helper()
	var out []schema.Event
	for _, f := range files {
		r, err := e.s.Blobs().Open(context.Background(), f.SHA256)
		if err != nil {
			t.Fatal(err)
		}
		err = catalog.ReadSnapshot(r, r.Size(), func(ev *schema.Event) error {
			var c schema.Event
			cloneEvent(&c, ev)
			out = append(out, c)
			return nil
		})
		r.Close()
		if err != nil {
			t.Fatal(err)
		}
	}
	return out
}

// sorted returns evs filtered by f and sorted by Compare, done in Go.
func sorted(evs []schema.Event, f Filter) []schema.Event {
	m := f.compile()
	var out []schema.Event
	for i := range evs {
		if m.match(&evs[i]) {
			out = append(out, evs[i])
		}
	}
	slices.SortFunc(out, func(a, b schema.Event) int { return Compare(&a, &b) })
	return out
}

func collect(t testing.TB, e *env, files []catalog.FileEntry, f Filter) ([]schema.Event, Stats) {
	t.Helper()
	var out []schema.Event
	st, err := Events(context.Background(), Source{Open: e.opener(), TempDir: e.tmp}, files, f, func(ev *schema.Event) error {
		out = append(out, *ev)
		return nil
	})
	if err != nil {
		t.Fatal(err)
	}
	return out, st
}

// fixture is a dataset "er/visits" of three uploads on three days.
func fixture(t testing.TB, rowGroupRows int64) (*env, []*catalog.Version) {
	t.Helper()
	e := newEnv(t, rowGroupRows)
	e.dataset(t, "er", "visits")
	var vs []*catalog.Version
	for i := range 3 {
		vs = append(vs, e.ingest(t, "er", "visits", csvBytes(genRows(uint64(i+1), 900, i)), fmt.Sprintf("night-%d.csv", i+1)))
	}
	return e, vs
}
