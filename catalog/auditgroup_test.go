package catalog

import (
	"context"
	"fmt"
	"runtime"
	"sync"
	"testing"
)

// TestAuditGroups: entries recorded at once from many goroutines (as
// downloads record theirs) are each stored once, in key order, whatever
// group their commit shared; and when the commit fails every caller gets
// the error, none waits for ever.
func TestAuditGroups(t *testing.T) {
	e := newEnv(t, nil)
	ctx := context.Background()
	const callers, each = 32, 20
	recordAtOnce(t, e, callers, each)
	all, err := e.s.Audit(ctx)
	if err != nil {
		t.Fatal(err)
	}
	seen := map[string]int{}
	for i, a := range all {
		if i > 0 && a.ID <= all[i-1].ID {
			t.Errorf("entry %d out of key order: %s after %s", i, a.ID, all[i-1].ID)
		}
		if a.Action == "version.download" {
			seen[a.Detail]++
		}
	}
	if len(seen) != callers*each {
		t.Errorf("%d distinct entries stored, want %d", len(seen), callers*each)
	}
	for d, n := range seen {
		if n != 1 {
			t.Errorf("%q stored %d times", d, n)
		}
	}

	// A closed catalog: every caller of a group gets the commit's error.
	if err := e.s.Close(); err != nil {
		t.Fatal(err)
	}
	var wg sync.WaitGroup
	failed := make(chan error, callers)
	for range callers {
		wg.Go(func() { failed <- e.s.RecordAudit(ctx, AuditEntry{Action: "version.download"}) })
	}
	wg.Wait()
	close(failed)
	for err := range failed {
		if err == nil {
			t.Error("an entry recorded in a closed catalog reported no error")
		}
	}
}

// TestAuditGroupGathers: callers that are ready to run when a group's
// leader takes the lead join its group (gather) instead of waiting for
// the next sync. On one P, 16 callers released at once make a first group
// of at least 8 (all 16 here); without gathering, the leader commits its
// own entry alone, and so does each next one (16 groups of one).
func TestAuditGroupGathers(t *testing.T) {
	e := newEnv(t, nil)
	var mu sync.Mutex
	var sizes []int
	testHookAuditGroup = func(n int) { mu.Lock(); sizes = append(sizes, n); mu.Unlock() }
	defer func() { testHookAuditGroup = nil }()
	defer runtime.GOMAXPROCS(runtime.GOMAXPROCS(1))
	const callers = 16
	recordAtOnce(t, e, callers, 1)
	mu.Lock()
	defer mu.Unlock()
	total := 0
	for _, n := range sizes {
		total += n
	}
	if total != callers || sizes[0] < callers/2 {
		t.Errorf("groups %v: want %d entries in all, the first group at least %d", sizes, callers, callers/2)
	}
}

// recordAtOnce has callers goroutines, released together, record each
// entries ("caller C entry I"), and fails the test on any error.
func recordAtOnce(t *testing.T, e *env, callers, each int) {
	t.Helper()
	var wg sync.WaitGroup
	start := make(chan struct{})
	errs := make(chan error, callers*each)
	for c := range callers {
		wg.Go(func() {
			<-start
			for i := range each {
				errs <- e.s.RecordAudit(context.Background(), AuditEntry{Action: "version.download", Project: "p", Dataset: "d", Detail: fmt.Sprintf("caller %d entry %d", c, i)})
			}
		})
	}
	close(start)
	wg.Wait()
	close(errs)
	for err := range errs {
		if err != nil {
			t.Fatal(err)
		}
	}
}
