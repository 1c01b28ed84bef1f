package catalog

import (
	"context"
	"crypto/sha256"
	"encoding/binary"
	"encoding/hex"
	"errors"
	"fmt"
	"hash"
	"io"
	"log/slog"
	"time"

	"github.com/flowcat-catalog/flowcat/catalog/blob"
	"github.com/flowcat-catalog/flowcat/catalog/summary"

	bolt "go.etcd.io/bbolt"

	"github.com/flowcat-catalog/flowcat/anonymize"
	"github.com/flowcat-catalog/flowcat/quality"
	"github.com/flowcat-catalog/flowcat/schema"
	"github.com/flowcat-catalog/flowcat/schema/cases"
	"github.com/klauspost/readahead"
)

// IngestOptions describe one upload.
type IngestOptions struct {
	Filename string // as the partner named it; CleanFilename of it is kept
	By       string // token subject of the uploader
	Mode     Mode   // how the events combine with the latest version; empty means ModeAppend
	// From and To bound the half-open window [From, To) a ModeReplaceWindow
	// upload replaces; both are required for that mode and unused otherwise.
	From, To time.Time
	// Sites are the sites whose events in the window a ModeReplaceWindow
	// upload replaces. Empty means the sites the upload holds. With sites
	// given, an upload without rows removes their events in the window.
	Sites []string
	// BoundSites, when set, are the only sites the uploader may write: an
	// event of any other site refuses the whole upload
	// (RuleSiteNotAllowed). A partner token's sites.
	BoundSites []string

	held  *heldFilter // set by Ingest: the upload's events against the latest version
	attrs *attrIngest // set by Ingest: the upload's case attributes (attributes.go)
	// carried is set by Ingest when the latest version is of an older
	// key generation: that version re-keyed (rekey.go).
	carried *carried
}

// Validate checks the options before any byte is read.
func (o *IngestOptions) Validate() error {
	m, err := ParseMode(string(o.Mode))
	if err != nil {
		return err
	}
	o.Mode = m
	if m != ModeReplaceWindow {
		if !o.From.IsZero() || !o.To.IsZero() || len(o.Sites) > 0 {
			return fmt.Errorf("a window and sites apply to mode replace-window only, not %s: %w", m, ErrInvalid)
		}
		return nil
	}
	if o.From.IsZero() || o.To.IsZero() {
		return fmt.Errorf("mode replace-window needs both ends of the window (from and to): %w", ErrInvalid)
	}
	if !o.To.After(o.From) {
		return fmt.Errorf("window: from %s is not before to %s: %w", o.From.UTC().Format(time.RFC3339), o.To.UTC().Format(time.RFC3339), ErrInvalid)
	}
	o.From, o.To = o.From.UTC(), o.To.UTC()
	for _, site := range o.Sites {
		if site == "" {
			return fmt.Errorf("sites: an empty site name: %w", ErrInvalid)
		}
	}
	if len(o.Sites) > MaxReplacedSites {
		return fmt.Errorf("sites: %d listed, more than the %d one upload may replace: %w", len(o.Sites), MaxReplacedSites, ErrInvalid)
	}
	return nil
}

// IngestResult is what became of an upload. Version is nil unless the
// upload was accepted or was a duplicate of an accepted one.
type IngestResult struct {
	Upload  Upload
	Version *Version
}

// Rule of an upload rejected because a replace-window upload holds events
// outside its window or of other sites.
const RuleOutsideWindow = "outside_window"

// Ingest reads one export file for a dataset from src, as it streams:
// parse and validate through the dataset's profile, pseudonymize, sort by
// occurred_at (spilling sorted runs of pseudonymized events to the temp
// dir), drop the events the latest version holds already (append) and the
// copies within the file (see heldFilter), observe quality, write one zstd
// Parquet file, put it in the blob store and commit a new version. Its
// files are, by opt.Mode, the latest
// version's plus the new one (append), the latest version's with the
// replaced window's rows removed plus the new one (replace-window), or the
// new one alone (replace-all). Memory is bounded by Options.RunEvents, not
// by the file.
//
// Options that do not validate fail with ErrInvalid before src is read. A
// file that cannot be read fails with an error wrapping ErrFileInvalid and
// a *schema.FileError; one with too many invalid rows (above the dataset's
// RejectAbove), none valid, (replace-window) events outside the window, or
// changed events under a stable event_id (see ChangePolicy) fails with
// ErrRejected. In those cases nothing but the upload record is
// stored, and the result carries the upload and its report. Identical bytes
// appended again, while the latest version still holds the file they made,
// return the version they made the first time, with status duplicate; so
// does any upload whose new version would hold the latest one's files (one
// whose events are all held, say).
//
// Once reading has begun, every upload leaves a record: one that fails for
// another reason than its content is recorded with status failed and a
// rule, and the error wraps ErrNoSpace (disk full), ErrClientGone (the
// context ended or the body was cut off), ErrUploadTooLarge (the caller's
// limit), ErrBodyTimeout (the body stalled) or, for a fault of the
// server, nothing more. Work stops as soon as ctx ends, at the latest
// after 4,096 more events.
func (s *Store) Ingest(ctx context.Context, project, dataset string, src io.Reader, opt IngestOptions) (*IngestResult, error) {
	in := &ingest{s: s, opt: opt}
	res, err := in.run(ctx, project, dataset, src)
	if err == nil || res != nil || in.up == nil {
		return res, err
	}
	// Failed after reading began, for a reason other than the file's
	// content. Its temp files are gone by now (run's cleanups), which a
	// full disk needs before the record can be written.
	up := *in.up
	rule, msg, sentinel := failure(ctx, err)
	up.Bytes = in.raw.n
	up.Status = UploadFailed
	up.Error = &UploadError{Rule: rule, Message: msg}
	if fe, ok := schema.AsFileError(err); ok {
		up.Error.Line = fe.Line
	}
	if rerr := s.recordUpload(ctx, in.ds, &up); rerr != nil {
		return nil, errors.Join(err, rerr)
	}
	lvl := slog.LevelWarn
	if sentinel == nil {
		lvl = slog.LevelError
	}
	s.opt.Logger.Log(context.Background(), lvl, "upload failed", "dataset", in.ds.Ref(), "upload", up.ID, "rule", rule, "bytes", up.Bytes, "err", err)
	if sentinel != nil {
		err = fmt.Errorf("%w: %w", sentinel, err)
	}
	return &IngestResult{Upload: up}, err
}

