package catalog

import (
	"bufio"
	"encoding/binary"
	"errors"
	"fmt"
	"os"
	"strings"

	"github.com/flowcat-catalog/flowcat/catalog/internal/tally"
	"github.com/flowcat-catalog/flowcat/catalog/summary"
	"github.com/flowcat-catalog/flowcat/quality"
	"github.com/flowcat-catalog/flowcat/schema"
	"github.com/flowcat-catalog/flowcat/schema/cases"
)

// CasePass runs the one per-case computation (cases.Builder) over events
// given in any order: it sorts them by case on disk (runs of at most
// RunEvents events, so memory does not grow with the file or the
// version), then feeds them to the builder case by case. It also counts
// the distinct cases, subjects and resources exactly, on disk too.
type CasePass struct {
	srt       *sorter
	subjects  *distinctCounter
	resources *distinctCounter
	// Terminal are the dataset's terminal event types
	// (schema.Profile.Terminal), for the builder's census.
	Terminal []schema.EventType
	// Kept are observers (the summary) fed by a second per-case
	// computation over the events summaries keep: not dated later than
	// their upload, not outside the dataset's window (their Line packed
	// with quality.FlagLater or quality.FlagOutsideWindow), and not an
	// exact copy of the event before them (same case, instant, type and
	// content). Run counts what it left out in the Counts it returns.
	Kept []cases.Observer
	// upKeys holds the case keys of the events marked by uploadMark,
	// unless noUpKeys: a commit with no case groups to extend needs none.
	upKeys   *distinctCounter
	lastKey  string
	noUpKeys bool
}

// NewCasePass returns a pass whose sort runs and counts spill to dir, in
// runs of at most runEvents events.
func NewCasePass(dir string, runEvents int) *CasePass {
	if runEvents <= 0 {
		runEvents = 1 << 16
	}
	return &CasePass{
		srt:       newCaseSorter(dir, runEvents),
		subjects:  newDistinctCounter(dir, distinctMemory),
		resources: newDistinctCounter(dir, distinctMemory),
	}
}

// Add takes one event; its Line may carry quality flags (quality.PackLine).
// The fields no per-case figure uses (priority, channel, outcome, event_id)
// are not kept: the sort by case carries less.
func (p *CasePass) Add(e *schema.Event) error {
	c := *e
	c.Priority, c.Channel, c.Outcome, c.EventID = "", "", "", ""
	if e.Line&uploadMark != 0 && !p.noUpKeys && e.CaseID != p.lastKey {
		if p.upKeys == nil {
			p.upKeys = newDistinctCounter(p.srt.dir, distinctMemory)
		}
		if err := p.upKeys.Add(e.CaseID); err != nil {
			return err
		}
		p.lastKey = strings.Clone(e.CaseID)
	}
	return p.srt.Add(&c)
}

// uploadKeys writes the distinct case keys of the events marked by
// uploadMark, sorted, to a temporary file (deleted when closed).
func (p *CasePass) uploadKeys() (*tempFile, error) {
	f, err := os.CreateTemp(p.srt.dir, "upload-keys-*")
	if err != nil {
		return nil, fmt.Errorf("case keys: %w", err)
	}
	if p.upKeys == nil {
		return &tempFile{f}, nil
	}
	w := bufio.NewWriterSize(f, runBufSize)
	var b []byte
	err = p.upKeys.each(func(v string) error {
		b = binary.AppendUvarint(b[:0], uint64(len(v)))
		b = append(b, v...)
		_, err := w.Write(b)
		return err
	})
	if err == nil {
		err = w.Flush()
	}
	if err != nil {
		f.Close()
		os.Remove(f.Name())
		return nil, fmt.Errorf("case keys: %w", err)
	}
	return &tempFile{f}, nil
}

// tempFile is a temporary file that Close deletes.
type tempFile struct{ *os.File }

func (t *tempFile) Close() error {
	t.File.Close()
	return os.Remove(t.Name())
}

// uploadMark, set in an event's Line, marks the events of the upload
// being ingested among those of the rest of its version (RunSplit). Lines
// keep their low 56 bits (quality.PackLine), so the mark never meets one.
const uploadMark = 1 << 62

// Run feeds every case to the observers and returns the exact counts.
func (p *CasePass) Run(obs ...cases.Observer) (summary.Counts, error) {
	return p.RunSplit(obs, nil)
}

