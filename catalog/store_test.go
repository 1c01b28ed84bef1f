package catalog

import (
	"context"
	"errors"
	"math"
	"strings"
	"testing"
	"time"

	"github.com/flowcat-catalog/flowcat/anonymize"
)

func TestValidName(t *testing.T) {
	cases := []struct {
		name string
		ok   bool
	}{
		{"a", true},
		{"0", true},
		{"er-visits", true},
		{"site_2.v1", true},
		{strings.Repeat("a", 63), true},
		{strings.Repeat("a", 64), false},
		{"", false},
		{"-lead", false},
		{".hidden", false},
		{"_x", false},
		{"Upper", false},
		{"with space", false},
		{"a/b", false},
		{"..", false},
		{"ümlaut", false},
		{"a\n", false},
	}
	for _, c := range cases {
		err := ValidName("project", c.name)
		if (err == nil) != c.ok {
			t.Errorf("ValidName(%q) = %v, want ok=%v", c.name, err, c.ok)
		}
		if err != nil && !errors.Is(err, ErrInvalid) {
			t.Errorf("ValidName(%q) = %v, want ErrInvalid", c.name, err)
		}
	}
}

func TestProjectsAndDatasets(t *testing.T) {
	e := newEnv(t, nil)
	ctx := context.Background()
	s := e.s

	if _, err := s.Project(ctx, "er"); !errors.Is(err, ErrNotFound) {
		t.Errorf("missing project: %v", err)
	}
	p, err := s.CreateProject(ctx, "er", "Emergency", "alice")
	if err != nil {
		t.Fatal(err)
	}
	if p.Name != "er" || p.Title != "Emergency" || p.CreatedBy != "alice" || !p.CreatedAt.Equal(testNow) {
		t.Errorf("project = %+v", p)
	}
	if _, err := s.CreateProject(ctx, "er", "", "bob"); !errors.Is(err, ErrExists) {
		t.Errorf("duplicate project: %v", err)
	}
	if _, err := s.CreateProject(ctx, "Bad Name", "", "bob"); !errors.Is(err, ErrInvalid) {
		t.Errorf("bad project name: %v", err)
	}
	if _, err := s.CreateProject(ctx, "calls", "", "bob"); err != nil {
		t.Fatal(err)
	}
	ps, err := s.Projects(ctx)
	if err != nil {
		t.Fatal(err)
	}
	if len(ps) != 2 || ps[0].Name != "calls" || ps[1].Name != "er" {
		t.Errorf("projects = %+v", ps)
	}

	for _, n := range []string{"visits", "triage", "visits2"} {
		if _, err := s.CreateDataset(ctx, DatasetSpec{Project: "er", Name: n}, "alice"); err != nil {
			t.Fatal(err)
		}
	}
	// A dataset of the same name in another project is another dataset.
	if _, err := s.CreateDataset(ctx, DatasetSpec{Project: "calls", Name: "visits"}, "alice"); err != nil {
		t.Fatal(err)
	}
	if _, err := s.CreateDataset(ctx, DatasetSpec{Project: "er", Name: "visits"}, "alice"); !errors.Is(err, ErrExists) {
		t.Errorf("duplicate dataset: %v", err)
	}
	if _, err := s.CreateDataset(ctx, DatasetSpec{Project: "nope", Name: "visits"}, "alice"); !errors.Is(err, ErrNotFound) {
		t.Errorf("dataset in missing project: %v", err)
	}
	ds, err := s.Datasets(ctx, "er")
	if err != nil {
		t.Fatal(err)
	}
	var names []string
	for _, d := range ds {
		names = append(names, d.Name)
	}
	if strings.Join(names, ",") != "triage,visits,visits2" {
		t.Errorf("datasets of er = %v", names)
	}
	if _, err := s.Datasets(ctx, "nope"); !errors.Is(err, ErrNotFound) {
		t.Errorf("datasets of missing project: %v", err)
	}
	d, err := s.Dataset(ctx, "er", "visits")
	if err != nil {
		t.Fatal(err)
	}
	if d.RejectAbove != DefaultRejectAbove || d.Timezone != "UTC" || d.Latest != 0 || d.ProfileHash == "" || d.Ref().String() != "er/visits" {
		t.Errorf("dataset = %+v", d)
	}
	if _, err := s.Dataset(ctx, "er", "nope"); !errors.Is(err, ErrNotFound) {
		t.Errorf("missing dataset: %v", err)
	}
	if _, err := s.Version(ctx, "er", "visits", 0); !errors.Is(err, ErrNotFound) {
		t.Errorf("latest of a dataset without versions: %v", err)
	}
	if _, err := s.Version(ctx, "er", "visits", 1); !errors.Is(err, ErrNotFound) {
		t.Errorf("version 1 of a dataset without versions: %v", err)
	}
	if _, err := s.Version(ctx, "er", "nope", 0); !errors.Is(err, ErrNotFound) {
		t.Errorf("latest of a missing dataset: %v", err)
	}
	if _, err := s.Versions(ctx, "er", "nope"); !errors.Is(err, ErrNotFound) {
		t.Errorf("versions of a missing dataset: %v", err)
	}
	if _, err := s.Uploads(ctx, "er", "nope"); !errors.Is(err, ErrNotFound) {
		t.Errorf("uploads of a missing dataset: %v", err)
	}
	if _, err := s.Ingest(ctx, "er", "nope", strings.NewReader(""), IngestOptions{}); !errors.Is(err, ErrNotFound) {
		t.Errorf("ingest into a missing dataset: %v", err)
	}

	// Everything survives a reopen.
	e.open(t, nil)
	if ps, err := e.s.Projects(ctx); err != nil || len(ps) != 2 {
		t.Errorf("after reopen: %v, %v", ps, err)
	}
	au, err := e.s.Audit(ctx)
	if err != nil {
		t.Fatal(err)
	}
	if len(au) != 2+4 || au[0].Action != "project.create" || au[0].Target != "er" || au[0].By != "alice" {
		t.Errorf("audit = %+v", au)
	}
}

