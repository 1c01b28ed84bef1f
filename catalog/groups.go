package catalog

import (
	"bufio"
	"cmp"
	"context"
	"crypto/sha256"
	"encoding/binary"
	"encoding/hex"
	"errors"
	"fmt"
	"hash"
	"io"
	"math"
	"os"
	"path/filepath"
	"slices"
	"strings"
	"time"

	bolt "go.etcd.io/bbolt"

	"github.com/flowcat-catalog/flowcat/catalog/blob"
	"github.com/flowcat-catalog/flowcat/catalog/internal/kway"
	"github.com/flowcat-catalog/flowcat/catalog/summary"
	"github.com/flowcat-catalog/flowcat/quality"
	"github.com/flowcat-catalog/flowcat/schema"
	"github.com/flowcat-catalog/flowcat/schema/cases"
)

// Case groups keep a version's events sorted by case, so that the next
// commit sorts only its upload's events and merges them with the groups
// (DEVELOPERS.md, "Case groups"). They are derived data: not part of a
// version's identity, rebuilt by one full pass whenever they are missing
// or do not match the version (an earlier release, a replacement, a
// correction, a changed window).

// bucketCaseGroups maps a dataset ref to the case groups of its latest
// version (caseGroupSet, JSON). Only the latest version's groups are kept;
// a commit replaces them, and the collector sweeps the blobs no set names.
var bucketCaseGroups = []byte("case_groups")

// caseGroupSet is a partition of a version's cases into groups.
type caseGroupSet struct {
	Version int `json:"version"`
	// Files is files digest of the version's file list (filesDigest): the
	// groups hold exactly the events of those files.
	Files string `json:"files"`
	// WindowFrom and WindowTo (µs, 0: none) are the dataset window the
	// events' exclusion flags were computed with.
	WindowFrom int64 `json:"window_from,omitempty"`
	WindowTo   int64 `json:"window_to,omitempty"`
	// Options identifies what the groups' states were computed with (the
	// dataset's profile, zone and history setting, and groupFormat): other
	// options, and the next commit makes its groups by a full pass.
	Options string      `json:"options"`
	Groups  []caseGroup `json:"groups"`
}

// groupFormat changes with the layout of a group or of the states it
// keeps; groups of another format are rebuilt.
const groupFormat = "4" // 4: events carry their Row

// groupOptions identifies the options the groups of ds are computed with.
func groupOptions(ds *Dataset) string {
	return fmt.Sprintf("%s|%s|%s|%t", groupFormat, ds.ProfileHash, ds.Timezone, ds.Historical)
}

// caseGroup is one group: its events in case order (cases.Less) in the
// sort's run format, each with its Line as the per-case pass reads a
// stored file's event (no source line; quality.FlagLater and
// quality.FlagOutsideWindow packed), and its case keys, sorted and
// distinct (uvarint length, bytes).
type caseGroup struct {
	Events blob.ID `json:"events"`
	Keys   blob.ID `json:"keys"`
	Cases  int64   `json:"cases"`
	Count  int64   `json:"count"` // events
	Bytes  int64   `json:"bytes"` // of Events
	// Table is the group's part of the case table (cases.Row in case
	// order, in the compact form of partRow); Subjects and Resources its distinct subject and resource
	// keys, sorted (as Keys).
	Table     blob.ID `json:"table"`
	Subjects  blob.ID `json:"subjects"`
	Resources blob.ID `json:"resources"`
	// Summary and Quality are the states of the per-case computation over
	// the group's cases: the summary's case part with its process views
	// (summary.Accumulator, format 5) and the case-level quality
	// accumulator (quality.Accumulator state).
	Summary blob.ID `json:"summary"`
	Quality blob.ID `json:"quality"`
	// Kept are the cases the summary covers; Later, Outside and Copies
	// the events it left out (summary.Counts).
	Kept    int64 `json:"kept"`
	Later   int64 `json:"later,omitempty"`
	Outside int64 `json:"outside,omitempty"`
	Copies  int64 `json:"copies,omitempty"`
	// Upload says the group holds events of the upload that made it, and
	// its states saw them as that commit's pass does (with their source
	// lines and the time pass's flags): right for that version's figures,
	// not for a later one's, which sees them as stored. The next commit
	// therefore rewrites it like a touched group (its states recomputed
	// from its stored events).
	Upload bool `json:"upload,omitempty"`
}

// blobs lists the group's blobs.
func (g *caseGroup) blobs() []blob.ID {
	return []blob.ID{g.Events, g.Keys, g.Table, g.Subjects, g.Resources, g.Summary, g.Quality}
}

// Variables only so that tests can lower them.
var (
	// groupMaxEvents cuts a full pass's output into groups of about this
	// many events (at case boundaries; more when the version would
	// otherwise make over maxGroups/2), so that a later case touched
	// rewrites one of them, not the whole version.
	groupMaxEvents int64 = 1 << 20
	// maxGroups bounds the groups of a version (so the merge's fan-in):
	// beyond it the smallest groups no case of the upload is in are
	// compacted into one, leaving about half as many.
	maxGroups = 48
)

// filesDigest identifies a file list by its blobs, in order.
func filesDigest(files []FileEntry) string {
	h := sha256.New()
	for _, f := range files {
		h.Write(f.SHA256[:])
	}
	return hex.EncodeToString(h.Sum(nil))
}

func windowMicros(ds *Dataset) (from, to int64) {
	if ds.WindowFrom != nil {
		from = ds.WindowFrom.UnixMicro()
	}
	if ds.WindowTo != nil {
		to = ds.WindowTo.UnixMicro()
	}
	return from, to
}

