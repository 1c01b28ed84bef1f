package catalog

import (
	"bytes"
	"context"
	"fmt"
	"io"
	"maps"
	"os"
	"slices"
	"strings"
	"sync"
	"time"

	"github.com/flowcat-catalog/flowcat/catalog/blob"
	"github.com/flowcat-catalog/flowcat/catalog/summary"
	"github.com/flowcat-catalog/flowcat/quality"
	"github.com/flowcat-catalog/flowcat/schema"
)

// lockDataset serializes the commits of one dataset: a replace-window plan
// reads the latest version's files, and the version it commits must have
// that parent.
func (s *Store) lockDataset(ref string) (unlock func()) {
	s.mu.Lock()
	m, ok := s.commits[ref]
	if !ok {
		m = new(sync.Mutex)
		s.commits[ref] = m
	}
	s.mu.Unlock()
	m.Lock()
	return m.Unlock
}

// putTemp stores the finished temporary file f, whose bytes the caller
// hashed to id as it wrote them, as the blob id: moved into place where
// the blob store can take it so (blob.Adopter: no second copy of the
// bytes), read from its start and put otherwise. Either way the store
// checks the bytes against id and makes them durable, so the writer does
// not sync f itself.
func (s *Store) putTemp(ctx context.Context, id blob.ID, f *os.File) error {
	if a, ok := s.blobs.(blob.Adopter); ok {
		if done, err := a.Adopt(ctx, id, f.Name()); err != nil || done {
			return err
		}
	}
	if _, err := f.Seek(0, io.SeekStart); err != nil {
		return err
	}
	return s.blobs.Put(ctx, id, f)
}

// hold marks a blob as about to be referenced, so that the garbage
// collector keeps it until release is called (after the commit).
func (s *Store) hold(id blob.ID) (release func()) {
	s.mu.Lock()
	s.pending[id]++
	s.mu.Unlock()
	return func() {
		s.mu.Lock()
		if s.pending[id]--; s.pending[id] <= 0 {
			delete(s.pending, id)
		}
		s.mu.Unlock()
	}
}

// filePlan is the file list of the version being made.
type filePlan struct {
	files    []FileEntry
	removed  int64    // rows of the parent a replacement removed
	releases []func() // holds on rewritten blobs
	// summaries of the files this commit makes (the upload's, rewritten ones)
	summaries map[blob.ID]*summary.Accumulator
	// quality reports of the files this commit makes, and the options of
	// the accumulators that compute them for rewritten files
	reports map[blob.ID]*quality.Report
	qopt    quality.Options
}

func (p *filePlan) release() {
	for _, r := range p.releases {
		r()
	}
}

// planFiles computes the new version's files from the parent's (nil for
// the first version) and the upload's file (nil when a replacement only
// removes), by mode.
func (s *Store) planFiles(ctx context.Context, ds *Dataset, parent *Version, entry *FileEntry, keyID string, opt IngestOptions, qopt quality.Options) (*filePlan, error) {
	p := &filePlan{summaries: map[blob.ID]*summary.Accumulator{}, reports: map[blob.ID]*quality.Report{}, qopt: qopt}
	var base []FileEntry
	if parent != nil {
		base = parent.Manifest.Files
	}
	switch opt.Mode {
	case ModeReplaceAll:
		base = nil
		if parent != nil {
			p.removed = parent.Manifest.Rows
		}
	case ModeReplaceWindow:
		kept, err := s.cutWindow(ctx, ds, p, base, keyID, opt)
		if err != nil {
			p.release()
			return nil, err
		}
		base = kept
	}
	p.files = slices.Clone(base)
	if entry != nil {
		// The same events appended again (in other bytes, or after a
		// replace-window rewrote the file they made) are not added twice.
		again := opt.Mode == ModeAppend && slices.ContainsFunc(p.files, func(f FileEntry) bool {
			return f.SHA256 == entry.SHA256 || f.DerivedFrom != nil && *f.DerivedFrom == entry.SHA256
		})
		if !again {
			p.files = append(p.files, *entry)
		}
	}
	return p, nil
}

// cutWindow returns base with the rows of opt.Sites inside [opt.From,
// opt.To) removed: files that cannot hold such rows are kept as they are;
// the others are read and, when they do, rewritten without them (or dropped
// when nothing is left). This is the only place ingest reads stored files.
func (s *Store) cutWindow(ctx context.Context, ds *Dataset, p *filePlan, base []FileEntry, keyID string, opt IngestOptions) ([]FileEntry, error) {
	from, to := opt.From.UnixMicro(), opt.To.UnixMicro()
	var out []FileEntry
	for _, f := range base {
		if f.MaxTime.UnixMicro() < from || f.MinTime.UnixMicro() >= to {
			out = append(out, f)
			continue
		}
		nf, removed, err := s.rewriteWithout(ctx, ds, f, keyID, func(e *schema.Event) bool {
			at := e.OccurredAt.UnixMicro()
			return at >= from && at < to && slices.Contains(opt.Sites, e.Site)
		}, p)
		if err != nil {
			return nil, err
		}
		p.removed += removed
		if nf != nil {
			out = append(out, *nf)
		}
	}
	return out, nil
}