// ingest is one upload on its way through the phases of Ingest, each a
// method: start (options, dataset, key chain, profile), read (parse,
// check each row, pseudonymize, sort), compare (the latest version, held
// from then on), pass (each event in time order: quality, summary,
// window, sites, the snapshot file, the per-case pass), check (the
// dataset's accept and reject rules), write (the snapshot into the blob
// store) and commit. A phase that ends the upload returns its result or
// error; the cleanups run, last first, when run returns.
type ingest struct {
	s    *Store
	opt  IngestOptions
	ds   *Dataset
	prof *schema.Profile
	pz   *anonymize.Pseudonymizer
	up   *Upload      // set once reading begins: a failure is recorded from then on
	raw  *hashCounter // the upload's bytes as read
	qopt quality.Options
	acc  *quality.Accumulator
	srt  *sorter
	ids  *uploadIdentities // the identities read (repeats.go)
	rej  *rejectedRows     // the rows rejected, keyed (rejectedrows.go)
	// set by pass
	hf    *heldFilter
	sw    *snapshotWriter
	win   *windowCheck
	bound *siteBinding
	sacc  *summary.Accumulator
	cases *CasePass // the upload's events, sorted by case on disk
	entry *FileEntry
	// cleanups run last first when run returns
	cleanups []func()
}

// run takes the upload through its phases in order.
func (in *ingest) run(ctx context.Context, project, dataset string, src io.Reader) (*IngestResult, error) {
	defer in.cleanup()
	if err := in.start(ctx, project, dataset); err != nil {
		return nil, err
	}
	if res, err := in.read(ctx, src); res != nil || err != nil {
		return res, err
	}
	if in.opt.Mode == ModeAppend {
		if v, err := in.s.appendedBefore(ctx, in.ds, in.up.SHA256); err == nil {
			return in.s.duplicate(ctx, in.ds, *in.up, v)
		} else if !errors.Is(err, ErrNotFound) {
			return nil, err
		}
	}
	if err := in.compare(ctx); err != nil {
		return nil, err
	}
	if err := in.pass(ctx); err != nil {
		return nil, err
	}
	if res, err := in.check(ctx); res != nil || err != nil {
		return res, err
	}
	if err := in.write(ctx); err != nil {
		return nil, err
	}
	if testHookBeforeCommit != nil {
		testHookBeforeCommit()
	}
	return in.s.commit(ctx, &toCommit{ds: in.ds, up: in.up, entry: in.entry, sum: in.sacc,
		pass: &uploadPass{cases: in.cases, entry: in.entry, acc: in.acc}, qopt: in.qopt, keyID: in.pz.KeyID(), opt: in.opt, rej: in.rej})
}

func (in *ingest) onDone(f func()) { in.cleanups = append(in.cleanups, f) }

func (in *ingest) cleanup() {
	for i := len(in.cleanups) - 1; i >= 0; i-- {
		in.cleanups[i]()
	}
}

// start checks the options and finds the dataset, its key chain and its
// profile; the upload record begins.
func (in *ingest) start(ctx context.Context, project, dataset string) error {
	s := in.s
	if err := in.opt.Validate(); err != nil {
		return err
	}
	ds, err := s.Dataset(ctx, project, dataset)
	if err != nil {
		return err
	}
	proj, err := s.Project(ctx, project)
	if err != nil {
		return err
	}
	if err := ds.writable(proj); err != nil {
		return err
	}
	if in.pz, err = anonymize.OpenKeyChain(s.opt.Master, proj.Name, proj.KeyChain()); err != nil {
		return fmt.Errorf("ingest: %w", err)
	}
	if in.prof, err = ds.EffectiveProfile(); err != nil {
		return fmt.Errorf("ingest: dataset profile: %w", err)
	}
	in.ds = ds
	received := s.opt.Now().UTC()
	in.up = &Upload{Dataset: ds.Ref(), ReceivedAt: received, By: in.opt.By, Mode: in.opt.Mode}
	in.up.Filename = CleanFilename(in.opt.Filename)
	in.raw = &hashCounter{h: sha256.New()}
	prof := in.prof
	in.qopt = quality.Options{UploadedAt: received, MappedFields: mappedFields(prof), Zone: prof.Location(), Terminal: prof.Terminal, Historical: ds.Historical, ResourceCapacity: prof.ResourceCapacity, MaxCase: prof.MaxCase(), Capacity: prof.Capacity}
	if ds.WindowFrom != nil {
		in.qopt.WindowFrom = *ds.WindowFrom
	}
	if ds.WindowTo != nil {
		in.qopt.WindowTo = *ds.WindowTo
	}
	// The held filter drops the upload's copies before quality sees them
	// (pass); other passes with these options read stored files, which
	// versions made before that filter may hold copies in.
	aopt := in.qopt
	aopt.CopiesDropped = true
	in.acc = quality.NewAccumulator(aopt)
	in.srt = newSorter(s.opt.TempDir, s.opt.RunEvents)
	in.onDone(func() { in.srt.Close() })
	// The held filter's windows hold the events near the current instant:
	// a day of event time with stable ids, and all of one instant (a
	// whole day in a file of dates) with content identity. What the
	// upload holds keeps them to the events that can be found there
	// again (repeats.go).
	in.ids = newUploadIdentities(IdentityOf(prof))
	in.rej = &rejectedRows{}
	return nil
}