// RunSplit feeds every case to all, and the cases made of the events
// marked by uploadMark (those events only) to mine, in one pass. The
// observers of Kept get the cases made of the events summaries keep.
func (p *CasePass) RunSplit(all, mine []cases.Observer) (summary.Counts, error) {
	var bm *cases.Builder
	if len(mine) > 0 {
		bm = cases.NewBuilder(mine...)
		bm.Terminal = p.Terminal
	}
	var c summary.Counts
	// Without Kept, all's builder runs here. With it, one split
	// computation for all and Kept (cases.Split) runs on another
	// goroutine, fed in batches in the stream's order, so the two cores
	// split the work. Events from the sort own their strings, so a copy
	// may cross.
	var b *cases.Builder
	var split *cases.Split
	var kb *batches[schema.Event]
	if len(p.Kept) > 0 {
		split = cases.NewSplit(p.Terminal, all, p.Kept)
		var kf keptFilter
		kb = newBatches(keptBatchEvents, keptBatches, func(bt []schema.Event) error {
			for i := range bt {
				split.Add(&bt[i], kf.keep(&bt[i], &c))
			}
			return nil
		})
	} else if len(all) > 0 {
		b = cases.NewBuilder(all...)
		b.Terminal = p.Terminal
	}
	var lastSubj, lastRes string
	err := p.srt.Finish(func(e *schema.Event) error {
		// Distinct subjects and resources, counted on the way: a case
		// names the same ones again and again, so most are skipped here.
		if e.SubjectID != "" && e.SubjectID != lastSubj {
			if err := p.subjects.Add(e.SubjectID); err != nil {
				return err
			}
			lastSubj = e.SubjectID
		}
		if e.ResourceID != "" && e.ResourceID != lastRes {
			if err := p.resources.Add(e.ResourceID); err != nil {
				return err
			}
			lastRes = e.ResourceID
		}
		marked := e.Line&uploadMark != 0
		e.Line &^= uploadMark
		if marked && bm != nil {
			bm.Add(e)
		}
		if b != nil {
			b.Add(e)
		}
		if kb != nil {
			return kb.add(*e)
		}
		return nil
	})
	if kb != nil {
		err = errors.Join(err, kb.close()) // c's kept counts are final now
	}
	if err != nil {
		return summary.Counts{}, err
	}
	if bm != nil {
		bm.Flush()
	}
	subj, err := p.subjects.Count()
	if err != nil {
		return summary.Counts{}, err
	}
	res, err := p.resources.Count()
	if err != nil {
		return summary.Counts{}, err
	}
	c.Subjects, c.Resources = subj, res
	switch {
	case split != nil:
		split.Flush()
		c.Cases = uint64(split.KeptCases()) // the cases the summary figures cover
	case b != nil:
		b.Flush()
		c.Cases = uint64(b.Cases())
	}
	return c, nil
}

// keptFilter is the rule of the events the summaries keep, in a stream in
// case order: none later than the upload, none outside the dataset's
// window, and no exact copy of its case's previous event. keep counts in c
// what it drops.
type keptFilter struct {
	prev    schema.Event
	hasPrev bool
}

func (k *keptFilter) keep(e *schema.Event, c *summary.Counts) bool {
	_, fl := quality.UnpackLine(e.Line)
	switch {
	case fl&quality.FlagLater != 0:
		c.LaterThanUpload++
		return false
	case fl&quality.FlagOutsideWindow != 0:
		c.OutsideWindow++
		return false
	case k.hasPrev && k.prev.CaseID == e.CaseID && k.prev.OccurredAt.Equal(e.OccurredAt) && k.prev.Type == e.Type && schema.CompareContent(&k.prev, e) == 0:
		c.ExactDuplicates++
		return false
	}
	k.prev, k.hasPrev = *e, true
	return true
}

// Batches of events the summaries' builder takes, and how many wait.
const (
	keptBatchEvents = 1024
	keptBatches     = 8
)

// Close removes the temporary files.
func (p *CasePass) Close() error {
	errs := []error{p.srt.Close(), p.subjects.Close(), p.resources.Close()}
	if p.upKeys != nil {
		errs = append(errs, p.upKeys.Close())
	}
	return errors.Join(errs...)
}

// distinctMemory bounds the bytes of values a distinctCounter holds
// before it spills a sorted run.
const distinctMemory = 16 << 20

// distinctCounter counts distinct strings exactly with bounded memory
// (tally.Counter: a sorted run spilled to a temporary file past max
// bytes, runs merged to count). Values are pseudonyms, never raw
// identifiers.
type distinctCounter struct{ c *tally.Counter }

func newDistinctCounter(dir string, max int) *distinctCounter {
	return &distinctCounter{c: tally.New(dir, max)}
}

// Add counts v.
func (d *distinctCounter) Add(v string) error { return d.c.Add(v, 1) }

// Count returns the number of distinct values added.
func (d *distinctCounter) Count() (uint64, error) { return d.c.Distinct() }

// each calls fn for every distinct value added, in order.
func (d *distinctCounter) each(fn func(string) error) error {
	return d.c.Each(func(v string, _ uint64) error { return fn(v) })
}

// Close deletes the runs.
func (d *distinctCounter) Close() error { return d.c.Close() }
