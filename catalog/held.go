package catalog

import (
	"cmp"
	"context"
	"encoding/binary"
	"errors"
	"fmt"
	"hash/maphash"
	"io"
	"slices"
	"strings"
	"time"

	"github.com/parquet-go/parquet-go"

	"github.com/flowcat-catalog/flowcat/catalog/blob"
	"github.com/flowcat-catalog/flowcat/catalog/internal/kway"
	"github.com/flowcat-catalog/flowcat/quality"
	"github.com/flowcat-catalog/flowcat/schema"
)

// Rules of an upload rejected for its changed events.
const (
	// RuleChangedEvent: an event whose stable event_id the latest version
	// holds with other content, under ChangesRefuse.
	RuleChangedEvent = "changed_event"
	// RuleConflictingEvent: two events of one upload share a stable
	// event_id with different content; the upload cannot say which holds.
	RuleConflictingEvent = "conflicting_event"
)

// maxChangeSamples bounds the lines a refusal names.
const maxChangeSamples = 10

// heldFilter sees an upload's events in time order (as the sorter emits
// them) and keeps only those the version being made must store: it drops
// the events the latest version already holds and the copies of an event
// seen earlier in the same upload, and finds changed events. Both sides are
// sorted by time, so it holds only the events near the current instant:
// those of that instant (content identity) or within DefaultIDWindow of it
// (stable event_id), of the upload and of the held files. It reads only
// the held files whose time range reaches the upload's events, and of
// them only the row groups whose occurred_at statistics do.
type heldFilter struct {
	id     Identity
	policy ChangePolicy
	// around is how far either side of the current instant the filter
	// looks for an event's other content (microseconds): DefaultIDWindow
	// for stable ids, 0 for content, less when the windows' events would
	// take more than budget bytes (room).
	around   int64
	budget   int64
	narrowed *ChangeWindow // nil while around is whole
	peak     int64         // the most the windows took at once (cost)
	seed     maphash.Seed
	key      []byte // scratch for identities
	// check and sums are the seeds of the held window's second identity
	// hash and of its two content hashes.
	check maphash.Seed
	sums  [2]maphash.Seed
	// ids are the upload's identities, recorded as it was read: only the
	// upload's events whose identity repeats enter seen, and only held
	// events whose identity the upload may have enter held (with content
	// identity its filter is dropped after the read, and it answers
	// "maybe"). Its seed is the filter's.
	ids *uploadIdentities

	held *heldWindow  // held events near the current instant
	seen *eventWindow // the upload's events so far near it
	rec  []byte       // the window record of the event in hand
	hrec []byte       // the window record of the held event in hand
	src  *heldSource  // nil: nothing to compare with (first version, or not an append)

	against int // the version compared with; 0 for none
	counts  EventCounts
	sites   map[string]*SiteEventCounts

	changes   []changeSample // the first changed events, for a refusal
	conflicts []changeSample // the first conflicting pairs within the upload
	nConflict int64
	// remove lists, per held file, the ids of events corrections replace.
	remove map[blob.ID]map[idKey]struct{}
}

type idKey struct{ site, id string }

type changeSample struct {
	line, other int64 // the upload's line; for a conflict, the earlier line
	fields      []schema.Field
}

// newHeldFilter prepares the filter of one upload whose identities ids
// recorded, its windows taking about budget bytes at most (beyond the
// current instant's events); it compares with no held event until given
// a source.
func newHeldFilter(ids *uploadIdentities, policy ChangePolicy, budget int64) *heldFilter {
	id := ids.id
	f := &heldFilter{
		id:     id,
		seed:   ids.seed,
		check:  maphash.MakeSeed(),
		sums:   [2]maphash.Seed{maphash.MakeSeed(), maphash.MakeSeed()},
		ids:    ids,
		policy: policy,
		held:   newHeldWindow(),
		seen:   newEventWindow(),
		sites:  map[string]*SiteEventCounts{},
		remove: map[blob.ID]map[idKey]struct{}{},
	}
	f.counts.Identity = id
	if id == IdentityEventID {
		f.around = DefaultIDWindow
	}
	f.budget = budget
	return f
}