// rewriteWithout copies file f without the rows drop selects. It returns f
// itself when drop selects none, and nil when it selects all.
func (s *Store) rewriteWithout(ctx context.Context, ds *Dataset, f FileEntry, keyID string, drop func(*schema.Event) bool, p *filePlan) (*FileEntry, int64, error) {
	r, err := s.blobs.Open(ctx, f.SHA256)
	if err != nil {
		return nil, 0, fmt.Errorf("replace-window: %w", err)
	}
	defer r.Close()
	var removed int64
	err = ReadSnapshot(r, r.Size(), func(e *schema.Event) error {
		if drop(e) {
			removed++
		}
		return nil
	})
	if err != nil {
		return nil, 0, fmt.Errorf("replace-window: file %s: %w", f.SHA256, err)
	}
	switch removed {
	case 0:
		return &f, 0, nil
	case f.Rows:
		return nil, removed, nil
	}
	origin := f.SHA256
	if f.DerivedFrom != nil {
		origin = *f.DerivedFrom
	}
	sw, err := newAttrSnapshotWriter(s.opt.TempDir, s.opt.RowGroupRows, keyID, f.Attributes, origin.String())
	if err != nil {
		return nil, 0, err
	}
	defer sw.Remove()
	sacc := summary.New(summaryOptions(ds))
	qacc := quality.NewAccumulator(p.qopt)
	cp := NewCasePass(s.opt.TempDir, s.opt.RunEvents)
	defer cp.Close()
	err = ReadSnapshot(r, r.Size(), func(e *schema.Event) error {
		if drop(e) {
			return nil
		}
		qacc.ObserveFileOrder(e)
		fl := qacc.Observe(e)
		sacc.Observe(e)
		e.Row = sw.rows // its place in the new file
		if err := sw.Write(e); err != nil {
			return err
		}
		c := *e
		c.CloneTexts()
		c.Line = quality.PackLine(c.Line, fl)
		return cp.Add(&c)
	})
	if err == nil {
		_, err = cp.Run(qacc)
	}
	if err != nil {
		return nil, 0, fmt.Errorf("replace-window: file %s: %w", f.SHA256, err)
	}
	id, size, err := sw.Finish()
	if err != nil {
		return nil, 0, err
	}
	p.releases = append(p.releases, s.hold(id))
	if err := s.putTemp(ctx, id, sw.f); err != nil {
		return nil, 0, fmt.Errorf("replace-window: %w", err)
	}
	p.summaries[id] = sacc
	p.reports[id] = qacc.Report()
	return &FileEntry{
		SHA256: id, Bytes: size, Rows: sw.rows, Upload: f.Upload,
		MinTime: sw.min, MaxTime: sw.max, RowGroup: s.opt.RowGroupRows, DerivedFrom: &origin, Attributes: f.Attributes,
	}, removed, nil
}

// windowCheck finds the events of a replace-window upload that fall
// outside its window or belong to a site it does not replace, and gathers
// the sites it holds.
type windowCheck struct {
	on       bool
	from, to int64
	sites    []string // given; nil means any
	seen     map[string]bool
	outside  int64
	// events naming sites past the first MaxReplacedSites, the first of
	// them
	overSites int64
	overLine  int64
	overSite  string
	firstLine int64
	firstWhy  string
	firstCol  schema.Field
}

func newWindowCheck(opt IngestOptions) *windowCheck {
	w := &windowCheck{on: opt.Mode == ModeReplaceWindow, sites: opt.Sites}
	if w.on {
		w.from, w.to = opt.From.UnixMicro(), opt.To.UnixMicro()
	}
	return w
}

func (w *windowCheck) observe(e *schema.Event) {
	if !w.on {
		return
	}
	why := ""
	if at := e.OccurredAt.UnixMicro(); at < w.from || at >= w.to {
		why = fmt.Sprintf("occurred_at %s lies outside the replaced window", e.OccurredAt.UTC().Format(time.RFC3339Nano))
	}
	col := schema.FieldOccurredAt
	if why == "" && w.sites != nil && !slices.Contains(w.sites, e.Site) {
		why, col = fmt.Sprintf("site %q is not among the replaced sites", truncate(e.Site, 40)), schema.FieldSite
	}
	if why != "" {
		w.outside++
		if w.firstLine == 0 || e.Line < w.firstLine {
			w.firstLine, w.firstWhy, w.firstCol = e.Line, why, col
		}
		return
	}
	if w.sites == nil && !w.seen[e.Site] {
		if len(w.seen) >= MaxReplacedSites {
			w.overSites++
			if w.overLine == 0 || e.Line < w.overLine {
				w.overLine, w.overSite = e.Line, e.Site
			}
			return
		}
		if w.seen == nil {
			w.seen = map[string]bool{}
		}
		w.seen[strings.Clone(e.Site)] = true
	}
}

// MaxReplacedSites is the most sites one replace-window upload replaces:
// those it lists, or else those its events name.
const MaxReplacedSites = 4096

// RuleTooManySites refuses a replace-window upload whose events name more
// than MaxReplacedSites sites.
const RuleTooManySites = "too_many_sites"

// sitesError says which event named a site past MaxReplacedSites.
func (w *windowCheck) sitesError() *UploadError {
	msg := fmt.Sprintf("site %q is past the %d sites one replace-window upload may replace (%d events of such sites in all); nothing of the upload was kept",
		truncate(w.overSite, 40), MaxReplacedSites, w.overSites)
	return &UploadError{Rule: RuleTooManySites, Line: w.overLine, Column: string(schema.FieldSite), Message: msg}
}

func (w *windowCheck) uploadError() *UploadError {
	msg := w.firstWhy
	if w.outside > 1 {
		msg += fmt.Sprintf(" (%d events in all)", w.outside)
	}
	return &UploadError{Rule: RuleOutsideWindow, Line: w.firstLine, Column: string(w.firstCol), Message: msg}
}

func (w *windowCheck) siteList() []string {
	out := slices.Collect(maps.Keys(w.seen))
	slices.Sort(out)
	return out
}

func truncate(s string, n int) string {
	b := []byte(s)
	if len(b) <= n {
		return s
	}
	return string(bytes.ToValidUTF8(b[:n], nil)) + "…"
}