// read parses every row of src through the profile, rejections to the
// report and accepted events pseudonymized into the sorter, and hashes
// the upload's bytes. A file that cannot be read ends the upload.
func (in *ingest) read(ctx context.Context, src io.Reader) (*IngestResult, error) {
	s, up := in.s, in.up
	// The upload's bytes are read (and hashed) ahead of the parser, on a
	// goroutine of their own, a few buffers at most.
	tee, err := readahead.NewReaderSize(io.TeeReader(src, in.raw), readAheadBuffers, readAheadSize)
	if err != nil {
		return nil, fmt.Errorf("ingest: %w", err)
	}
	in.onDone(func() { tee.Close() })
	fail := func(err error) (*IngestResult, error) {
		tee.Close() // the read-ahead stops before its bytes are counted
		return in.fail(ctx, err)
	}
	in.opt.attrs = newAttrIngest(s.opt.TempDir, in.prof, in.pz)
	in.onDone(in.opt.attrs.close)
	rd, err := schema.NewReader(tee, in.prof, schema.ReaderOptions{Name: up.Filename, Limits: s.opt.Limits})
	if err == nil {
		err = readAll(ctx, rd, in.pz, in.acc, in.srt, in.opt.attrs, in.ids, in.rej)
	}
	if err != nil && !(removing(in.opt) && isNoRows(err)) {
		return fail(err)
	}
	// Hash any bytes the parser did not need (a gzip trailer, say). By
	// Read: the read-ahead's WriteTo answers io.EOF once at the end.
	if _, err := io.Copy(io.Discard, struct{ io.Reader }{tee}); err != nil {
		return fail(&schema.FileError{Rule: schema.RuleRead, Msg: "reading the upload failed", Err: err})
	}
	up.Bytes = in.raw.n
	up.SHA256 = hex.EncodeToString(in.raw.h.Sum(nil))
	if rd != nil {
		up.Unmapped = rd.Unmapped()
	}
	return nil, nil
}

// The read-ahead of an upload's bytes: buffers of readAheadSize.
const (
	readAheadBuffers = 4
	readAheadSize    = 128 << 10
)

// fail ends an upload whose reading failed: one whose file is at fault is
// recorded as failed here, with the file's error.
func (in *ingest) fail(ctx context.Context, err error) (*IngestResult, error) {
	s, ds, up := in.s, in.ds, in.up
	up.Bytes = in.raw.n
	if fe, ok := schema.AsFileError(err); ok && isContentFault(ctx, err) {
		up.Status = UploadFailed
		up.Error = &UploadError{Rule: fe.Rule, Line: fe.Line, Column: fe.Column, Message: fe.Msg}
		if rerr := s.recordUpload(ctx, ds, up); rerr != nil {
			return nil, rerr
		}
		s.opt.Logger.Warn("upload failed", "dataset", ds.Ref().String(), "upload", up.ID, "rule", fe.Rule, "line", fe.Line, "column", fe.Column)
		return &IngestResult{Upload: *up}, fmt.Errorf("%w: %w", ErrFileInvalid, err)
	}
	return nil, fmt.Errorf("ingest: %w", err)
}

// compare takes the dataset's commit lock, so that the latest version
// stays the one the upload's events are compared with until the commit,
// and sets up that comparison.
func (in *ingest) compare(ctx context.Context) error {
	s := in.s
	in.onDone(s.lockDataset(in.ds.Ref().String()))
	// A latest version of an older key generation is carried to the
	// current one first (rekey.go): the upload compares with its events
	// and the new version is made from them.
	cv, err := s.carryLatest(ctx, in.ds, in.pz, in.opt.Mode, in.qopt)
	if err != nil {
		return fmt.Errorf("ingest: %w", err)
	}
	in.onDone(cv.release)
	in.opt.carried = cv
	if in.ids.id == IdentityContent {
		// Held events are compared at their own instant only: the
		// filter of the upload's identities is not worth its memory
		// through the pass; the repeats stay.
		in.ids.dropFilter()
	}
	hf, err := s.heldFilterFor(ctx, in.ds, in.opt.Mode, cv.carriedVersion(), in.ids)
	if err != nil {
		return fmt.Errorf("ingest: %w", err)
	}
	in.onDone(hf.close)
	in.opt.held, in.hf = hf, hf
	return nil
}

// pass takes the upload's events in time order, those held already
// dropped, through quality, the summary, the window and site checks, the
// snapshot file and the per-case pass. The events go to the per-case
// pass (sorted by case on disk), each carrying what the time pass found
// of it and marked as the upload's: the commit runs that pass once over
// the whole new version, the upload's own checks and its report riding
// along.
func (in *ingest) pass(ctx context.Context) error {
	s := in.s
	sw, err := newAttrSnapshotWriter(s.opt.TempDir, s.opt.RowGroupRows, in.pz.KeyID(), in.opt.attrs.eventColumns())
	if err != nil {
		return err
	}
	in.onDone(sw.Remove)
	in.sw, in.win, in.bound = sw, newWindowCheck(in.opt), newSiteBinding(in.opt)
	in.sacc = summary.New(summaryOptions(in.ds))
	in.cases = NewCasePass(s.opt.TempDir, s.opt.RunEvents)
	in.cases.Terminal = in.prof.Terminal
	// The upload's case keys find the case groups it touches; an upload
	// that extends no stored groups (not an append, or none stored: a
	// first upload) needs none.
	if set, err := s.loadGroups(in.ds.Ref().String()); err != nil || set == nil || in.opt.Mode != ModeAppend {
		in.cases.noUpKeys = true
	}
	in.onDone(func() { in.cases.Close() })
	var n int
	err = in.srt.Finish(in.hf.keep(ctx, func(e *schema.Event) error {
		if n++; n&4095 == 0 {
			if err := ctx.Err(); err != nil {
				return err
			}
		}
		return in.observe(e)
	}))
	if err == nil {
		err = ctx.Err() // the client may be gone
	}
	if err != nil {
		return fmt.Errorf("ingest: %w", err)
	}
	in.acc.EndTimePass()
	return nil
}

