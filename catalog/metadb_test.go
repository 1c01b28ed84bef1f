package catalog

import (
	"context"
	"sync"
	"sync/atomic"
	"testing"
	"time"
)

// TestReadMemoFollowsWrites: the answers kept for the reads every request
// repeats (a token's standing, the version latest names, a numbered
// version with its manifest) change the moment a write that changes them
// returns: revocation, publication, retraction.
func TestReadMemoFollowsWrites(t *testing.T) {
	e := newEnv(t, nil)
	ctx := context.Background()
	e.dataset(t, "lab", "flow", func(s *DatasetSpec) { s.Drafts = true })

	now := time.Now().UTC()
	if err := e.s.RecordToken(ctx, "admin", TokenRecord{JTI: "tok-1", Subject: "student", Role: "member", Project: "lab", IssuedAt: now, ExpiresAt: now.Add(time.Hour)}); err != nil {
		t.Fatal(err)
	}
	standing := func() (bool, bool) {
		t.Helper()
		rec, rev, err := e.s.TokenStanding("tok-1")
		if err != nil {
			t.Fatal(err)
		}
		return rec, rev
	}
	for range 3 {
		if rec, rev := standing(); !rec || rev {
			t.Fatalf("before revocation: recorded %v revoked %v", rec, rev)
		}
	}
	if _, err := e.s.RevokeToken(ctx, "admin", "tok-1", "left the lab"); err != nil {
		t.Fatal(err)
	}
	if rec, rev := standing(); !rec || !rev {
		t.Fatalf("after revocation: recorded %v revoked %v", rec, rev)
	}

	latest := func() int {
		t.Helper()
		v, err := e.s.ResolveVersion(ctx, "lab", "flow", Selector{Kind: SelectLatest}, false)
		if err != nil {
			t.Fatal(err)
		}
		return v.Number
	}
	v1 := e.ingest(t, "lab", "flow", genCSV(genOpt{Seed: 3, N: 120}), "a.csv").Version
	if _, err := e.s.Publish(ctx, "lab", "flow", v1.Number, "curator"); err != nil {
		t.Fatal(err)
	}
	if n := latest(); n != v1.Number {
		t.Fatalf("latest %d, want %d", n, v1.Number)
	}
	one, err := e.s.Version(ctx, "lab", "flow", v1.Number)
	if err != nil {
		t.Fatal(err)
	}
	v2 := e.ingest(t, "lab", "flow", genCSV(genOpt{Seed: 4, N: 150}), "b.csv").Version
	if n := latest(); n != v1.Number { // v2 is a draft
		t.Fatalf("latest with a draft: %d, want %d", n, v1.Number)
	}
	if _, err := e.s.Publish(ctx, "lab", "flow", v2.Number, "curator"); err != nil {
		t.Fatal(err)
	}
	if n := latest(); n != v2.Number {
		t.Fatalf("latest after publishing %d: %d", v2.Number, n)
	}
	if _, err := e.s.Retract(ctx, "lab", "flow", v1.Number, "wrong site", "curator"); err != nil {
		t.Fatal(err)
	}
	again, err := e.s.Version(ctx, "lab", "flow", v1.Number)
	if err != nil {
		t.Fatal(err)
	}
	if one.State != StatePublished || again.State != StateRetracted || again.RetractReason != "wrong site" {
		t.Fatalf("version %d: %s before retraction, %s %q after", v1.Number, one.State, again.State, again.RetractReason)
	}
	if _, err := e.s.Retract(ctx, "lab", "flow", v2.Number, "wrong site", "curator"); err != nil {
		t.Fatal(err)
	}
	if v, err := e.s.ResolveVersion(ctx, "lab", "flow", Selector{Kind: SelectLatest}, false); err == nil {
		t.Fatalf("latest after every version was retracted: %d", v.Number)
	}
}