// heldFilterFor makes the filter of an upload to ds against its latest
// version (or carried, that version re-keyed, when not nil), given the
// upload's identities (ids, under its profile's identity); the caller
// holds the dataset's commit lock until the commit.
func (s *Store) heldFilterFor(ctx context.Context, ds *Dataset, mode Mode, carried *Version, ids *uploadIdentities) (*heldFilter, error) {
	latest, err := s.Version(ctx, ds.Project, ds.Name, 0)
	if carried != nil { // the latest version carried to the current key generation (rekey.go)
		latest, err = carried, nil
	}
	if errors.Is(err, ErrNotFound) {
		latest = nil
	} else if err != nil {
		return nil, err
	}
	f := newHeldFilter(ids, ds.changePolicy(), s.opt.ChangeWindowBytes)
	// Only appends compare with held events; every mode stores the copies
	// within the upload once.
	if mode == ModeAppend && latest != nil {
		f.against = latest.Number
		f.src = newHeldSource(s.blobs, latest.Manifest.Files)
	}
	return f, nil
}

// close releases the held files still open.
func (f *heldFilter) close() {
	if f == nil {
		return
	}
	var st heldStats
	if f.src != nil {
		f.src.close()
		st = f.src.stats
	}
	st.WindowPeak = f.peak
	if testHookHeldStats != nil {
		testHookHeldStats(st)
	}
}

// testHookHeldStats, when set by a test, receives the reading statistics
// of each upload's comparison with held files.
var testHookHeldStats func(heldStats)

// keep wraps fn, the consumer of the upload's sorted events, so that it
// sees only the events to store.
func (f *heldFilter) keep(ctx context.Context, fn func(*schema.Event) error) func(*schema.Event) error {
	return func(e *schema.Event) error {
		store, err := f.classify(ctx, e)
		if err != nil || !store {
			return err
		}
		return fn(e)
	}
}

// classify counts e and reports whether it is to be stored.
func (f *heldFilter) classify(ctx context.Context, e *schema.Event) (bool, error) {
	at := e.OccurredAt.UnixMicro()
	f.seen.evict(at - f.around)
	f.held.evict(at - f.around)
	if f.src != nil {
		err := f.src.load(ctx, at-f.around, at+f.around, func(h *schema.Event, file int, row int64) bool {
			f.hrec = appendWindowRecord(f.hrec[:0], h)
			hash := identityHashRec(f.seed, &f.key, f.id, h, f.hrec)
			if !f.ids.mayHold(hash) {
				return true
			}
			hAt := h.OccurredAt.UnixMicro()
			if !f.room(e.OccurredAt, hAt) {
				return false // it waits in its file
			}
			f.held.add(heldEntry{slot: slot{at: hAt, hash: hash}, check: maphash.Bytes(f.check, f.key),
				sum: f.contentSum(f.hrec), row: row, file: int32(file)})
			f.peak = max(f.peak, f.held.cost()+f.seen.cost())
			return true
		})
		if err != nil {
			return false, err
		}
	}
	site := f.sites[e.Site]
	if site == nil {
		site = f.site(e.Site)
	}
	f.counts.Read++
	site.Read++
	f.rec = appendWindowRecord(f.rec[:0], e)
	h := identityHashRec(f.seed, &f.key, f.id, e, f.rec)
	check := maphash.Bytes(f.check, f.key)
	if prev, ok := f.seen.find(h, f.id, e, f.rec); ok {
		if sameContent(prev.rec, f.rec) {
			f.counts.Copies++
			site.Copies++
			return false, nil
		}
		// One stable id, two contents, in one upload.
		f.nConflict++
		if len(f.conflicts) < maxChangeSamples {
			f.conflicts = append(f.conflicts, changeSample{line: e.Line, other: prev.line, fields: differingFields(prev.event(), e)})
		}
		return false, nil
	}
	if f.ids.repeated(h) {
		f.room(e.OccurredAt, at) // always room for the current instant
		f.seen.add(h, e, f.rec)  // else no later event of the upload is e
		f.peak = max(f.peak, f.held.cost()+f.seen.cost())
	}
	old, found := f.held.find(h, check)
	switch {
	case !found:
		f.counts.New++
		site.New++
		return true, nil
	case old.sum == f.contentSum(f.rec):
		f.counts.Held++
		site.Held++
		return false, nil
	}
	f.counts.Changed++
	site.Changed++
	if f.policy != ChangesCorrect {
		if len(f.changes) < maxChangeSamples {
			h, err := f.src.event(ctx, int(old.file), old.row)
			if err != nil {
				return false, err
			}
			f.changes = append(f.changes, changeSample{line: e.Line, fields: differingFields(&h, e)})
		}
		return false, nil
	}
	id := f.src.files[old.file].SHA256
	m := f.remove[id]
	if m == nil {
		m = map[idKey]struct{}{}
		f.remove[id] = m
	}
	// A change has an event_id (an event without one is its content), and
	// the held event's site and event_id are e's.
	m[idKey{strings.Clone(e.Site), strings.Clone(e.EventID)}] = struct{}{}
	return true, nil
}