// observe takes one event of the time pass.
func (in *ingest) observe(e *schema.Event) error {
	fl := in.acc.Observe(e)
	if fl&quality.Excluded == 0 {
		in.sacc.Observe(e)
	}
	in.win.observe(e)
	in.bound.observe(e)
	e.Row = in.sw.rows // its place in the upload's snapshot file
	if err := in.sw.Write(e); err != nil {
		return err
	}
	line := e.Line
	e.Line = quality.PackLine(line, fl) | uploadMark
	err := in.cases.Add(e)
	e.Line = line
	return err
}

// check applies the dataset's rules to what the pass found: an upload
// with no valid rows, too many invalid ones, events of sites it may not
// write or outside its window, or refused changes is rejected.
func (in *ingest) check(ctx context.Context) (*IngestResult, error) {
	hf, ds := in.hf, in.ds
	in.up.Events = hf.uploadCounts()
	rep := in.report()
	removeOnly := removing(in.opt) && rep.Rows.Total == 0
	switch {
	case hf.counts.Read == 0 && !removeOnly:
		return in.reject(ctx, nil, fmt.Errorf("no valid rows among %d: %w", rep.Rows.Total, ErrRejected))
	case hf.rejectedShare(rep.Rows.Rejected) > ds.RejectAbove:
		return in.reject(ctx, nil, fmt.Errorf("%.2f%% of rows are invalid, above the dataset's threshold of %.2f%%: %w",
			100*hf.rejectedShare(rep.Rows.Rejected), 100*ds.RejectAbove, ErrRejected))
	case in.bound.outside > 0:
		ue := in.bound.uploadError()
		return in.reject(ctx, ue, fmt.Errorf("line %d: %s: %w", ue.Line, ue.Message, ErrRejected))
	case in.win.outside > 0:
		ue := in.win.uploadError()
		return in.reject(ctx, ue, fmt.Errorf("line %d: %s: %w", ue.Line, ue.Message, ErrRejected))
	case in.win.overSites > 0:
		ue := in.win.sitesError()
		return in.reject(ctx, ue, fmt.Errorf("line %d: %s: %w", ue.Line, ue.Message, ErrRejected))
	case hf.refusal() != nil:
		ue := hf.refusal()
		return in.reject(ctx, ue, fmt.Errorf("line %d: %s: %s: %w", ue.Line, ue.Rule, ue.Message, ErrRejected))
	}
	if in.opt.Mode == ModeReplaceWindow && len(in.opt.Sites) == 0 {
		in.opt.Sites = in.win.siteList()
	}
	return nil, nil
}

// report puts the quality report as far as it is known on the upload.
func (in *ingest) report() *quality.Report {
	rep := in.acc.Report()
	rep.UnmappedColumns = in.up.Unmapped
	rep.Rows.Held = heldRows(in.up.Events)
	in.up.Report = rep
	return rep
}

// heldRows is the count of an upload's valid rows its report does not
// judge (quality.Rows.Held): held already, or copies within the file.
func heldRows(ev *EventCounts) int64 {
	if ev == nil {
		return 0
	}
	return ev.Held + ev.Copies
}

// reject records the upload as rejected, with its report completed by
// the per-case checks of the upload alone.
func (in *ingest) reject(ctx context.Context, uerr *UploadError, err error) (*IngestResult, error) {
	if _, perr := in.cases.RunSplit(nil, []cases.Observer{in.acc}); perr != nil {
		return nil, fmt.Errorf("ingest: %w", perr)
	}
	rep := in.report()
	up := in.up
	up.Status = UploadRejected
	up.Error = uerr
	if err := in.s.recordUpload(ctx, in.ds, up); err != nil {
		return nil, err
	}
	in.s.opt.Logger.Warn("upload rejected", "dataset", in.ds.Ref().String(), "upload", up.ID,
		"rejected_share", rep.RejectedShare(), "reject_above", in.ds.RejectAbove)
	return &IngestResult{Upload: *up}, err
}

// write puts the upload's snapshot file, if it holds rows, into the blob
// store, held there until the commit.
func (in *ingest) write(ctx context.Context) error {
	s, sw := in.s, in.sw
	if sw.rows == 0 {
		return nil
	}
	id, size, err := sw.Finish()
	if err != nil {
		return fmt.Errorf("ingest: %w", err)
	}
	in.onDone(s.hold(id))
	if testHookPut != nil {
		err = s.blobs.Put(ctx, id, testHookPut(sw.f))
	} else {
		err = s.putTemp(ctx, id, sw.f)
	}
	if err != nil {
		return fmt.Errorf("ingest: %w", err)
	}
	in.entry = &FileEntry{SHA256: id, Bytes: size, Rows: sw.rows, MinTime: sw.min, MaxTime: sw.max, RowGroup: s.opt.RowGroupRows, Attributes: in.opt.attrs.eventColumns()}
	return nil
}

