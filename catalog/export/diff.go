package export

import (
	"context"
	"slices"
	"time"

	"github.com/flowcat-catalog/flowcat/catalog"
	"github.com/flowcat-catalog/flowcat/catalog/blob"
	"github.com/flowcat-catalog/flowcat/schema"
)

// DefaultDiffSamples is how many first instants DiffResult keeps each way
// when DiffOptions does not say.
const DefaultDiffSamples = 5

// DiffOptions tune Diff. The zero value compares every event.
type DiffOptions struct {
	Filter  Filter // compares only the events that pass (Columns is ignored)
	Samples int    // first instants kept each way; default DefaultDiffSamples, negative for none
	// ReadShared reads files present in both versions instead of
	// cancelling them unread (for checking; the result is the same).
	ReadShared bool
}

// DiffCount is how many events were added and removed at one site on one
// UTC day.
type DiffCount struct {
	Site    string `json:"site"`
	Day     string `json:"day"` // YYYY-MM-DD, UTC
	Added   int64  `json:"added"`
	Removed int64  `json:"removed"`
}

// DiffResult is the content difference from version a to version b.
type DiffResult struct {
	Added   int64       `json:"added"`   // events of b not matched by an equal event of a
	Removed int64       `json:"removed"` // events of a not matched by an equal event of b
	Same    int64       `json:"same"`    // events read on both sides and matched one for one
	BySite  []DiffCount `json:"by_site_day"`
	// FirstAdded and FirstRemoved are the occurred_at of the first added
	// and removed events in export order: instants only, no row content.
	FirstAdded   []time.Time `json:"first_added"`
	FirstRemoved []time.Time `json:"first_removed"`
	SharedFiles  int         `json:"shared_files"` // files in both versions, cancelled without reading
	SharedRows   int64       `json:"shared_rows"`  // rows of the shared files, whatever the filter
	StatsA       Stats       `json:"stats_a"`
	StatsB       Stats       `json:"stats_b"`
}

// Diff compares two versions (their manifests' files) by content, as
// multisets: an event of b equal in every stored field to one of a cancels
// it, one for one; what is left of b is added, of a removed. Both sides
// are streamed in the order of Events and walked together, so memory is
// that of two merges. A file in both versions (same SHA-256) holds the
// same events on both sides, which cancel whatever the order, so it is
// left out of both sides unread (unless ReadShared) and counted in
// SharedFiles and SharedRows.
func Diff(ctx context.Context, src Source, a, b []catalog.FileEntry, opt DiffOptions) (*DiffResult, error) {
	f := opt.Filter
	f.Columns = nil
	if err := f.Validate(); err != nil {
		return nil, err
	}
	samples := opt.Samples
	if samples == 0 {
		samples = DefaultDiffSamples
	}
	res := &DiffResult{}
	if !opt.ReadShared {
		a, b = dropShared(a, b, res)
	}
	m := f.compile()
	var stA, stB Stats
	insA, cleanA, err := plan(ctx, src, a, m, nil, &stA)
	defer cleanA()
	if err != nil {
		return nil, err
	}
	insB, cleanB, err := plan(ctx, src, b, m, nil, &stB)
	defer cleanB()
	if err != nil {
		return nil, err
	}
	sa, sb := newMerge(ctx, insA, m, &stA), newMerge(ctx, insB, m, &stB)
	defer sa.close()
	defer sb.close()

	counts := map[[2]string]*DiffCount{}
	count := func(e *schema.Event) *DiffCount {
		k := [2]string{e.Site, e.OccurredAt.UTC().Format(time.DateOnly)}
		c := counts[k]
		if c == nil {
			c = &DiffCount{Site: k[0], Day: k[1]}
			counts[k] = c
		}
		return c
	}
	ea, err := sa.next()
	if err != nil {
		return nil, err
	}
	eb, err := sb.next()
	if err != nil {
		return nil, err
	}
	for ea != nil || eb != nil {
		c := 0
		switch {
		case ea == nil:
			c = 1
		case eb == nil:
			c = -1
		default:
			c = Compare(ea, eb)
		}
		if c <= 0 {
			stA.RowsEmitted++
		}
		if c >= 0 {
			stB.RowsEmitted++
		}
		switch {
		case c == 0:
			res.Same++
		case c < 0:
			res.Removed++
			count(ea).Removed++
			if len(res.FirstRemoved) < samples {
				res.FirstRemoved = append(res.FirstRemoved, ea.OccurredAt.UTC())
			}
		default:
			res.Added++
			count(eb).Added++
			if len(res.FirstAdded) < samples {
				res.FirstAdded = append(res.FirstAdded, eb.OccurredAt.UTC())
			}
		}
		if c <= 0 {
			if ea, err = sa.next(); err != nil {
				return nil, err
			}
		}
		if c >= 0 {
			if eb, err = sb.next(); err != nil {
				return nil, err
			}
		}
	}
	for _, c := range counts {
		res.BySite = append(res.BySite, *c)
	}
	slices.SortFunc(res.BySite, func(x, y DiffCount) int {
		if x.Site != y.Site {
			if x.Site < y.Site {
				return -1
			}
			return 1
		}
		if x.Day < y.Day {
			return -1
		}
		if x.Day > y.Day {
			return 1
		}
		return 0
	})
	res.StatsA, res.StatsB = stA, stB
	return res, nil
}

// dropShared removes from a and b the files they share, one for one, and
// counts them in res.
func dropShared(a, b []catalog.FileEntry, res *DiffResult) ([]catalog.FileEntry, []catalog.FileEntry) {
	inB := map[blob.ID]int{}
	for _, f := range b {
		inB[f.SHA256]++
	}
	cancelled := map[blob.ID]int{}
	var ka []catalog.FileEntry
	for _, f := range a {
		if inB[f.SHA256] > 0 {
			inB[f.SHA256]--
			cancelled[f.SHA256]++
			res.SharedFiles++
			res.SharedRows += f.Rows
			continue
		}
		ka = append(ka, f)
	}
	var kb []catalog.FileEntry
	for _, f := range b {
		if cancelled[f.SHA256] > 0 {
			cancelled[f.SHA256]--
			continue
		}
		kb = append(kb, f)
	}
	return ka, kb
}
