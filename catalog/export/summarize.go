package export

import (
	"context"

	"github.com/flowcat-catalog/flowcat/catalog"
	"github.com/flowcat-catalog/flowcat/catalog/summary"
	"github.com/flowcat-catalog/flowcat/schema"
)

// Summarize computes the summary of the events of files that pass f: the
// event-level figures as they stream, the case-level ones from one
// per-case pass (catalog.CasePass, sorting by case in src.TempDir), with
// exact counts. A case is measured from its events that pass the filter:
// a time window cuts the cases that cross its edges.
func Summarize(ctx context.Context, src Source, files []catalog.FileEntry, f Filter, opt summary.Options) (*summary.Accumulator, Stats, error) {
	acc := summary.New(opt)
	cp := catalog.NewCasePass(src.TempDir, 0)
	defer cp.Close()
	// The events' rows order a case's events at one instant as the
	// version's own pass does (cases.Less); past MaxOpenFiles files, a
	// staged merge's events have none, and such events go by content.
	st, err := events(ctx, src, files, f, true, func(e *schema.Event) error {
		acc.Observe(e)
		var c schema.Event
		cloneEvent(&c, e)
		return cp.Add(&c)
	})
	if err != nil {
		return nil, st, err
	}
	counts, err := cp.Run(acc)
	if err != nil {
		return nil, st, err
	}
	acc.SetCounts(counts)
	return acc, st, nil
}