// isContentFault reports whether a file error is the file's own fault
// rather than the server's or the connection's.
func isContentFault(ctx context.Context, err error) bool {
	_, _, sentinel := failure(ctx, err)
	return sentinel == nil
}

// removing reports whether opt allows an upload without rows: a
// replacement of named sites' window, which then only removes.
func removing(opt IngestOptions) bool { return opt.Mode == ModeReplaceWindow && len(opt.Sites) > 0 }

func isNoRows(err error) bool {
	fe, ok := schema.AsFileError(err)
	return ok && (fe.Rule == schema.RuleNoRows || fe.Rule == schema.RuleEmptyFile)
}

// toCommit is what an upload that passed its checks brings to the commit.
type toCommit struct {
	ds    *Dataset
	up    *Upload
	entry *FileEntry           // the upload's new file; nil when it holds no rows
	sum   *summary.Accumulator // the new file's summary
	pass  *uploadPass          // the upload's per-case checks, run in the version's pass
	qopt  quality.Options
	keyID string
	opt   IngestOptions
	rej   *rejectedRows // the upload's rejected rows
}

// commit makes the new version from the latest one. The caller holds the
// dataset's commit lock, so that the held-event comparison, the plan
// (which may rewrite files) and the transaction see the same parent.
func (s *Store) commit(ctx context.Context, c *toCommit) (*IngestResult, error) {
	ds, up, opt := c.ds, c.up, c.opt
	parent, err := s.Version(ctx, ds.Project, ds.Name, 0)
	if errors.Is(err, ErrNotFound) {
		parent = nil
	} else if err != nil {
		return nil, err
	}
	if cv := opt.carried.carriedVersion(); cv != nil {
		parent = cv // the same version, re-keyed (rekey.go)
	}
	plan, err := s.planFiles(ctx, ds, parent, c.entry, c.keyID, opt, c.qopt)
	if err != nil {
		return nil, fmt.Errorf("ingest: %w", err)
	}
	defer plan.release()
	opt.carried.into(plan)
	if err := s.removeCorrected(ctx, ds, plan, c.keyID, opt.held, parent); err != nil {
		return nil, fmt.Errorf("ingest: %w", err)
	}
	if parent != nil && sameFiles(parent.Manifest.Files, plan.files) {
		rp, err := s.repeatsOfUpload(ds.Ref().String(), parent.Manifest.Files, c.rej)
		if err != nil {
			return nil, fmt.Errorf("ingest: %w", err)
		}
		up.RejectedBefore = rp.N()
		return s.duplicate(ctx, ds, *up, parent)
	}
	if parent == nil && len(plan.files) == 0 {
		return s.duplicate(ctx, ds, *up, nil)
	}
	nv, err := s.deriveVersion(ctx, c, parent, plan)
	if err != nil {
		return nil, fmt.Errorf("ingest: %w", err)
	}
	defer nv.release()
	ver, oldGroups, err := s.storeVersion(ctx, c, parent, plan, nv)
	if err != nil {
		// New blobs stay, unreferenced, for garbage collection.
		s.opt.Logger.Error("commit failed; new files are unreferenced", "dataset", ds.Ref().String(), "err", err)
		return nil, fmt.Errorf("ingest: commit: %w", err)
	}
	s.dropGroups(ctx, oldGroups, nv.vp.groups)
	s.opt.Logger.Info("version created", "dataset", ds.Ref().String(), "version", ver.Number, "upload", up.ID, "mode", opt.Mode,
		"rows", ver.Manifest.Rows, "rows_removed", plan.removed, "rejected", nv.rep.Rows.Rejected, "score", nv.rep.Score)
	return &IngestResult{Upload: *up, Version: ver}, nil
}

// newVersion is what a commit derives from the files of the new version
// before its transaction: the per-case pass, the case attributes, the
// reports and the manifest, all but the upload's number.
type newVersion struct {
	vp   *versionPass
	va   *versionAttrs
	rep  *quality.Report // the upload's own
	vrep *quality.Report // the version's
	m    *Manifest
}

func (nv *newVersion) release() {
	nv.va.done()
	nv.vp.release()
}

// deriveVersion runs one per-case pass over every file of the new
// version (its case table, its summary's case figures and its report's,
// and the upload's own per-case checks on the way), then its case
// attributes, its quality report and its manifest.
func (s *Store) deriveVersion(ctx context.Context, c *toCommit, parent *Version, plan *filePlan) (*newVersion, error) {
	ds, up, opt := c.ds, c.up, c.opt
	if c.entry != nil {
		plan.summaries[c.entry.SHA256] = c.sum
	}
	prev := s.groupsToExtend(ds, parent, plan.files, c.entry, opt.Mode)
	if c.pass.cases.noUpKeys {
		prev = nil // the pass kept no keys to find the touched groups by
	}
	vp, err := s.passVersion(ctx, ds, plan.files, plan.summaries, c.qopt, c.keyID, true, c.pass, prev)
	if err != nil {
		return nil, err
	}
	if testHookGroupsWritten != nil {
		testHookGroupsWritten()
	}
	va, err := s.caseAttributes(ctx, ds, parent, plan.files, vp.table, opt.attrs, opt.Mode, c.keyID)
	if err != nil {
		vp.release()
		return nil, err
	}
	nv := &newVersion{vp: vp, va: va}
	nv.rep = c.pass.acc.Report()
	nv.rep.UnmappedColumns = up.Unmapped
	// The version's report names the file of each sample line.
	frep := nv.rep.WithFile(up.Filename)
	// The upload's record counts the rows it did not judge; the file's
	// part of the version does not.
	urep := *nv.rep
	urep.Rows.Held = heldRows(up.Events)
	up.Report = &urep
	if c.entry != nil {
		plan.reports[c.entry.SHA256] = frep
	}
	// The upload's rows that an upload of the new version rejected too:
	// counted on the upload, and once in the version's report.
	rp, err := s.repeatsOfUpload(ds.Ref().String(), plan.files, c.rej)
	var merged *quality.Report
	if err == nil {
		up.RejectedBefore = rp.N()
		merged, err = s.mergeQuality(ctx, parent, plan, frep, mergeMode(opt.Mode, plan), c.entry, rp)
	}
	if err != nil {
		nv.release()
		return nil, err
	}
	// The pass sees source lines on the upload's events only (stored
	// events have none, and a group's states with lines are those of
	// its commit's upload): a case finding's sample with a line is in
	// the upload's file, and says so as the files' samples do.
	vp.cases.SetFile(up.Filename)
	nv.vrep = quality.WithCases(merged, vp.cases)
	nv.m = c.manifest(parent, plan, vp, va)
	return nv, nil
}