// TestReadMemoHandsOutCopies: a caller that changes the version it was
// given, or its manifest, changes nothing the next caller gets.
func TestReadMemoHandsOutCopies(t *testing.T) {
	e := newEnv(t, nil)
	ctx := context.Background()
	e.dataset(t, "lab", "flow", nil)
	v := e.ingest(t, "lab", "flow", genCSV(genOpt{Seed: 5, N: 80}), "a.csv").Version
	read := func() *Version {
		t.Helper()
		x, err := e.s.Version(ctx, "lab", "flow", v.Number)
		if err != nil {
			t.Fatal(err)
		}
		return x
	}
	first := read()
	rows, file := first.Manifest.Files[0].Rows, first.Manifest.Files[0].SHA256
	kept := read() // from the memory
	kept.Manifest.Files[0].Rows = -1
	kept.Manifest.Files = kept.Manifest.Files[:0]
	kept.State = StateRetracted
	got := read()
	if len(got.Manifest.Files) == 0 || got.Manifest.Files[0].Rows != rows || got.Manifest.Files[0].SHA256 != file ||
		got.State != first.State {
		t.Fatalf("a caller's change reached the memory: %+v", got)
	}
	h, err := e.s.ResolveVersion(ctx, "lab", "flow", Selector{Kind: SelectNumber, Number: v.Number}, true)
	if err != nil {
		t.Fatal(err)
	}
	h.Number = 99
	if h2, err := e.s.ResolveVersion(ctx, "lab", "flow", Selector{Kind: SelectNumber, Number: v.Number}, true); err != nil || h2.Number != v.Number {
		t.Fatalf("a caller's change reached the memory: %v %v", h2, err)
	}
}

// TestVersionWithManifestCloneIsDeep: the copy a numbered version is kept
// and handed out as shares nothing, its manifest included.
func TestVersionWithManifestCloneIsDeep(t *testing.T) {
	cloneIsDeep(t, "Version with manifest", func(v Version) Version { return *v.withManifestClone() })
}

// TestReadMemoUnderWrites: readers ask for latest without pause while
// versions are published one after another; once Publish has returned,
// no reader that starts after it is answered with an older version.
// Run with -race in CI's race pass.
func TestReadMemoUnderWrites(t *testing.T) {
	e := newEnv(t, nil)
	ctx := context.Background()
	e.dataset(t, "lab", "flow", func(s *DatasetSpec) { s.Drafts = true })
	const n = 4
	var nums []int
	for i := range n {
		nums = append(nums, e.ingest(t, "lab", "flow", genCSV(genOpt{Seed: uint64(10 + i), N: 60}), "x.csv").Version.Number)
	}
	var published atomic.Int64 // the newest number whose Publish returned
	var stop atomic.Bool
	var wg sync.WaitGroup
	errs := make(chan string, 16)
	for range 4 {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for !stop.Load() {
				floor := published.Load()
				v, err := e.s.ResolveVersion(ctx, "lab", "flow", Selector{Kind: SelectLatest}, false)
				switch {
				case err != nil && floor > 0:
					errs <- "after a publication: " + err.Error()
					return
				case err == nil && int64(v.Number) < floor:
					errs <- "latest older than a returned publication"
					return
				}
			}
		}()
	}
	for _, num := range nums {
		time.Sleep(5 * time.Millisecond)
		if _, err := e.s.Publish(ctx, "lab", "flow", num, "curator"); err != nil {
			t.Fatal(err)
		}
		published.Store(int64(num))
	}
	time.Sleep(5 * time.Millisecond)
	stop.Store(true)
	wg.Wait()
	close(errs)
	for msg := range errs {
		t.Error(msg)
	}
}

// TestReadMemoKeepsOnlyTheNewest: an answer read before a write is never
// handed out after it, whatever order the reads end in; the memory holds
// at most max answers.
func TestReadMemoKeepsOnlyTheNewest(t *testing.T) {
	r := &readMemo[string, int]{max: 2}
	r.put(5, "a", 1)
	if v, ok := r.get(5, "a"); !ok || v != 1 {
		t.Fatalf("get at 5: %d %v", v, ok)
	}
	if _, ok := r.get(6, "a"); ok {
		t.Fatal("an answer read at 5 handed out at 6")
	}
	r.put(6, "b", 2)
	r.put(5, "a", 1) // a read begun before the write, ending after it
	if _, ok := r.get(6, "a"); ok {
		t.Fatal("a late answer of count 5 kept at 6")
	}
	r.put(6, "c", 3)
	r.put(6, "d", 4) // over max: starts again
	if _, ok := r.get(6, "b"); ok {
		t.Fatal("more than max answers kept")
	}
	if v, ok := r.get(6, "d"); !ok || v != 4 {
		t.Fatalf("the newest answer: %d %v", v, ok)
	}
}
