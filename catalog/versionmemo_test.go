package catalog

import (
	"context"
	"encoding/json"
	"reflect"
	"testing"
	"time"

	"github.com/flowcat-catalog/flowcat/catalog/blob"
)

// TestVersionMemoFollowsTheStore reads a version record, changes it
// (publish, retract) and reads it again: each read answers what is stored
// now, and a caller changing what it got does not change the next answer.
func TestVersionMemoFollowsTheStore(t *testing.T) {
	e := newEnv(t, nil)
	ctx := context.Background()
	e.dataset(t, "lab", "flow", func(s *DatasetSpec) { s.Drafts = true })
	v := e.ingest(t, "lab", "flow", genCSV(genOpt{Seed: 7, N: 100}), "n.csv").Version
	num := Selector{Kind: SelectNumber, Number: v.Number}
	read := func() *Version {
		t.Helper()
		h, err := e.s.ResolveVersion(ctx, "lab", "flow", num, true)
		if err != nil {
			t.Fatal(err)
		}
		return h
	}
	if h := read(); h.State != StateDraft || h.PublishedAt != nil {
		t.Fatalf("before publication: %s %v", h.State, h.PublishedAt)
	}
	if _, err := e.s.Publish(ctx, "lab", "flow", v.Number, "curator"); err != nil {
		t.Fatal(err)
	}
	read()
	h := read() // from the memory
	if h.State != StatePublished || h.PublishedAt == nil {
		t.Fatalf("after publication: %s %v", h.State, h.PublishedAt)
	}
	at := *h.PublishedAt
	// The caller's copy is its own.
	*h.PublishedAt = at.Add(time.Hour)
	h.Scores["added-by-caller"] = nil
	if again := read(); !again.PublishedAt.Equal(at) || reflect.DeepEqual(again.Scores, h.Scores) {
		t.Fatalf("a caller's change reached the memory: published %v, scores %v", again.PublishedAt, again.Scores)
	}
	if _, err := e.s.Retract(ctx, "lab", "flow", v.Number, "test data", "curator"); err != nil {
		t.Fatal(err)
	}
	if h := read(); h.State != StateRetracted || h.RetractReason != "test data" {
		t.Fatalf("after retraction: %s %q", h.State, h.RetractReason)
	}
	latest, err := e.s.ResolveVersion(ctx, "lab", "flow", Selector{Kind: SelectLatest}, true)
	if err == nil {
		t.Fatalf("latest after the only version was retracted: version %d", latest.Number)
	}
}

// TestVersionCloneIsDeep fills every field of a Version, clones it and
// checks that no pointer, map or slice of the copy is shared with the
// original (Manifest excepted: it is not part of the record).
func TestVersionCloneIsDeep(t *testing.T) { cloneIsDeep(t, "Version", Version.clone) }

// cloneIsDeep fills every exported field of a T, clones it and fails
// where the copy differs or shares a pointer, map or slice with it.
func cloneIsDeep[T any](t *testing.T, name string, clone func(T) T) {
	t.Helper()
	var x T
	fill(reflect.ValueOf(&x).Elem())
	c := clone(x)
	if !reflect.DeepEqual(x, c) {
		t.Fatalf("clone differs:\n%+v\n%+v", x, c)
	}
	shared(t, name, reflect.ValueOf(x), reflect.ValueOf(c))
}