// room makes room in the windows for an event at hAt, given at the
// upload's instant t, when they take budget bytes or more, by narrowing
// the look-around either way: when they reach further back from t than
// hAt lies ahead, their oldest events leave and the event at hAt comes in
// (true); else the look-around ends before hAt, and that event (a held one
// after t) waits in its file (false). So the windows stay about even on
// both sides of t. The look-around never grows back: it ends at about the
// span either way that budget bytes of events fill where they are
// densest, and the upload's counts say from when and how far it looked
// (ChangeWindow). An event of the instant t itself always comes in, even
// when the windows hold nothing else, so exact re-sends and copies are
// always found.
func (f *heldFilter) room(t time.Time, hAt int64) bool {
	if f.held.cost()+f.seen.cost() < f.budget {
		return true
	}
	at := t.UnixMicro()
	oldest, ok := f.held.oldest()
	if so, sok := f.seen.oldest(); sok && (!ok || so < oldest) {
		oldest, ok = so, true
	}
	take := false
	switch {
	case ok && at-oldest > hAt-at:
		f.around = min(f.around, at-oldest-1)
		take = true
	case hAt <= at: // the windows hold only the instant t
		return true
	default:
		f.around = min(f.around, hAt-at-1)
	}
	f.held.evict(at - f.around)
	f.seen.evict(at - f.around)
	if f.narrowed == nil {
		f.narrowed = &ChangeWindow{From: t.UTC(), Bytes: f.budget}
	}
	f.narrowed.Seconds = float64(f.around) / 1e6
	return take
}

// contentSum hashes a window record under the filter's two content seeds:
// held events are compared with the upload's by these 128 bits, not kept.
func (f *heldFilter) contentSum(rec []byte) [2]uint64 {
	return [2]uint64{maphash.Bytes(f.sums[0], rec), maphash.Bytes(f.sums[1], rec)}
}

// site returns the counts of a site not met yet: its own among the first
// quality.MaxSites met, else those of quality.OtherSite, as the quality
// report counts them (a free-text column mapped to site would otherwise
// make the upload record as long as the file).
func (f *heldFilter) site(name string) *SiteEventCounts {
	if len(f.sites) >= quality.MaxSites {
		name = quality.OtherSite
	}
	s := f.sites[name]
	if s == nil {
		s = &SiteEventCounts{Site: strings.Clone(name)}
		f.sites[s.Site] = s
	}
	return s
}

// uploadCounts returns the counts for the upload record, sites in order.
func (f *heldFilter) uploadCounts() *EventCounts {
	c := f.counts
	c.ChangeWindow = f.narrowed
	c.Sites = make([]SiteEventCounts, 0, len(f.sites))
	for _, s := range f.sites {
		c.Sites = append(c.Sites, *s)
	}
	slices.SortFunc(c.Sites, func(a, b SiteEventCounts) int { return strings.Compare(a.Site, b.Site) })
	return &c
}

// lineageCounts returns the counts a version's lineage records, given the
// old events the commit removed.
func (f *heldFilter) lineageCounts(removed int64) *EventCounts {
	if f == nil {
		return nil
	}
	c := f.counts
	c.Sites = nil
	c.ChangeWindow = f.narrowed
	if f.correcting() {
		c.Removed = removed
	}
	return &c
}

// correcting reports whether the upload's changed events replace the old
// ones, so that the events its commit removed count on the upload too.
func (f *heldFilter) correcting() bool {
	return f != nil && f.policy == ChangesCorrect && f.counts.Changed > 0
}