// groupsToExtend returns the parent's case groups when the new version is
// exactly the parent's files plus entry's (an append that neither rewrote
// nor dropped a file) and the groups match the parent; else nil, and the
// commit makes its groups by one full pass.
func (s *Store) groupsToExtend(ds *Dataset, parent *Version, files []FileEntry, entry *FileEntry, mode Mode) *caseGroupSet {
	if s.noCaseGroups || mode != ModeAppend || parent == nil || entry == nil {
		return nil
	}
	pf := parent.Manifest.Files
	if len(files) != len(pf)+1 || files[len(pf)].SHA256 != entry.SHA256 {
		return nil
	}
	for i := range pf {
		if files[i].SHA256 != pf[i].SHA256 {
			return nil
		}
	}
	set, err := s.loadGroups(ds.Ref().String())
	if err != nil || set == nil {
		return nil
	}
	from, to := windowMicros(ds)
	if set.Version != parent.Number || set.Files != filesDigest(pf) || set.WindowFrom != from || set.WindowTo != to || set.Options != groupOptions(ds) {
		return nil
	}
	return set
}

func (s *Store) loadGroups(ref string) (*caseGroupSet, error) {
	var set *caseGroupSet
	err := s.db.View(func(tx *bolt.Tx) error {
		b := tx.Bucket(bucketCaseGroups).Get([]byte(ref))
		if b == nil {
			return nil
		}
		set = new(caseGroupSet)
		return getJSON(tx.Bucket(bucketCaseGroups), []byte(ref), set, "case groups of "+ref)
	})
	return set, err
}

// putGroups stores the groups of version n of ref in tx and returns the
// set they replace, if any.
func putGroups(tx *bolt.Tx, ref string, n int, files []FileEntry, set *caseGroupSet) (*caseGroupSet, error) {
	b := tx.Bucket(bucketCaseGroups)
	var old *caseGroupSet
	if b.Get([]byte(ref)) != nil {
		old = new(caseGroupSet)
		if err := getJSON(b, []byte(ref), old, "case groups of "+ref); err != nil {
			old = nil // replaced all the same; the collector sweeps its blobs
		}
	}
	if set == nil {
		return old, b.Delete([]byte(ref))
	}
	set.Version, set.Files = n, filesDigest(files)
	return old, putJSON(b, []byte(ref), set)
}

// dropGroups deletes the blobs of a replaced group set that no stored set
// names and no commit in progress holds (as CollectGarbage decides: under
// s.mu, so no hold is taken or released meanwhile). Blobs are
// content-addressed, so another dataset's groups may share one. A failure
// is only logged: the collector sweeps what is left.
func (s *Store) dropGroups(ctx context.Context, old, cur *caseGroupSet) {
	if old == nil {
		return
	}
	keep := map[blob.ID]bool{}
	if cur != nil {
		for _, g := range cur.Groups {
			for _, id := range g.blobs() {
				keep[id] = true
			}
		}
	}
	s.mu.Lock()
	defer s.mu.Unlock()
	refs := map[blob.ID]bool{}
	if err := s.db.View(func(tx *bolt.Tx) error { return groupBlobs(tx, nil, refs) }); err != nil {
		s.opt.Logger.Warn("case groups: replaced blobs left for the collector", "err", err)
		return
	}
	for _, g := range old.Groups {
		for _, id := range g.blobs() {
			if keep[id] || refs[id] || s.pending[id] > 0 {
				continue
			}
			if err := s.blobs.Delete(ctx, id); err != nil {
				s.opt.Logger.Warn("case groups: replaced blob left for the collector", "blob", id.String(), "err", err)
				return
			}
			refs[id] = true // deleted once
		}
	}
}

// groupBlobs adds the blobs of every stored group set to refs, except
// those of deleted datasets.
func groupBlobs(tx *bolt.Tx, deleted map[DatasetRef]bool, refs map[blob.ID]bool) error {
	return tx.Bucket(bucketCaseGroups).ForEach(func(k, v []byte) error {
		project, name, _, err := SplitRef(string(k))
		if err == nil && deleted[DatasetRef{Project: project, Name: name}] {
			return nil
		}
		var set caseGroupSet
		if err := getJSON(tx.Bucket(bucketCaseGroups), k, &set, "case groups of "+string(k)); err != nil {
			return fmt.Errorf("gc: %w", err)
		}
		for _, g := range set.Groups {
			for _, id := range g.blobs() {
				refs[id] = true
			}
		}
		return nil
	})
}

// groupStats says what one commit did with the groups, for tests and logs.
type groupStats struct {
	Incremental bool
	Groups      int   // groups of the new version
	Touched     int   // groups of the parent rewritten
	Compacted   int   // small groups of the parent merged into one
	Read        int64 // events of the parent's groups read again
	Written     int64 // events written to new groups
}

// testHookGroups, when set by a test, receives each commit's groupStats;
// testHookGroupsWritten runs once a commit's groups are stored, before its
// transaction.
// testHookGroupBlob receives the id of every group blob stored.
var (
	testHookGroups        func(groupStats)
	testHookGroupsWritten func()
	testHookGroupBlob     func(blob.ID)
)