// manifest builds the new version's manifest, the child of parent (or the
// first), but for the upload's number, which its transaction gives it
// (stampUpload).
func (c *toCommit) manifest(parent *Version, plan *filePlan, vp *versionPass, va *versionAttrs) *Manifest {
	opt := c.opt
	var latest int
	if parent != nil {
		latest = parent.Number
	}
	m := &Manifest{
		Dataset:       c.ds.Ref(),
		Version:       latest + 1,
		Parent:        latest,
		Lineage:       Lineage{Mode: opt.Mode, RowsRemoved: plan.removed, Events: opt.held.lineageCounts(plan.removed)},
		SchemaVersion: schema.Version,
		ProfileHash:   c.ds.ProfileHash, // what the upload was read with
		KeyID:         c.keyID,
		Files:         plan.files,
		CaseTable:     vp.table,
		CreatedBy:     opt.By,
		CreatedAt:     c.up.ReceivedAt,
	}
	if va != nil {
		m.CaseAttributes, m.Disclosure, m.Lineage.Suppressed = va.table, va.ref, va.sup
	}
	m.ProfileRevision = c.ds.Revision()
	if opt.Mode == ModeReplaceWindow {
		from, to := opt.From, opt.To
		m.Lineage.From, m.Lineage.To, m.Lineage.Sites = &from, &to, opt.Sites
	}
	if parent != nil && opt.Mode != ModeReplaceAll {
		m.Uploads = append(m.Uploads, parent.Manifest.Uploads...)
	}
	for _, f := range m.Files {
		m.Rows += f.Rows
	}
	return m
}

// stampUpload gives m the number of the upload that makes it: its
// lineage, its list of uploads and its new file name the upload.
func (m *Manifest) stampUpload(id UploadID, entry *FileEntry) {
	if entry != nil {
		for i := range m.Files {
			if m.Files[i].SHA256 == entry.SHA256 && m.Files[i].Upload == "" {
				m.Files[i].Upload = id
			}
		}
	}
	m.Lineage.Upload = id
	m.Uploads = append(m.Uploads, id)
}

// storeVersion stores the new version in one transaction, provided the
// dataset's latest version is still parent: the upload numbered, the
// manifest stamped with that number, then every record written. It returns
// the version and the case groups the new version no longer uses.
func (s *Store) storeVersion(ctx context.Context, c *toCommit, parent *Version, plan *filePlan, nv *newVersion) (*Version, *caseGroupSet, error) {
	up, opt, m := c.up, c.opt, nv.m
	rb, err := sealReport(m, nv.vrep)
	if err != nil {
		return nil, nil, err
	}
	var ver *Version
	var oldGroups *caseGroupSet
	err = s.db.Update(func(tx *bolt.Tx) error {
		var cur Dataset
		if err := getJSON(tx.Bucket(bucketDatasets), []byte(c.ds.Ref().String()), &cur, "dataset "+c.ds.Ref().String()); err != nil {
			return err
		}
		if err := writableTx(tx, cur.Project, cur.Name); err != nil {
			return err
		}
		if parent != nil && cur.Latest != parent.Number || parent == nil && cur.Latest != 0 {
			return fmt.Errorf("dataset %s moved past version %d during the commit", cur.Ref().String(), cur.Latest)
		}
		nextUpload(&cur, up)
		up.Alerts = append(driftAlerts(tx, cur.Ref().String(), up), heldShareAlerts(tx, cur.Ref().String(), up)...)
		if opt.held.correcting() && up.Events != nil {
			up.Events.Removed = plan.removed
		}
		m.stampUpload(up.ID, c.entry)
		v, err := commitManifest(tx, m, nv.vrep, rb)
		if err != nil {
			return err
		}
		v.initialState(cur.Drafts, nv.va, up.ReceivedAt, opt.By)
		if err := putDisclosure(tx, nv.va); err != nil {
			return err
		}
		ver = v
		up.Status = UploadAccepted
		up.Version = v.Number
		cur.Latest = v.Number
		if oldGroups, err = putVersionRecords(tx, &cur, v, plan, nv); err != nil {
			return err
		}
		if err := putJSON(tx.Bucket(bucketUploads), seqKey(cur.Ref().String(), up.Seq), up); err != nil {
			return err
		}
		if err := putRejectedRows(tx, cur.Ref().String(), up.Seq, c.rej); err != nil {
			return err
		}
		if up.Mode == ModeAppend {
			if err := tx.Bucket(bucketDigests).Put(digestKey(cur.Ref().String(), up.SHA256), binary.BigEndian.AppendUint32(nil, uint32(v.Number))); err != nil {
				return err
			}
		}
		return auditCtx(ctx, tx, up.ReceivedAt, opt.By, "version.create", fmt.Sprintf("%s@%d (%s)", cur.Ref().String(), v.Number, opt.Mode))
	})
	return ver, oldGroups, err
}