// refusal returns why the upload is refused for its changed events, or
// nil: events of the upload that conflict with each other, or (under
// ChangesRefuse) held events it changes. Lines and field names only, never
// values.
func (f *heldFilter) refusal() *UploadError {
	samples, n, rule := f.conflicts, f.nConflict, RuleConflictingEvent
	if n == 0 {
		if f.policy == ChangesCorrect || f.counts.Changed == 0 {
			return nil
		}
		samples, n, rule = f.changes, f.counts.Changed, RuleChangedEvent
	}
	slices.SortFunc(samples, func(a, b changeSample) int { return cmp.Compare(a.line, b.line) })
	first := samples[0]
	var msg string
	if rule == RuleConflictingEvent {
		msg = fmt.Sprintf("event_id of line %d is also on line %d with other %s; the upload must hold one version of each event",
			first.line, first.other, fieldNames(first.fields))
	} else {
		msg = fmt.Sprintf("event_id is held already with other %s; the dataset refuses changed events (its change policy is refuse; a curator may set correct)",
			fieldNames(first.fields))
	}
	if n > 1 {
		lines := make([]string, 0, len(samples))
		for _, s := range samples {
			lines = append(lines, fmt.Sprintf("%d (%s)", s.line, fieldNames(s.fields)))
		}
		msg += fmt.Sprintf("; %d events in all, on lines %s", n, strings.Join(lines, ", "))
		if n > int64(len(samples)) {
			msg += ", ..."
		}
	}
	col := ""
	if len(first.fields) > 0 {
		col = string(first.fields[0])
	}
	return &UploadError{Rule: rule, Line: first.line, Column: col, Message: msg}
}

func fieldNames(fs []schema.Field) string {
	s := make([]string, len(fs))
	for i, f := range fs {
		s[i] = string(f)
	}
	return strings.Join(s, ", ")
}

// rejectedShare is the share of the upload's rows that were invalid: the
// rows of the file, held events and copies included, not only the stored
// ones the quality report counts.
func (f *heldFilter) rejectedShare(rejected int64) float64 {
	if rejected == 0 {
		return 0
	}
	return float64(rejected) / float64(rejected+f.counts.Read)
}

// removeCorrected rewrites, for a ChangesCorrect upload, the plan's held
// files that hold events its corrections replace, without those events.
// The version's summary and quality are then merged from all its files
// (mergeMode).
func (s *Store) removeCorrected(ctx context.Context, ds *Dataset, p *filePlan, keyID string, f *heldFilter, parent *Version) error {
	if f == nil || len(f.remove) == 0 {
		return nil
	}
	if parent == nil || parent.Number != f.against {
		return fmt.Errorf("corrections were found against version %d, the commit's parent is another", f.against)
	}
	var out []FileEntry
	for _, fe := range p.files {
		ids := f.remove[fe.SHA256]
		if ids == nil {
			out = append(out, fe)
			continue
		}
		nf, removed, err := s.rewriteWithout(ctx, ds, fe, keyID, func(e *schema.Event) bool {
			_, ok := ids[idKey{e.Site, e.EventID}]
			return ok
		}, p)
		if err != nil {
			return err
		}
		p.removed += removed
		if nf != nil {
			out = append(out, *nf)
		}
	}
	p.files = out
	return nil
}

// mergeMode is the mode by which the version's summary and quality are
// merged: an append that removed old events merges all files, as a
// replacement does, not the parent's totals plus the new file.
func mergeMode(mode Mode, p *filePlan) Mode {
	if mode == ModeAppend && p.removed > 0 {
		return ModeReplaceWindow
	}
	return mode
}

// appendWindowRecord appends e's window record to b: each text field
// (schema.Event.Texts, in schema order) as its length (uvarint) and bytes,
// then the instant in microseconds (varint). Two events have equal records
// exactly when sameContent holds.
func appendWindowRecord(b []byte, e *schema.Event) []byte {
	for _, v := range e.Texts() {
		b = binary.AppendUvarint(b, uint64(len(v)))
		b = append(b, v...)
	}
	return binary.AppendVarint(b, e.OccurredAt.UnixMicro())
}

// windowTexts are the text fields of the field table, in the order of
// schema.Event.Texts and of window records.
var windowTexts = func() (out []schema.FieldSpec) {
	for _, f := range schema.FieldSpecs() {
		if f.Name != schema.FieldOccurredAt {
			out = append(out, f)
		}
	}
	return out
}()

// decodeWindowRecord returns the event a window record holds (its schema
// fields; no line), or false for bytes that are not one.
func decodeWindowRecord(r []byte) (schema.Event, bool) {
	var e schema.Event
	for i := range windowTexts {
		n, k := binary.Uvarint(r)
		if k <= 0 || uint64(len(r)-k) < n {
			return e, false
		}
		windowTexts[i].Set(&e, string(r[k:k+int(n)]))
		r = r[k+int(n):]
	}
	us, k := binary.Varint(r)
	if k <= 0 || k != len(r) {
		return e, false
	}
	e.OccurredAt = time.UnixMicro(us).UTC()
	return e, true
}