// groupBuild makes the case groups of the version a commit makes, and the
// version's per-case figures from them. The per-case pass's stream (events
// in case order) goes through it: each case to the group it belongs in,
// where it is written and fed to the group's own per-case computation
// (groupWriter). With the parent's groups (incremental), only the
// upload's events and those of the groups holding a case of the upload
// are in the stream; the cases of the upload move, with all their events,
// into one new group; each group they came from is rewritten without
// them; every other group is kept as it is, states and all. Without
// (full), every case goes to new groups of about chunk events. The
// version's figures are then the merge of every group's states.
type groupBuild struct {
	s        *Store
	ctx      context.Context
	ds       *Dataset
	prev     *caseGroupSet
	excl     *exclusion // of the upload's file
	qopt     quality.Options
	terminal []schema.EventType
	chunk    int64

	// incremental only
	upKeys  *keyCursor   // the upload's case keys, sorted
	touched []int        // indexes into prev.Groups, rewritten
	kept    []bool       // by index into prev.Groups: kept as it is
	cursors []*keyCursor // case keys of each group read for rewriting
	dest    []*groupWriter
	closers []io.Closer

	// table, in a full pass, is the version's case table, written as the
	// cases pass: the groups then come one after another in case order,
	// which is the table's. own, in a full pass over the upload's events
	// alone, are the upload's own per-case observers, fed the same way.
	table *caseTableWriter
	own   []cases.Observer

	fresh   *groupWriter // the upload's cases (incremental), the current chunk (full)
	done    []*groupWriter
	cur     *groupWriter // the current case's group (nil: kept)
	started bool
	last    string
	stats   groupStats
	from    int64
	to      int64
}

// newGroupBuild prepares the groups of the version being made by cp's
// pass. prev is the parent's groups to extend (nil: a full pass), rows the
// events of the version (for the size of a full pass's groups).
func (s *Store) newGroupBuild(ctx context.Context, ds *Dataset, prev *caseGroupSet, qopt quality.Options, rows int64, cp *CasePass) (*groupBuild, error) {
	g := &groupBuild{s: s, ctx: ctx, ds: ds, prev: prev, qopt: qopt, terminal: cp.Terminal}
	if !qopt.UploadedAt.IsZero() {
		g.excl = &exclusion{later: qopt.UploadedAt.UnixMicro()}
	} else {
		g.excl = &exclusion{}
	}
	g.from, g.to = windowMicros(ds)
	g.excl.from, g.excl.to = g.from, g.to
	g.chunk = max(groupMaxEvents, rows/int64(maxGroups/2)+1)
	if prev == nil {
		return g, nil
	}
	g.stats.Incremental = true
	kf, err := cp.uploadKeys()
	if err != nil {
		return nil, err
	}
	g.closers = append(g.closers, kf)
	if _, err := kf.Seek(0, io.SeekStart); err != nil {
		g.close()
		return nil, fmt.Errorf("case groups: %w", err)
	}
	g.upKeys = newKeyCursor(kf)
	if err := g.findTouched(); err != nil {
		g.close()
		return nil, err
	}
	if _, err := kf.Seek(0, io.SeekStart); err != nil {
		g.close()
		return nil, fmt.Errorf("case groups: %w", err)
	}
	g.upKeys = newKeyCursor(kf)
	// The events of the groups read for rewriting join the pass as
	// sorted inputs; the kept ones are not read.
	for i := range prev.Groups {
		if g.kept[i] {
			continue
		}
		r, err := s.blobs.Open(ctx, prev.Groups[i].Events)
		if err != nil {
			g.close()
			cp.srt.inputs = nil
			return nil, fmt.Errorf("case groups: %w", err)
		}
		g.closers = append(g.closers, r)
		cp.srt.addSorted(io.NewSectionReader(r, 0, r.Size()))
		g.stats.Read += prev.Groups[i].Count
	}
	return g, nil
}

// findTouched marks the groups holding a case of the upload (a merge of
// the upload's sorted keys with every group's), and, when the groups
// would then be too many, the smallest others for compaction.
func (g *groupBuild) findTouched() error {
	n := len(g.prev.Groups)
	g.kept = make([]bool, n)
	cs := make([]*keyCursor, 0, n)
	for i, gr := range g.prev.Groups {
		g.kept[i] = true
		r, err := g.s.blobs.Open(g.ctx, gr.Keys)
		if err != nil {
			return fmt.Errorf("case groups: %w", err)
		}
		g.closers = append(g.closers, r)
		c := newKeyCursor(io.NewSectionReader(r, 0, r.Size()))
		c.group = i
		ok, err := c.next()
		if err != nil {
			return err
		}
		if ok {
			cs = append(cs, c)
		}
	}
	h := kway.New(byKey, cs...)
	for h.Len() > 0 {
		ok, err := g.upKeys.next()
		if err != nil {
			return err
		}
		if !ok {
			break
		}
		u := g.upKeys.cur
		for h.Len() > 0 && h.Top().cur < u {
			if err := h.Advance((*keyCursor).next); err != nil {
				return err
			}
		}
		if h.Len() > 0 && h.Top().cur == u {
			g.kept[h.Top().group] = false // keys are disjoint across groups
			h.Pop()
		}
	}
	var compact []int
	for i := range g.kept {
		if g.prev.Groups[i].Upload {
			g.kept[i] = false // its states recomputed as stored
		}
		if !g.kept[i] {
			g.touched = append(g.touched, i)
		}
	}
	// Kept groups, one rewritten per touched one, the new one.
	count := n + 1
	if count > maxGroups {
		idx := []int{}
		for i := range g.kept {
			if g.kept[i] {
				idx = append(idx, i)
			}
		}
		slices.SortStableFunc(idx, func(a, b int) int { return cmp.Compare(g.prev.Groups[a].Count, g.prev.Groups[b].Count) })
		for _, i := range idx {
			if count <= maxGroups/2 {
				break
			}
			compact = append(compact, i)
			g.kept[i] = false
			count--
		}
	}
	// Cursors over the keys of each group read for rewriting: a touched
	// group is rewritten on its own, the compacted ones into one.
	var shared *groupWriter
	for _, i := range append(slices.Clone(g.touched), compact...) {
		r, err := g.s.blobs.Open(g.ctx, g.prev.Groups[i].Keys)
		if err != nil {
			return fmt.Errorf("case groups: %w", err)
		}
		g.closers = append(g.closers, r)
		c := newKeyCursor(io.NewSectionReader(r, 0, r.Size()))
		if _, err := c.next(); err != nil {
			return err
		}
		g.cursors = append(g.cursors, c)
		var w *groupWriter
		if slices.Contains(compact, i) {
			if shared == nil {
				if shared, err = g.newWriter(); err != nil {
					return err
				}
			}
			w = shared
		} else if w, err = g.newWriter(); err != nil {
			return err
		}
		g.dest = append(g.dest, w)
	}
	g.stats.Touched, g.stats.Compacted = len(g.touched), len(compact)
	return nil
}