// initialState sets the state a new version starts in: published, or a
// draft when its dataset holds new versions as drafts or its case
// attributes are above the project's disclosure threshold.
func (v *Version) initialState(drafts bool, va *versionAttrs, at time.Time, by string) {
	v.State = StatePublished
	if drafts {
		v.State = StateDraft
	} else {
		v.PublishedAt, v.PublishedBy = &at, by
	}
	if va != nil && va.ref.AboveThreshold {
		// Above the project's disclosure threshold: a draft, until a
		// curator publishes it with a recorded override.
		v.State, v.PublishedAt, v.PublishedBy = StateDraft, nil, ""
	}
}

// putVersionRecords writes, in tx, the new version's record, its dataset
// (cur, now naming it the latest), its summaries, its files' reports and
// its case groups; it returns the groups no longer used.
func putVersionRecords(tx *bolt.Tx, cur *Dataset, v *Version, plan *filePlan, nv *newVersion) (*caseGroupSet, error) {
	if err := putVersion(tx, v); err != nil {
		return nil, err
	}
	if err := putJSON(tx.Bucket(bucketDatasets), []byte(cur.Ref().String()), cur); err != nil {
		return nil, err
	}
	if err := putSummaries(tx, cur.Ref().String(), v.Number, nv.vp.summary, nv.vp.fileStates); err != nil {
		return nil, err
	}
	if err := putFileReports(tx, plan.reports); err != nil {
		return nil, err
	}
	return putGroups(tx, cur.Ref().String(), v.Number, plan.files, nv.vp.groups)
}

func sameFiles(a, b []FileEntry) bool {
	if len(a) != len(b) {
		return false
	}
	ids := make(map[blob.ID]int, len(a))
	for _, f := range a {
		ids[f.SHA256]++
	}
	for _, f := range b {
		if ids[f.SHA256] == 0 {
			return false
		}
		ids[f.SHA256]--
	}
	return true
}

// appendedBefore returns the version that identical bytes made, provided
// the latest version still holds the file they made (or a file rewritten
// from it); otherwise ErrNotFound. Only accepted appends record their
// digest, so a digest always names the version that added its file.
func (s *Store) appendedBefore(ctx context.Context, ds *Dataset, hexDigest string) (*Version, error) {
	v, err := s.versionByDigest(ds.Ref().String(), hexDigest)
	if err != nil {
		return nil, err
	}
	latest, err := s.Version(ctx, ds.Project, ds.Name, 0)
	if err != nil {
		return nil, err
	}
	for _, f := range v.Manifest.Files {
		if f.Upload == v.Manifest.Lineage.Upload || v.Manifest.Lineage.Upload == "" && f.Upload == v.Manifest.Uploads[len(v.Manifest.Uploads)-1] {
			for _, g := range latest.Manifest.Files {
				if g.SHA256 == f.SHA256 || g.DerivedFrom != nil && *g.DerivedFrom == f.SHA256 {
					return v, nil
				}
			}
			return nil, ErrNotFound
		}
	}
	return nil, ErrNotFound
}

// readAll reads every row of rd: rejections go to acc, accepted events are
// pseudonymized and handed to srt. File errors are returned as they come.
// With declared attributes (ai not nil) rows are read one by one, since
// an attribute is taken from the reader's current row; else they are
// parsed on another goroutine (readAhead).
func readAll(ctx context.Context, rd *schema.Reader, pz *anonymize.Pseudonymizer, acc *quality.Accumulator, srt *sorter, ai *attrIngest, ids *uploadIdentities, rr *rejectedRows) error {
	row := func(e *schema.Event, rej *schema.Rejection) error {
		if rej != nil {
			acc.Reject(*rej)
			rr.add(pz, rej)
			return nil
		}
		d := pz.ApplyShift(e, ai.shiftDays())
		if rej, err := ai.take(rd, e, d); err != nil {
			return err
		} else if rej != nil {
			acc.Reject(*rej)
			rr.add(pz, rej)
			return nil
		}
		// Snapshots keep microseconds; truncate before any comparison so
		// quality, sort order and the file agree.
		e.OccurredAt = e.OccurredAt.Truncate(time.Microsecond).UTC()
		acc.ObserveFileOrder(e)
		ids.add(e)
		return srt.Add(e)
	}
	if ai == nil {
		return readAhead(ctx, rd, row)
	}
	var e schema.Event
	for n := 0; ; n++ {
		if n&4095 == 0 {
			if err := ctx.Err(); err != nil {
				return err
			}
		}
		rej, err := rd.Next(&e)
		if err == io.EOF {
			return nil
		}
		if err != nil {
			return err
		}
		if err := row(&e, rej); err != nil {
			return err
		}
	}
}

