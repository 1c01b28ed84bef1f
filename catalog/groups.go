package catalog

import (
	"bufio"
	"container/heap"
	"context"
	"crypto/sha256"
	"encoding/binary"
	"encoding/hex"
	"fmt"
	"hash"
	"io"
	"os"
	"slices"

	bolt "go.etcd.io/bbolt"

	"github.com/flowcat-catalog/flowcat/catalog/blob"
	"github.com/flowcat-catalog/flowcat/quality"
	"github.com/flowcat-catalog/flowcat/schema"
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
	WindowFrom int64       `json:"window_from,omitempty"`
	WindowTo   int64       `json:"window_to,omitempty"`
	Groups     []caseGroup `json:"groups"`
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
}

const (
	// groupMaxEvents cuts a full pass's output into groups of about this
	// many events (at case boundaries), so that a later case touched
	// rewrites one of them, not the whole version.
	groupMaxEvents = 1 << 20
	// maxGroups bounds the groups of a version (so the merge's fan-in);
	// beyond it the smallest untouched groups are compacted into one.
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
	if set.Version != parent.Number || set.Files != filesDigest(pf) || set.WindowFrom != from || set.WindowTo != to {
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

// putGroups stores the groups of version n of ref in tx.
func putGroups(tx *bolt.Tx, ref string, n int, files []FileEntry, set *caseGroupSet) error {
	if set == nil {
		return tx.Bucket(bucketCaseGroups).Delete([]byte(ref))
	}
	set.Version, set.Files = n, filesDigest(files)
	return putJSON(tx.Bucket(bucketCaseGroups), []byte(ref), set)
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
			refs[g.Events], refs[g.Keys] = true, true
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
	Written     int64 // events written to new groups
}

// testHookGroups, when set by a test, receives each commit's groupStats.
var testHookGroups func(groupStats)

// groupBuild writes the case groups of the version a commit makes, from
// the per-case pass's stream of events in case order (CasePass.Tap). With
// a parent's groups (incremental), their events join the pass as sorted
// inputs instead of the files being read and sorted again; the cases of
// the upload move, with all their events, into one new group; the groups
// they came from are rewritten without them; every other group is kept
// as it is. Without (full), every case goes to new groups of about
// groupMaxEvents events.
type groupBuild struct {
	s    *Store
	ctx  context.Context
	prev *caseGroupSet
	excl *exclusion // of the upload's file

	// incremental only
	upKeys  *keyCursor   // the upload's case keys, sorted
	touched []int        // indexes into prev.Groups, rewritten
	kept    []bool       // by index into prev.Groups: kept as it is
	cursors []*keyCursor // case keys of each touched group
	dest    []*groupWriter
	closers []io.Closer

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
// pass. prev is the parent's groups to extend (nil: a full pass), upKeys
// the upload's case keys (CasePass.uploadKeys).
func (s *Store) newGroupBuild(ctx context.Context, ds *Dataset, prev *caseGroupSet, now int64, cp *CasePass) (*groupBuild, error) {
	g := &groupBuild{s: s, ctx: ctx, prev: prev, excl: &exclusion{later: now}}
	g.from, g.to = windowMicros(ds)
	g.excl.from, g.excl.to = g.from, g.to
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
	// Every group's events join the pass as a sorted input.
	for i := range prev.Groups {
		r, err := s.blobs.Open(ctx, prev.Groups[i].Events)
		if err != nil {
			g.close()
			return nil, fmt.Errorf("case groups: %w", err)
		}
		g.closers = append(g.closers, r)
		cp.srt.addSorted(bufio.NewReaderSize(io.NewSectionReader(r, 0, r.Size()), runBufSize))
	}
	return g, nil
}

// findTouched marks the groups holding a case of the upload (a merge of
// the upload's sorted keys with every group's), and, when the groups
// would then be too many, the smallest others for compaction.
func (g *groupBuild) findTouched() error {
	n := len(g.prev.Groups)
	g.kept = make([]bool, n)
	h := make(keyHeap, 0, n)
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
			h = append(h, c)
		}
	}
	heap.Init(&h)
	for len(h) > 0 {
		ok, err := g.upKeys.next()
		if err != nil {
			return err
		}
		if !ok {
			break
		}
		u := g.upKeys.cur
		for len(h) > 0 && h[0].cur < u {
			if err := h.advance(); err != nil {
				return err
			}
		}
		if len(h) > 0 && h[0].cur == u {
			g.kept[h[0].group] = false // keys are disjoint across groups
			heap.Pop(&h)
		}
	}
	var compact []int
	for i := range g.kept {
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
		slices.SortStableFunc(idx, func(a, b int) int { return cmpInt(g.prev.Groups[a].Count, g.prev.Groups[b].Count) })
		for _, i := range idx {
			if count <= maxGroups/2 {
				break
			}
			compact = append(compact, i)
			g.kept[i] = false
			count--
		}
		count++ // the compacted group
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
				if shared, err = newGroupWriter(g.s.opt.TempDir); err != nil {
					return err
				}
				g.done = append(g.done, shared)
			}
			w = shared
		} else {
			if w, err = newGroupWriter(g.s.opt.TempDir); err != nil {
				return err
			}
			g.done = append(g.done, w)
		}
		g.dest = append(g.dest, w)
	}
	g.stats.Touched, g.stats.Compacted = len(g.touched), len(compact)
	return nil
}