func (g *groupBuild) newWriter() (*groupWriter, error) {
	w, err := newGroupWriter(g.s.opt.TempDir, g.qopt, summaryOptions(g.ds), g.terminal, g.own...)
	if err != nil {
		return nil, err
	}
	// The version's case table takes the rows the part writes, in the
	// same order (the part's Case comes where the table's would).
	w.part.table = g.table
	g.done = append(g.done, w)
	return w, nil
}

// route writes e (in the stream's case order, its Line as the pass has
// it) to its case's group and returns that group (nil: a kept group's).
func (g *groupBuild) route(e *schema.Event) (*groupWriter, error) {
	if !g.started || e.CaseID != g.last {
		w, err := g.destFor(e.CaseID)
		if err != nil {
			return nil, err
		}
		g.cur, g.last, g.started = w, e.CaseID, true
		if w != nil {
			if err := w.startCase(e.CaseID); err != nil {
				return nil, err
			}
		}
	}
	if g.cur == nil {
		return nil, nil
	}
	line := e.Line
	if e.Line&uploadMark != 0 {
		g.cur.upload = true
		// As a later pass reads it from the stored file: no source line,
		// the exclusion flags of the file.
		e.Line = quality.PackLine(0, g.excl.flags(e))
	}
	g.stats.Written++
	err := g.cur.write(e)
	e.Line = line
	return g.cur, err
}

func (g *groupBuild) destFor(key string) (*groupWriter, error) {
	if g.prev == nil {
		if g.fresh == nil || g.fresh.count >= g.chunk {
			w, err := g.newWriter()
			if err != nil {
				return nil, err
			}
			g.fresh = w
		}
		return g.fresh, nil
	}
	ok, err := g.upKeys.seek(key)
	if err != nil {
		return nil, err
	}
	if ok {
		if g.fresh == nil {
			if g.fresh, err = g.newWriter(); err != nil {
				return nil, err
			}
		}
		return g.fresh, nil
	}
	for i, c := range g.cursors {
		ok, err := c.seek(key)
		if err != nil {
			return nil, err
		}
		if ok {
			return g.dest[i], nil
		}
	}
	return nil, nil // a kept group's case
}

// run is the per-case pass over cp's stream (CasePass.RunSplit's job, with
// each case's computation in its group): the upload's own events also go
// to mine. The groups' per-case computations run on another goroutine,
// fed in batches in the stream's order, as in RunSplit; each computes a
// case once for its case-level figures and its summaries alike, unless
// the summaries drop some of the case's events (cases.Split).
func (g *groupBuild) run(cp *CasePass, mine []cases.Observer) error {
	var bm *cases.Builder
	if len(mine) > 0 {
		bm = cases.NewBuilder(mine...)
		bm.Terminal = g.terminal
	}
	type item struct {
		e schema.Event
		w *groupWriter
	}
	var kf keptFilter
	var last *groupWriter
	kb := newBatches(keptBatchEvents, keptBatches, func(bt []item) error {
		for i := range bt {
			e, w := &bt[i].e, bt[i].w
			if w != last && last != nil {
				// A case is whole in its group: the last group's case in
				// hand has ended. Flushed now, it reaches observers the
				// groups share (the case table) before the next one. In a
				// full pass that group is done (the groups come one after
				// another): sealed, its accumulators go.
				if g.prev == nil {
					if err := last.seal(); err != nil {
						return err
					}
				} else {
					last.split.Flush()
				}
			}
			last = w
			w.split.Add(e, kf.keep(e, &w.kc))
		}
		return nil
	})
	err := cp.srt.Finish(func(e *schema.Event) error {
		w, err := g.route(e)
		if err != nil {
			return err
		}
		marked := e.Line&uploadMark != 0
		e.Line &^= uploadMark
		if marked && bm != nil {
			bm.Add(e)
		}
		if w == nil {
			return nil
		}
		if err := w.distinct(e); err != nil {
			return err
		}
		return kb.add(item{*e, w})
	})
	if err = errors.Join(err, kb.close()); err != nil {
		return err
	}
	if bm != nil {
		bm.Flush()
	}
	return nil
}