func TestCreateDatasetInvalid(t *testing.T) {
	e := newEnv(t, nil)
	ctx := context.Background()
	if _, err := e.s.CreateProject(ctx, "p", "", "alice"); err != nil {
		t.Fatal(err)
	}
	f := func(v float64) *float64 { return &v }
	t1 := time.Date(2026, 1, 1, 0, 0, 0, 0, time.UTC)
	t2 := t1.Add(time.Hour)
	cases := []struct {
		name string
		spec DatasetSpec
	}{
		{"bad name", DatasetSpec{Name: "A B"}},
		{"profile syntax", DatasetSpec{Name: "d", Profile: []byte("fields: [unclosed")}},
		{"profile unknown key", DatasetSpec{Name: "d", Profile: []byte("format: csv\nbogus: 1\n")}},
		{"profile unknown zone", DatasetSpec{Name: "d", Profile: []byte("timezone: Mars/Olympus\n")}},
		{"zone override", DatasetSpec{Name: "d", Timezone: "Not/AZone"}},
		{"reject above 1.5", DatasetSpec{Name: "d", RejectAbove: f(1.5)}},
		{"reject above negative", DatasetSpec{Name: "d", RejectAbove: f(-0.01)}},
		{"reject above NaN", DatasetSpec{Name: "d", RejectAbove: f(math.NaN())}},
		{"window from after to", DatasetSpec{Name: "d", WindowFrom: &t2, WindowTo: &t1}},
		{"window empty", DatasetSpec{Name: "d", WindowFrom: &t1, WindowTo: &t1}},
	}
	for _, c := range cases {
		c.spec.Project = "p"
		_, err := e.s.CreateDataset(ctx, c.spec, "alice")
		if !errors.Is(err, ErrInvalid) {
			t.Errorf("%s: err = %v, want ErrInvalid", c.name, err)
		}
	}
	if ds, err := e.s.Datasets(ctx, "p"); err != nil || len(ds) != 0 {
		t.Errorf("invalid specs stored datasets: %v %v", ds, err)
	}
	// The bounds themselves are valid, and so is a zone override.
	for i, r := range []float64{0, 1} {
		_, err := e.s.CreateDataset(ctx, DatasetSpec{Project: "p", Name: []string{"zero", "one"}[i], RejectAbove: f(r),
			Timezone: "Europe/Amsterdam", WindowFrom: &t1, WindowTo: &t2}, "alice")
		if err != nil {
			t.Errorf("reject above %v: %v", r, err)
		}
	}
	d, err := e.s.Dataset(ctx, "p", "one")
	if err != nil {
		t.Fatal(err)
	}
	if d.Timezone != "Europe/Amsterdam" || d.RejectAbove != 1 || !d.WindowFrom.Equal(t1) || !d.WindowTo.Equal(t2) {
		t.Errorf("dataset = %+v", d)
	}
}

func TestOpenKeyMismatch(t *testing.T) {
	e := newEnv(t, nil)
	if err := e.s.Close(); err != nil {
		t.Fatal(err)
	}
	e.s = nil
	other, err := anonymize.GenerateMasterKey()
	if err != nil {
		t.Fatal(err)
	}
	s, err := Open(e.dbPath, e.blobs, e.options(func(o *Options) { o.Master = other }))
	if !errors.Is(err, anonymize.ErrKeyMismatch) {
		if s != nil {
			s.Close()
		}
		t.Fatalf("open with another key: %v", err)
	}
	if strings.Contains(err.Error(), other.Hex()) || strings.Contains(err.Error(), e.master.Hex()) {
		t.Error("the error shows key material")
	}
	if _, err := Open(e.dbPath, e.blobs, e.options(func(o *Options) { o.Master = anonymize.MasterKey{} })); err == nil {
		t.Error("open without a master key succeeded")
	}
	// The right key still opens it: the failed open released the file.
	e.open(t, nil)
}

// TestOpenLocked relies on bbolt's flock(2) lock, which belongs to an open
// file description: a second Open in the same process opens the file again
// and so conflicts like another process would.
func TestOpenLocked(t *testing.T) {
	e := newEnv(t, nil)
	s, err := Open(e.dbPath, e.blobs, e.options(nil))
	if err == nil {
		s.Close()
		t.Fatal("second open of a held catalog succeeded")
	}
	if !errors.Is(err, ErrLocked) {
		t.Fatalf("second open: %v, want ErrLocked", err)
	}
	e.s.Close()
	e.s = nil
	s, err = Open(e.dbPath, e.blobs, e.options(nil))
	if err != nil {
		t.Fatalf("open after close: %v", err)
	}
	e.s = s
}