// route is the pass's tap: it writes e (in the stream's case order, its
// Line as the pass has it) to its case's group.
func (g *groupBuild) route(e *schema.Event) error {
	if !g.started || e.CaseID != g.last {
		w, err := g.destFor(e.CaseID)
		if err != nil {
			return err
		}
		g.cur, g.last, g.started = w, e.CaseID, true
		if w != nil {
			if err := w.startCase(e.CaseID); err != nil {
				return err
			}
		}
	}
	if g.cur == nil {
		return nil
	}
	c := *e
	if c.Line&uploadMark != 0 {
		// As a later pass reads it from the stored file: no source line,
		// the exclusion flags of the file.
		c.Line = quality.PackLine(0, g.excl.flags(&c))
	}
	g.stats.Written++
	return g.cur.write(&c)
}

func (g *groupBuild) destFor(key string) (*groupWriter, error) {
	if g.prev == nil {
		if g.fresh == nil || g.fresh.count >= groupMaxEvents {
			w, err := newGroupWriter(g.s.opt.TempDir)
			if err != nil {
				return nil, err
			}
			g.fresh = w
			g.done = append(g.done, w)
		}
		return g.fresh, nil
	}
	ok, err := g.upKeys.seek(key)
	if err != nil {
		return nil, err
	}
	if ok {
		if g.fresh == nil {
			if g.fresh, err = newGroupWriter(g.s.opt.TempDir); err != nil {
				return nil, err
			}
			g.done = append(g.done, g.fresh)
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

// finish puts the new groups in the blob store, held until release, and
// returns the version's group set.
func (g *groupBuild) finish(ctx context.Context) (*caseGroupSet, []func(), error) {
	set := &caseGroupSet{WindowFrom: g.from, WindowTo: g.to}
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
		if seen[w] || w.count == 0 {
			continue
		}
		seen[w] = true
		gr, err := w.finish()
		if err != nil {
			return fail(err)
		}
		releases = append(releases, g.s.hold(gr.Events), g.s.hold(gr.Keys))
		if err := g.s.blobs.Put(ctx, gr.Events, w.ev); err != nil {
			return fail(fmt.Errorf("case groups: %w", err))
		}
		if err := g.s.blobs.Put(ctx, gr.Keys, w.keys); err != nil {
			return fail(fmt.Errorf("case groups: %w", err))
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

// groupWriter writes one group's two files to temporary files, hashing
// them.
type groupWriter struct {
	ev, keys     *os.File
	evw, kw      *bufio.Writer
	evh, kh      hash.Hash
	evn          int64
	count, cases int64
	enc          []byte
	removed      bool
}

func newGroupWriter(dir string) (*groupWriter, error) {
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
	w.evw = bufio.NewWriterSize(io.MultiWriter(ev, w.evh, countWriter{&w.evn}), runBufSize)
	w.kw = bufio.NewWriterSize(io.MultiWriter(keys, w.kh), runBufSize)
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

func (w *groupWriter) finish() (*caseGroup, error) {
	for _, x := range []struct {
		b *bufio.Writer
		f *os.File
	}{{w.evw, w.ev}, {w.kw, w.keys}} {
		if err := x.b.Flush(); err != nil {
			return nil, fmt.Errorf("case groups: %w", err)
		}
		if err := x.f.Sync(); err != nil {
			return nil, fmt.Errorf("case groups: %w", err)
		}
		if _, err := x.f.Seek(0, io.SeekStart); err != nil {
			return nil, fmt.Errorf("case groups: %w", err)
		}
	}
	return &caseGroup{Events: blob.ID(w.evh.Sum(nil)), Keys: blob.ID(w.kh.Sum(nil)), Cases: w.cases, Count: w.count, Bytes: w.evn}, nil
}

func (w *groupWriter) remove() {
	if w.removed {
		return
	}
	w.removed = true
	w.ev.Close()
	w.keys.Close()
	os.Remove(w.ev.Name())
	os.Remove(w.keys.Name())
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

type keyHeap []*keyCursor

func (h keyHeap) Len() int           { return len(h) }
func (h keyHeap) Less(i, j int) bool { return h[i].cur < h[j].cur }
func (h keyHeap) Swap(i, j int)      { h[i], h[j] = h[j], h[i] }
func (h *keyHeap) Push(x any)        { *h = append(*h, x.(*keyCursor)) }
func (h *keyHeap) Pop() any {
	old := *h
	r := old[len(old)-1]
	*h = old[:len(old)-1]
	return r
}

// advance moves the top cursor on, dropping it at its end.
func (h *keyHeap) advance() error {
	ok, err := (*h)[0].next()
	if err != nil {
		return err
	}
	if ok {
		heap.Fix(h, 0)
	} else {
		heap.Pop(h)
	}
	return nil
}