// windowText returns text field i (in windowTexts order) of a window
// record.
func windowText(r []byte, i int) string {
	for j := 0; ; j++ {
		n, k := binary.Uvarint(r)
		if k <= 0 || uint64(len(r)-k) < n {
			return ""
		}
		if j == i {
			return string(r[k : k+int(n)])
		}
		r = r[k+int(n):]
	}
}

// The positions of site and event_id among windowTexts.
var windowSite, windowEventID = func() (int, int) {
	s, id := -1, -1
	for i, f := range windowTexts {
		switch f.Name {
		case schema.FieldSite:
			s = i
		case schema.FieldEventID:
			id = i
		}
	}
	return s, id
}()

// event decodes a found event, for a sample's list of the fields that
// differ.
func (x windowHit) event() *schema.Event {
	e, _ := decodeWindowRecord(x.rec)
	return &e
}

// heldSource merges the held files' events in time order, opening a file
// only when the upload's events reach its time range and decoding only the
// row groups that reach them.
type heldSource struct {
	blobs   blob.Store
	files   []FileEntry
	pending []int // file indexes by MinTime, not opened yet
	h       *kway.Heap[*heldCursor]
	open    []*heldCursor
	lo      int64 // events before lo are not wanted any more
	stats   heldStats
}

// heldStats describes the reading of held files, for tests and logs.
type heldStats struct {
	FilesOpened, FilesSkipped       int
	RowGroupsRead, RowGroupsSkipped int
	RowsRead                        int64
	WindowPeak                      int64 // the most the filter's windows took at once (cost, bytes)
}

func newHeldSource(bs blob.Store, files []FileEntry) *heldSource {
	s := &heldSource{blobs: bs, files: files, h: kway.New(func(a, b *heldCursor) bool { return a.at < b.at })}
	for i := range files {
		s.pending = append(s.pending, i)
	}
	slices.SortStableFunc(s.pending, func(a, b int) int { return files[a].MinTime.Compare(files[b].MinTime) })
	return s
}

// load calls fn, in time order, for the held events in [lo, hi] not given
// before, with the file (index) and row each is stored at, until fn
// returns false: that event is given again at the next call. Calls must
// come with lo that never decreases.
func (s *heldSource) load(ctx context.Context, lo, hi int64, fn func(e *schema.Event, file int, row int64) bool) error {
	s.lo = lo
	for {
		for len(s.pending) > 0 && s.files[s.pending[0]].MinTime.UnixMicro() <= hi {
			i := s.pending[0]
			s.pending = s.pending[1:]
			if mx := s.files[i].MaxTime; !mx.IsZero() && mx.UnixMicro() < lo {
				s.stats.FilesSkipped++
				continue
			}
			c, err := s.openCursor(ctx, i)
			if err != nil {
				return err
			}
			if !c.done {
				s.h.Push(c)
			}
		}
		if s.h.Len() == 0 {
			return nil
		}
		c := s.h.Top()
		if c.at > hi {
			return nil
		}
		if c.at >= lo && !fn(&c.buf[c.pos], c.file, c.row0+int64(c.pos)) {
			return nil
		}
		if err := c.advance(s); err != nil {
			return err
		}
		if c.done {
			s.h.Pop()
			c.close()
		} else {
			s.h.Fix()
		}
	}
}

func (s *heldSource) close() {
	for _, c := range s.open {
		c.close()
	}
	s.open = nil
}

// heldCursor reads one held file's wanted row groups.
type heldCursor struct {
	file   int
	r      blob.Reader
	groups []parquet.RowGroup
	col    int // leaf index of occurred_at
	gi     int
	starts []int64 // the first row of each group in the file
	rd     *EventReader
	next   int64 // the row in the file of the next event rd reads
	row0   int64 // the row in the file of buf[0]
	buf    []schema.Event
	pos, n int
	at     int64 // instant of buf[pos]
	done   bool
	closed bool
}

const heldBatch = 256