// readAhead calls row for every row of rd in file order, the rows parsed
// on another goroutine in batches, so that parsing and pseudonymizing use
// both cores; batches are reused, so memory stays a few batches.
func readAhead(ctx context.Context, rd *schema.Reader, row func(*schema.Event, *schema.Rejection) error) error {
	full := make(chan *readBatch, readAheadBatches)
	free := make(chan *readBatch, readAheadBatches+2)
	stop := make(chan struct{})
	done := make(chan struct{})
	go func() {
		defer close(done)
		defer close(full)
		for {
			var b *readBatch
			select {
			case b = <-free:
			default:
				b = &readBatch{evs: make([]schema.Event, 0, readBatchRows), rejs: make([]*schema.Rejection, 0, readBatchRows)}
			}
			b.evs, b.rejs, b.err = b.evs[:0], b.rejs[:0], nil
			for len(b.evs) < readBatchRows {
				b.evs = append(b.evs, schema.Event{})
				rej, err := rd.Next(&b.evs[len(b.evs)-1])
				if err != nil {
					b.evs, b.err = b.evs[:len(b.evs)-1], err
					break
				}
				b.rejs = append(b.rejs, rej)
			}
			select {
			case full <- b:
			case <-stop:
				return
			}
			if b.err != nil {
				return
			}
		}
	}()
	defer func() {
		close(stop)
		for range full {
		}
		<-done
	}()
	for b := range full {
		for i := range b.evs {
			if err := row(&b.evs[i], b.rejs[i]); err != nil {
				return err
			}
		}
		if b.err == io.EOF {
			return nil
		}
		if b.err != nil {
			// The reader's own error first: a stalled body's timeout also
			// ends the context, and the timeout is what to report.
			return b.err
		}
		if err := ctx.Err(); err != nil {
			return err
		}
		clear(b.evs) // drop the strings before the batch waits for reuse
		select {
		case free <- b:
		default:
		}
	}
	return nil
}

// readBatch is a batch of rows parsed ahead: each is an event, or a
// rejection where rejs[i] is not nil; err ends the file (io.EOF or a
// file error) after the rows before it.
type readBatch struct {
	evs  []schema.Event
	rejs []*schema.Rejection
	err  error
}

// Rows per parsed batch and batches parsed ahead of the pseudonymizer.
const (
	readBatchRows    = 512
	readAheadBatches = 8
)

// mappedFields lists the fields a profile fills on purpose, for the
// completeness score; the default profile's columns are all optional, so
// it lists none and quality scores the fields the file fills.
func mappedFields(p *schema.Profile) []schema.Field {
	var out []schema.Field
	for _, f := range schema.Fields {
		if f.Required() {
			continue // always filled, or the row is rejected
		}
		if m, ok := p.Fields[f]; ok && !m.Optional && (m.Column != "" || m.Value != "") {
			out = append(out, f)
		}
	}
	return out
}

// testHookPut, when set by a test, wraps the reader of the new file's
// blob write: the crash tests stall it there and end the process.
var testHookPut func(io.Reader) io.Reader

// testHookBeforeCommit, when set by a test, runs after the new file is
// durable in the blob store and before the version is committed: the
// crash tests end the process there.
var testHookBeforeCommit func()

// duplicate records an upload that changes nothing; v is the version that
// already holds its events (nil when an empty replacement met an empty
// dataset).
func (s *Store) duplicate(ctx context.Context, ds *Dataset, up Upload, v *Version) (*IngestResult, error) {
	up.Status = UploadDuplicate
	// The events were judged when the version that holds them was made;
	// the file's own rows stay: how many were rejected, why and where
	// (a partner re-sending a file with a broken row is told of it, though
	// nothing is stored).
	if r := up.Report; r != nil {
		up.Report = quality.RowsOf(r)
	}
	if v == nil {
		if err := s.recordUpload(ctx, ds, &up); err != nil {
			return nil, err
		}
		return &IngestResult{Upload: up}, nil
	}
	up.Version = v.Number
	if err := s.recordUpload(ctx, ds, &up); err != nil {
		return nil, err
	}
	s.opt.Logger.Info("upload is a duplicate", "dataset", ds.Ref().String(), "upload", up.ID, "version", v.Number)
	return &IngestResult{Upload: up, Version: v}, nil
}

// recordUpload stores an upload that made no new version.
func (s *Store) recordUpload(ctx context.Context, ds *Dataset, up *Upload) error {
	err := s.db.Update(func(tx *bolt.Tx) error {
		var cur Dataset
		if err := getJSON(tx.Bucket(bucketDatasets), []byte(ds.Ref().String()), &cur, "dataset "+ds.Ref().String()); err != nil {
			return err
		}
		nextUpload(&cur, up)
		up.Alerts = append(driftAlerts(tx, cur.Ref().String(), up), heldShareAlerts(tx, cur.Ref().String(), up)...)
		if err := putJSON(tx.Bucket(bucketDatasets), []byte(cur.Ref().String()), &cur); err != nil {
			return err
		}
		if err := putJSON(tx.Bucket(bucketUploads), seqKey(cur.Ref().String(), up.Seq), up); err != nil {
			return err
		}
		return auditCtx(ctx, tx, up.ReceivedAt, up.By, "upload."+string(up.Status), cur.Ref().String()+"/"+up.ID.String())
	})
	if err != nil {
		return fmt.Errorf("ingest: recording upload: %w", err)
	}
	return nil
}

// nextUpload numbers up as the dataset's next upload.
func nextUpload(d *Dataset, up *Upload) {
	d.Uploads++
	up.Seq = d.Uploads
	up.ID = UploadIDOf(up.Seq)
}

func digestKey(ref, hexDigest string) []byte { return []byte(ref + "/" + hexDigest) }

func (s *Store) versionByDigest(ref, hexDigest string) (*Version, error) {
	var v Version
	err := s.db.View(func(tx *bolt.Tx) error {
		n := tx.Bucket(bucketDigests).Get(digestKey(ref, hexDigest))
		if n == nil {
			return ErrNotFound
		}
		if err := getJSON(tx.Bucket(bucketVersions), seqKey(ref, int(binary.BigEndian.Uint32(n))), &v, "version"); err != nil {
			return err
		}
		return s.withManifest(tx, &v)
	})
	if err != nil {
		return nil, err
	}
	return &v, nil
}

type hashCounter struct {
	h hash.Hash
	n int64
}

func (c *hashCounter) Write(p []byte) (int, error) {
	c.n += int64(len(p))
	return c.h.Write(p)
}