// finish stores the new groups (held until release) and returns the
// version's group set.
func (g *groupBuild) finish(ctx context.Context) (*caseGroupSet, []func(), error) {
	set := &caseGroupSet{WindowFrom: g.from, WindowTo: g.to, Options: groupOptions(g.ds)}
	if g.prev != nil {
		for i, gr := range g.prev.Groups {
			if g.kept[i] {
				set.Groups = append(set.Groups, gr)
			}
		}
	}
	var releases []func()
	fail := func(err error) (*caseGroupSet, []func(), error) {
		for _, r := range releases {
			r()
		}
		return nil, nil, err
	}
	seen := map[*groupWriter]bool{}
	for _, w := range g.done {
		if seen[w] {
			continue
		}
		seen[w] = true
		if w.count == 0 {
			continue
		}
		gr, files, err := w.finish()
		if err != nil {
			return fail(err)
		}
		for i, id := range gr.blobs() {
			if testHookGroupBlob != nil {
				testHookGroupBlob(id)
			}
			releases = append(releases, g.s.hold(id))
			if err := g.s.putTemp(ctx, id, files[i]); err != nil {
				return fail(fmt.Errorf("case groups: %w", err))
			}
		}
		set.Groups = append(set.Groups, *gr)
	}
	g.stats.Groups = len(set.Groups)
	if testHookGroups != nil {
		testHookGroups(g.stats)
	}
	return set, releases, nil
}

func (g *groupBuild) close() {
	for _, c := range g.closers {
		c.Close()
	}
	g.closers = nil
	for _, w := range g.done {
		w.remove()
	}
}

// groupWriter is one group being made: its events and case keys written
// to temporary files (hashed as they go), and its own per-case
// computation: the case-level quality accumulator and the case table part
// (all its cases), the summary's case part with its process views (the
// cases of the events summaries keep, fed on the pass's other goroutine),
// and its distinct subjects and resources.
type groupWriter struct {
	ev, keys     *os.File
	evb, kw      *bufio.Writer
	evw          *runWriter // over evb
	evh, kh      hash.Hash
	evn          int64
	count, cases int64
	enc          []byte
	removed      bool

	split     *cases.Split
	qacc      *quality.Accumulator
	sum       *summary.Accumulator
	part      *partWriter
	subjects  *distinctCounter
	resources *distinctCounter
	lastSubj  string
	lastRes   string
	kc        summary.Counts
	temps     []*os.File // state files, removed with the writer
	upload    bool       // it holds events of the upload (caseGroup.Upload)
	sealed    *sealedStates
}

// sealedStates are a group's summary and quality states written to their
// temp files, its accumulators dropped (groupWriter.seal).
type sealedStates struct {
	kept  int64
	files [2]*os.File // summary, quality
	ids   [2]blob.ID
}

// groupDistinctMemory bounds each group's distinct-key sets before they
// spill (a few groups are made at once).
const groupDistinctMemory = 1 << 20

func newGroupWriter(dir string, qopt quality.Options, sopt summary.Options, terminal []schema.EventType, extra ...cases.Observer) (*groupWriter, error) {
	ev, err := os.CreateTemp(dir, "group-*")
	if err != nil {
		return nil, fmt.Errorf("case groups: %w", err)
	}
	keys, err := os.CreateTemp(dir, "group-keys-*")
	if err != nil {
		ev.Close()
		os.Remove(ev.Name())
		return nil, fmt.Errorf("case groups: %w", err)
	}
	w := &groupWriter{ev: ev, keys: keys, evh: sha256.New(), kh: sha256.New()}
	w.evb = bufio.NewWriterSize(io.MultiWriter(ev, w.evh, countWriter{&w.evn}), runBufSize)
	w.evw = newRunWriter(w.evb)
	w.kw = bufio.NewWriterSize(io.MultiWriter(keys, w.kh), runBufSize)
	if w.part, err = newPartWriter(dir); err != nil {
		w.remove()
		return nil, err
	}
	w.qacc = quality.NewAccumulator(qopt)
	w.sum = summary.New(sopt)
	w.split = cases.NewSplit(terminal, append([]cases.Observer{w.qacc, w.part}, extra...), []cases.Observer{w.sum, w.sum.Process()})
	w.subjects = newDistinctCounter(dir, groupDistinctMemory)
	w.resources = newDistinctCounter(dir, groupDistinctMemory)
	return w, nil
}

func (w *groupWriter) startCase(key string) error {
	w.cases++
	w.enc = binary.AppendUvarint(w.enc[:0], uint64(len(key)))
	w.enc = append(w.enc, key...)
	_, err := w.kw.Write(w.enc)
	return err
}

func (w *groupWriter) write(e *schema.Event) error {
	w.count++
	w.enc = encodeEvent(w.enc[:0], e)
	_, err := w.evw.Write(w.enc)
	return err
}

// distinct counts e's subject and resource among the group's.
func (w *groupWriter) distinct(e *schema.Event) error {
	if e.SubjectID != "" && e.SubjectID != w.lastSubj {
		if err := w.subjects.Add(e.SubjectID); err != nil {
			return err
		}
		w.lastSubj = strings.Clone(e.SubjectID)
	}
	if e.ResourceID != "" && e.ResourceID != w.lastRes {
		if err := w.resources.Add(e.ResourceID); err != nil {
			return err
		}
		w.lastRes = strings.Clone(e.ResourceID)
	}
	return nil
}