// fill sets every exported field reachable from x to a non-zero value.
func fill(x reflect.Value) {
	switch x.Kind() {
	case reflect.Pointer:
		if x.Type() == reflect.TypeFor[*Manifest]() {
			return
		}
		x.Set(reflect.New(x.Type().Elem()))
		fill(x.Elem())
	case reflect.Struct:
		if x.Type() == reflect.TypeFor[time.Time]() {
			x.Set(reflect.ValueOf(time.Date(2026, 1, 2, 3, 4, 5, 0, time.UTC)))
			return
		}
		for i := range x.NumField() {
			if x.Type().Field(i).IsExported() {
				fill(x.Field(i))
			}
		}
	case reflect.Map:
		x.Set(reflect.MakeMap(x.Type()))
		k, e := reflect.New(x.Type().Key()).Elem(), reflect.New(x.Type().Elem()).Elem()
		fill(k)
		fill(e)
		x.SetMapIndex(k, e)
	case reflect.Slice:
		x.Set(reflect.MakeSlice(x.Type(), 1, 1))
		fill(x.Index(0))
	case reflect.Array:
		for i := range x.Len() {
			fill(x.Index(i))
		}
	case reflect.String:
		x.SetString("s")
	case reflect.Int, reflect.Int8, reflect.Int16, reflect.Int32, reflect.Int64:
		x.SetInt(1)
	case reflect.Uint, reflect.Uint8, reflect.Uint16, reflect.Uint32, reflect.Uint64:
		x.SetUint(1)
	case reflect.Float32, reflect.Float64:
		x.SetFloat(0.5)
	case reflect.Bool:
		x.SetBool(true)
	}
}

// shared fails where a and b hold the same pointer, map or slice.
func shared(t *testing.T, path string, a, b reflect.Value) {
	t.Helper()
	switch a.Kind() {
	case reflect.Pointer, reflect.Map, reflect.Slice:
		if a.IsNil() {
			return
		}
		if a.Pointer() == b.Pointer() {
			t.Errorf("%s is shared by the clone", path)
			return
		}
	}
	switch a.Kind() {
	case reflect.Pointer:
		shared(t, path, a.Elem(), b.Elem())
	case reflect.Struct:
		for i := range a.NumField() {
			if a.Type().Field(i).IsExported() {
				shared(t, path+"."+a.Type().Field(i).Name, a.Field(i), b.Field(i))
			}
		}
	case reflect.Map:
		for _, k := range a.MapKeys() {
			shared(t, path+"[key]", a.MapIndex(k), b.MapIndex(k))
		}
	case reflect.Slice:
		for i := range a.Len() {
			shared(t, path+"[i]", a.Index(i), b.Index(i))
		}
	}
}

// TestManifestCloneIsDeep fills every field of a Manifest, clones it and
// checks that no pointer, map or slice of the copy is shared with the
// original.
func TestManifestCloneIsDeep(t *testing.T) { cloneIsDeep(t, "Manifest", Manifest.clone) }

// TestManifestMemoHandsOutCopies reads a version's manifest twice through
// the memory, changes what the first read gave, and reads again: each
// answer equals the manifest decoded afresh from the stored bytes.
func TestManifestMemoHandsOutCopies(t *testing.T) {
	e := newEnv(t, nil)
	ctx := context.Background()
	e.dataset(t, "lab", "flow", nil)
	e.ingest(t, "lab", "flow", genCSV(genOpt{Seed: 3, N: 80}), "a.csv")
	v := e.ingest(t, "lab", "flow", genCSV(genOpt{Seed: 4, N: 80}), "b.csv").Version
	raw, err := e.s.ManifestBytes(ctx, v)
	if err != nil {
		t.Fatal(err)
	}
	var want Manifest
	if err := json.Unmarshal(raw, &want); err != nil {
		t.Fatal(err)
	}
	if len(want.Files) < 2 {
		t.Fatalf("want a manifest of two files, got %d", len(want.Files))
	}
	read := func() *Manifest {
		t.Helper()
		got, err := e.s.Version(ctx, "lab", "flow", v.Number)
		if err != nil {
			t.Fatal(err)
		}
		if !reflect.DeepEqual(*got.Manifest, want) {
			t.Fatalf("manifest read differs from the stored bytes decoded:\n%+v\n%+v", *got.Manifest, want)
		}
		return got.Manifest
	}
	for range 2 { // the first read decodes, the second is from the memory
		m := read()
		m.Files[0].Rows = -1
		m.Files = m.Files[:1]
		m.Uploads[0] = "changed"
		m.Quality.SHA256 = blob.ID{}
	}
	read()
}