func (s *heldSource) openCursor(ctx context.Context, i int) (*heldCursor, error) {
	fe := s.files[i]
	r, err := s.blobs.Open(ctx, fe.SHA256)
	if err != nil {
		return nil, fmt.Errorf("held events: %w", err)
	}
	c := &heldCursor{file: i, r: r, buf: make([]schema.Event, heldBatch)}
	s.open = append(s.open, c)
	s.stats.FilesOpened++
	pf, err := parquet.OpenFile(r, r.Size(), parquet.SkipPageIndex(true), parquet.SkipBloomFilters(true))
	if err != nil {
		return nil, fmt.Errorf("held events: file %s: %w", fe.SHA256, err)
	}
	leaf, ok := pf.Schema().Lookup(string(schema.FieldOccurredAt))
	if !ok {
		return nil, fmt.Errorf("held events: file %s has no occurred_at column", fe.SHA256)
	}
	c.col = leaf.ColumnIndex
	c.groups = pf.RowGroups()
	c.starts = groupStarts(c.groups)
	c.pos, c.n = 0, 0
	if err := c.advance(s); err != nil {
		return nil, err
	}
	return c, nil
}

// advance moves to the next event, skipping row groups that end before
// the source's lo; done at the end of the file.
func (c *heldCursor) advance(s *heldSource) error {
	c.pos++
	for c.pos >= c.n {
		if c.rd == nil {
			for c.gi < len(c.groups) && !c.groupReaches(c.groups[c.gi], s.lo) {
				s.stats.RowGroupsSkipped++
				c.gi++
			}
			if c.gi == len(c.groups) {
				c.done = true
				return nil
			}
			c.rd = NewRowReader(parquet.NewGenericRowGroupReader[schema.Event](c.groups[c.gi]))
			c.next = c.starts[c.gi]
			c.gi++
			s.stats.RowGroupsRead++
		}
		clear(c.buf)
		n, err := c.rd.Read(c.buf)
		c.pos, c.n = 0, n
		c.row0 = c.next
		c.next += int64(n)
		s.stats.RowsRead += int64(n)
		if errors.Is(err, io.EOF) {
			c.rd.Close()
			c.rd = nil
		} else if err != nil {
			return fmt.Errorf("held events: parquet: %w", err)
		}
	}
	c.at = c.buf[c.pos].OccurredAt.UnixMicro()
	return nil
}

// groupStarts returns the first row of each group among the file's rows.
func groupStarts(groups []parquet.RowGroup) []int64 {
	out := make([]int64, len(groups))
	var n int64
	for i, g := range groups {
		out[i] = n
		n += g.NumRows()
	}
	return out
}

// event reads again the held event at row of file (an index in s.files).
func (s *heldSource) event(ctx context.Context, file int, row int64) (schema.Event, error) {
	var e schema.Event
	fe := s.files[file]
	r, err := s.blobs.Open(ctx, fe.SHA256)
	if err != nil {
		return e, fmt.Errorf("held events: %w", err)
	}
	defer r.Close()
	pf, err := parquet.OpenFile(r, r.Size(), parquet.SkipBloomFilters(true))
	if err != nil {
		return e, fmt.Errorf("held events: file %s: %w", fe.SHA256, err)
	}
	groups := pf.RowGroups()
	starts := groupStarts(groups)
	g, _ := slices.BinarySearch(starts, row+1)
	g-- // the last group starting at or before row
	if g < 0 || row-starts[g] >= groups[g].NumRows() {
		return e, fmt.Errorf("held events: file %s has no row %d", fe.SHA256, row)
	}
	gr := parquet.NewGenericRowGroupReader[schema.Event](groups[g])
	rd := NewRowReader(gr)
	defer rd.Close()
	if err := gr.SeekToRow(row - starts[g]); err != nil {
		return e, fmt.Errorf("held events: file %s: %w", fe.SHA256, err)
	}
	buf := make([]schema.Event, 1)
	if n, err := rd.Read(buf); n != 1 {
		return e, fmt.Errorf("held events: file %s, row %d: %v", fe.SHA256, row, err)
	}
	return buf[0], nil
}

// groupReaches reports whether rg may hold an event at or after lo.
func (c *heldCursor) groupReaches(rg parquet.RowGroup, lo int64) bool {
	fc, ok := rg.ColumnChunks()[c.col].(*parquet.FileColumnChunk)
	if !ok {
		return true
	}
	_, hi, ok := fc.Bounds()
	return !ok || hi.Int64() >= lo
}

func (c *heldCursor) close() {
	if c.closed {
		return
	}
	c.closed = true
	if c.rd != nil {
		c.rd.Close()
	}
	c.r.Close()
}