// seal flushes the group's last case and writes its summary and quality
// states to temp files, dropping its accumulators and its split: the
// group's per-case figures are then done. In a full pass a group gets no
// event once the next begins, so it is sealed then, and the groups'
// accumulators (each up to its key caps where a code column holds free
// text) do not all wait for the end of the pass.
func (w *groupWriter) seal() error {
	if w.sealed != nil {
		return nil
	}
	w.split.Flush()
	st := &sealedStates{kept: w.split.KeptCases()}
	for i, m := range []interface{ MarshalBinary() ([]byte, error) }{w.sum, w.qacc} {
		b, err := m.MarshalBinary()
		if err != nil {
			return fmt.Errorf("case groups: state: %w", err)
		}
		if st.files[i], st.ids[i], err = w.tempBlob(func(out io.Writer) error { _, err := out.Write(b); return err }); err != nil {
			return err
		}
	}
	w.sealed, w.split, w.sum, w.qacc = st, nil, nil, nil
	return nil
}

// finish completes the group (after the pass) and returns it with its
// files, in the order of caseGroup.blobs, each at its start.
func (w *groupWriter) finish() (*caseGroup, []*os.File, error) {
	if err := w.seal(); err != nil {
		return nil, nil, err
	}
	if err := w.evw.Close(); err != nil {
		return nil, nil, fmt.Errorf("case groups: %w", err)
	}
	for _, x := range []struct {
		b *bufio.Writer
		f *os.File
	}{{w.evb, w.ev}, {w.kw, w.keys}} {
		if err := x.b.Flush(); err != nil {
			return nil, nil, fmt.Errorf("case groups: %w", err)
		}
		if _, err := x.f.Seek(0, io.SeekStart); err != nil {
			return nil, nil, fmt.Errorf("case groups: %w", err)
		}
	}
	gr := &caseGroup{Events: blob.ID(w.evh.Sum(nil)), Keys: blob.ID(w.kh.Sum(nil)), Cases: w.cases, Count: w.count, Bytes: w.evn,
		Kept: w.sealed.kept, Later: int64(w.kc.LaterThanUpload), Outside: int64(w.kc.OutsideWindow), Copies: int64(w.kc.ExactDuplicates),
		Upload: w.upload}
	pf, pid, err := w.part.finish()
	if err != nil {
		return nil, nil, err
	}
	gr.Table = pid
	files := []*os.File{w.ev, w.keys, pf}
	for _, x := range []struct {
		d  *distinctCounter
		id *blob.ID
	}{{w.subjects, &gr.Subjects}, {w.resources, &gr.Resources}} {
		f, id, err := w.tempBlob(func(out io.Writer) error {
			var b []byte
			return x.d.each(func(v string) error {
				b = binary.AppendUvarint(b[:0], uint64(len(v)))
				b = append(b, v...)
				_, err := out.Write(b)
				return err
			})
		})
		if err != nil {
			return nil, nil, err
		}
		*x.id = id
		files = append(files, f)
	}
	gr.Summary, gr.Quality = w.sealed.ids[0], w.sealed.ids[1]
	files = append(files, w.sealed.files[0], w.sealed.files[1])
	return gr, files, nil
}

// tempBlob writes a file through fn and returns it, at its start, with
// its id.
func (w *groupWriter) tempBlob(fn func(io.Writer) error) (*os.File, blob.ID, error) {
	f, err := os.CreateTemp(filepath.Dir(w.ev.Name()), "group-part-*")
	if err != nil {
		return nil, blob.ID{}, fmt.Errorf("case groups: %w", err)
	}
	w.temps = append(w.temps, f)
	h := sha256.New()
	bw := bufio.NewWriterSize(io.MultiWriter(f, h), runBufSize)
	if err := fn(bw); err != nil {
		return nil, blob.ID{}, fmt.Errorf("case groups: %w", err)
	}
	if err := bw.Flush(); err != nil {
		return nil, blob.ID{}, fmt.Errorf("case groups: %w", err)
	}
	if _, err := f.Seek(0, io.SeekStart); err != nil {
		return nil, blob.ID{}, fmt.Errorf("case groups: %w", err)
	}
	return f, blob.ID(h.Sum(nil)), nil
}

func (w *groupWriter) remove() {
	if w.removed {
		return
	}
	w.removed = true
	w.evw.Close() // its goroutines end (closed already after finish)
	w.ev.Close()
	w.keys.Close()
	os.Remove(w.ev.Name())
	os.Remove(w.keys.Name())
	if w.part != nil {
		w.part.remove()
	}
	for _, f := range w.temps {
		f.Close()
		os.Remove(f.Name())
	}
	if w.subjects != nil {
		w.subjects.Close()
		w.resources.Close()
	}
}

