package catalog

import (
	"context"
	"fmt"
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
	var wg sync.WaitGroup
	start := make(chan struct{})
	errs := make(chan error, callers*each)
	for c := range callers {
		wg.Go(func() {
			<-start
			for i := range each {
				errs <- e.s.RecordAudit(ctx, AuditEntry{Action: "version.download", Project: "p", Dataset: "d", Detail: fmt.Sprintf("caller %d entry %d", c, i)})
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