// figures merges the states of every group of set into the version's
// figures: the summary's case part (into total, which holds the files'
// event-level states), the case-level quality report, the exact counts,
// and, with cw, the case table (the groups' parts merged by case key).
func (s *Store) groupFigures(ctx context.Context, ds *Dataset, set *caseGroupSet, total *summary.Accumulator, qopt quality.Options, cw *caseTableWriter) (*quality.Report, error) {
	qacc := quality.NewAccumulator(qopt)
	total.Process() // the views, empty without cases, as one pass gives them
	var c summary.Counts
	for _, gr := range set.Groups {
		sb, err := s.blobBytes(ctx, gr.Summary)
		if err != nil {
			return nil, err
		}
		ga := summary.New(summaryOptions(ds))
		if err := ga.UnmarshalBinary(sb); err != nil {
			return nil, fmt.Errorf("case groups: summary state: %w", err)
		}
		if err := total.Merge(ga); err != nil {
			return nil, fmt.Errorf("case groups: summary: %w", err)
		}
		qb, err := s.blobBytes(ctx, gr.Quality)
		if err != nil {
			return nil, err
		}
		gq := quality.NewAccumulator(qopt)
		if err := gq.UnmarshalBinary(qb); err != nil {
			return nil, fmt.Errorf("case groups: quality state: %w", err)
		}
		if err := qacc.Merge(gq); err != nil {
			return nil, fmt.Errorf("case groups: quality: %w", err)
		}
		c.Cases += uint64(gr.Kept)
		c.LaterThanUpload += uint64(gr.Later)
		c.OutsideWindow += uint64(gr.Outside)
		c.ExactDuplicates += uint64(gr.Copies)
	}
	var err error
	if c.Subjects, err = s.distinctAcross(ctx, set, func(g *caseGroup) blob.ID { return g.Subjects }); err != nil {
		return nil, err
	}
	if c.Resources, err = s.distinctAcross(ctx, set, func(g *caseGroup) blob.ID { return g.Resources }); err != nil {
		return nil, err
	}
	total.SetCounts(c)
	if cw != nil {
		if err := s.mergeCaseTables(ctx, set, cw); err != nil {
			return nil, err
		}
	}
	return qacc.Report(), nil
}

func (s *Store) blobBytes(ctx context.Context, id blob.ID) ([]byte, error) {
	r, err := s.blobs.Open(ctx, id)
	if err != nil {
		return nil, fmt.Errorf("case groups: %w", err)
	}
	defer r.Close()
	b, err := io.ReadAll(r)
	if err != nil {
		return nil, fmt.Errorf("case groups: %w", err)
	}
	return b, nil
}

// distinctAcross counts the distinct keys of the groups' sorted key files
// (a k-way merge: a key several groups name counts once).
func (s *Store) distinctAcross(ctx context.Context, set *caseGroupSet, file func(*caseGroup) blob.ID) (uint64, error) {
	cs := make([]*keyCursor, 0, len(set.Groups))
	for i := range set.Groups {
		r, err := s.blobs.Open(ctx, file(&set.Groups[i]))
		if err != nil {
			return 0, fmt.Errorf("case groups: %w", err)
		}
		defer r.Close()
		c := newKeyCursor(io.NewSectionReader(r, 0, r.Size()))
		ok, err := c.next()
		if err != nil {
			return 0, err
		}
		if ok {
			cs = append(cs, c)
		}
	}
	h := kway.New(byKey, cs...)
	var n uint64
	var last string
	for h.Len() > 0 {
		if n == 0 || h.Top().cur != last {
			n++
			last = h.Top().cur
		}
		if err := h.Advance((*keyCursor).next); err != nil {
			return 0, err
		}
	}
	return n, nil
}

// mergeCaseTables writes the rows of every group's case table part to cw
// in case order (parts hold disjoint cases, each in order).
func (s *Store) mergeCaseTables(ctx context.Context, set *caseGroupSet, cw *caseTableWriter) error {
	type part struct {
		r   *bufio.Reader
		row cases.Row
		ok  bool
	}
	parts := make([]*part, 0, len(set.Groups))
	for _, gr := range set.Groups {
		r, err := s.blobs.Open(ctx, gr.Table)
		if err != nil {
			return fmt.Errorf("case groups: %w", err)
		}
		defer r.Close()
		p := &part{r: bufio.NewReaderSize(io.NewSectionReader(r, 0, r.Size()), runBufSize)}
		if p.ok, err = readPartRow(p.r, &p.row); err != nil {
			return err
		}
		if p.ok {
			parts = append(parts, p)
		}
	}
	h := kway.New(func(a, b *part) bool { return a.row.CaseID < b.row.CaseID }, parts...)
	for h.Len() > 0 {
		best := h.Top()
		cw.add(&best.row)
		var err error
		if best.ok, err = readPartRow(best.r, &best.row); err != nil {
			return err
		}
		if best.ok {
			h.Fix()
		} else {
			h.Pop()
		}
	}
	return cw.err
}

// partWriter is a group's case table part being made: a cases.Observer
// that writes each case's row, in the compact form of appendPartRow, to a
// temporary file, hashing it. When table is not nil (a full pass), the
// row goes to the version's case table too, made once for both.
type partWriter struct {
	f     *os.File
	w     *bufio.Writer
	h     hash.Hash
	b     []byte
	err   error
	table *caseTableWriter
}

func newPartWriter(dir string) (*partWriter, error) {
	f, err := os.CreateTemp(dir, "group-table-*")
	if err != nil {
		return nil, fmt.Errorf("case groups: %w", err)
	}
	p := &partWriter{f: f, h: sha256.New()}
	p.w = bufio.NewWriterSize(io.MultiWriter(f, p.h), runBufSize)
	return p, nil
}

func (p *partWriter) Event(*schema.Event)    {}
func (p *partWriter) Wait(*cases.Wait)       {}
func (p *partWriter) Service(*cases.Service) {}
func (p *partWriter) Case(r *cases.Record) {
	if p.err != nil {
		return
	}
	row := r.Row()
	if p.table != nil {
		p.table.add(&row)
	}
	p.b = appendPartRow(p.b[:0], &row)
	_, p.err = p.w.Write(p.b)
}

// finish returns the part's file, at its start, and its id.
func (p *partWriter) finish() (*os.File, blob.ID, error) {
	if p.err == nil {
		p.err = p.w.Flush()
	}
	if p.err == nil {
		_, p.err = p.f.Seek(0, io.SeekStart)
	}
	if p.err != nil {
		return nil, blob.ID{}, fmt.Errorf("case groups: case table: %w", p.err)
	}
	return p.f, blob.ID(p.h.Sum(nil)), nil
}

func (p *partWriter) remove() {
	p.f.Close()
	os.Remove(p.f.Name())
}

// The compact form of a case table row in a group's part: the strings as
// uvarint length + bytes, integers and instants (µs) as varints, doubles
// as 8 bytes little-endian, and a byte saying which optional columns are
// present.
const (
	partSubject = 1 << iota
	partArrival
	partStart
	partEnd
	partWait
	partService
	partStay
)

func appendPartRow(b []byte, r *cases.Row) []byte {
	str := func(s string) {
		b = binary.AppendUvarint(b, uint64(len(s)))
		b = append(b, s...)
	}
	var has byte
	for i, p := range []bool{r.SubjectID != nil, r.ArrivalAt != nil, r.StartAt != nil, r.EndAt != nil, r.WaitSeconds != nil, r.ServiceSeconds != nil, r.StaySeconds != nil} {
		if p {
			has |= 1 << i
		}
	}
	str(r.CaseID)
	str(r.Site)
	b = binary.AppendVarint(b, int64(r.Sites))
	b = append(b, has)
	if r.SubjectID != nil {
		str(*r.SubjectID)
	}
	b = binary.AppendVarint(b, r.FirstAt.UnixMicro())
	b = binary.AppendVarint(b, r.LastAt.UnixMicro())
	b = binary.AppendVarint(b, r.Events)
	for _, t := range []*time.Time{r.ArrivalAt, r.StartAt, r.EndAt} {
		if t != nil {
			b = binary.AppendVarint(b, t.UnixMicro())
		}
	}
	b = binary.LittleEndian.AppendUint64(b, math.Float64bits(r.DurationSeconds))
	for _, f := range []*float64{r.WaitSeconds, r.ServiceSeconds, r.StaySeconds} {
		if f != nil {
			b = binary.LittleEndian.AppendUint64(b, math.Float64bits(*f))
		}
	}
	str(r.Outcome)
	b = binary.AppendVarint(b, int64(r.Activities))
	str(r.Variant)
	return b
}

// readPartRow reads the next row of a part into r (fresh values for its
// optional columns); false at the end.
func readPartRow(br *bufio.Reader, r *cases.Row) (bool, error) {
	if _, err := br.Peek(1); err == io.EOF {
		return false, nil
	}
	var err error
	str := func() string {
		if err != nil {
			return ""
		}
		var n uint64
		if n, err = binary.ReadUvarint(br); err != nil {
			return ""
		}
		b := make([]byte, n)
		_, err = io.ReadFull(br, b)
		return string(b)
	}
	vint := func() int64 {
		if err != nil {
			return 0
		}
		var v int64
		v, err = binary.ReadVarint(br)
		return v
	}
	f64 := func() float64 {
		if err != nil {
			return 0
		}
		var b [8]byte
		_, err = io.ReadFull(br, b[:])
		return math.Float64frombits(binary.LittleEndian.Uint64(b[:]))
	}
	at := func() time.Time { return time.UnixMicro(vint()).UTC() }
	*r = cases.Row{CaseID: str(), Site: str(), Sites: int32(vint())}
	var has byte
	if err == nil {
		has, err = br.ReadByte()
	}
	if has&partSubject != 0 {
		v := str()
		r.SubjectID = &v
	}
	r.FirstAt, r.LastAt, r.Events = at(), at(), vint()
	for i, p := range []**time.Time{&r.ArrivalAt, &r.StartAt, &r.EndAt} {
		if has&(partArrival<<i) != 0 {
			v := at()
			*p = &v
		}
	}
	r.DurationSeconds = f64()
	for i, p := range []**float64{&r.WaitSeconds, &r.ServiceSeconds, &r.StaySeconds} {
		if has&(partWait<<i) != 0 {
			v := f64()
			*p = &v
		}
	}
	r.Outcome = str()
	r.Activities = int32(vint())
	r.Variant = str()
	if err != nil {
		return false, fmt.Errorf("case groups: case table part: %w", err)
	}
	return true, nil
}

// keyCursor reads a sorted file of distinct keys.
type keyCursor struct {
	r     *bufio.Reader
	cur   string
	ok    bool // cur is valid
	end   bool
	group int
}

func newKeyCursor(r io.Reader) *keyCursor {
	return &keyCursor{r: bufio.NewReaderSize(r, runBufSize)}
}

func (c *keyCursor) next() (bool, error) {
	if c.end {
		return false, nil
	}
	n, err := binary.ReadUvarint(c.r)
	if err == io.EOF {
		c.end, c.ok = true, false
		return false, nil
	}
	if err != nil {
		return false, fmt.Errorf("case groups: keys: %w", err)
	}
	b := make([]byte, n)
	if _, err := io.ReadFull(c.r, b); err != nil {
		return false, fmt.Errorf("case groups: keys: %w", err)
	}
	c.cur, c.ok = string(b), true
	return true, nil
}

// seek moves to the first key at or after k and reports whether it is k.
// Keys are asked for in increasing order.
func (c *keyCursor) seek(k string) (bool, error) {
	if !c.ok && !c.end {
		if _, err := c.next(); err != nil {
			return false, err
		}
	}
	for c.ok && c.cur < k {
		if _, err := c.next(); err != nil {
			return false, err
		}
	}
	return c.ok && c.cur == k, nil
}

func byKey(a, b *keyCursor) bool { return a.cur < b.cur }
