package catalog

import (
	"bytes"
	"compress/gzip"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"time"

	bolt "go.etcd.io/bbolt"

	"github.com/flowcat-catalog/flowcat/catalog/blob"
	"github.com/flowcat-catalog/flowcat/catalog/summary"
	"github.com/flowcat-catalog/flowcat/quality"
	"github.com/flowcat-catalog/flowcat/schema"
	"github.com/flowcat-catalog/flowcat/schema/cases"
)

var (
	// bucketFileSummaries maps a blob id to the summary state of its events.
	bucketFileSummaries = []byte("file_summaries")
	// bucketVersionSummaries maps a version (seqKey) to its Summary's
	// JSON, gzip-compressed, served as it is.
	bucketVersionSummaries = []byte("version_summaries")
	// bucketVersionStates maps a version (seqKey) to its merged summary
	// state, so that the next append merges one file into it without
	// reading the past.
	bucketVersionStates = []byte("version_summary_states")
)

// versionSummary is what a version keeps of its summary.
type versionSummary struct {
	State []byte
	JSON  []byte
}

// summaryOptions are the summary options of a dataset: hours and days in
// its zone.
func summaryOptions(ds *Dataset) summary.Options {
	loc, err := time.LoadLocation(ds.Timezone)
	if err != nil {
		loc = time.UTC
	}
	return summary.Options{Location: loc}
}

// summaryOfFile returns the summary state of a stored file: kept from its
// ingest, or, for a file from before summaries were kept, computed by
// reading it once.
func (s *Store) summaryOfFile(ctx context.Context, ds *Dataset, id blob.ID, excl *exclusion) (*summary.Accumulator, []byte, error) {
	var state []byte
	err := s.db.View(func(tx *bolt.Tx) error {
		if v := tx.Bucket(bucketFileSummaries).Get(id[:]); v != nil {
			state = append([]byte(nil), v...)
		}
		return nil
	})
	if err != nil {
		return nil, nil, err
	}
	acc := summary.New(summaryOptions(ds))
	if state != nil {
		err := acc.UnmarshalBinary(state)
		if err == nil {
			return acc, nil, nil
		}
		if !errors.Is(err, summary.ErrOldState) {
			return nil, nil, fmt.Errorf("summary of file %s: %w", id, err)
		}
		acc = summary.New(summaryOptions(ds)) // recomputed below, once
	}
	r, err := s.blobs.Open(ctx, id)
	if err != nil {
		return nil, nil, fmt.Errorf("summary: %w", err)
	}
	defer r.Close()
	err = ReadSnapshot(r, r.Size(), func(e *schema.Event) error {
		if excl.flags(e) == 0 {
			acc.Observe(e)
		}
		return nil
	})
	if err != nil {
		return nil, nil, fmt.Errorf("summary of file %s: %w", id, err)
	}
	state, err = acc.MarshalBinary()
	if err != nil {
		return nil, nil, err
	}
	return acc, state, nil
}

// uploadPass is an upload's part in its version's per-case pass: the pass
// holding the upload's events (marked by uploadMark, with their quality
// flags), the file they made, and the upload's quality accumulator, which
// takes the upload's events alone.
type uploadPass struct {
	cases *CasePass
	entry *FileEntry
	acc   *quality.Accumulator
}

// versionPass is what one per-case pass over a version's files yields.
type versionPass struct {
	summary    *versionSummary
	fileStates map[blob.ID][]byte // event-level summary states to store for files that had none
	cases      *quality.Report    // the case-level report (see quality.WithCases)
	table      *CaseTableEntry    // nil unless the case table was asked for
	groups     *caseGroupSet      // the version's case groups; nil unless an upload's pass
	releases   []func()
}

func (p *versionPass) release() {
	for _, r := range p.releases {
		r()
	}
}

// passVersion computes what a version's files give together: the summary
// (the merge of the files' event-level states, plus the case-level
// figures of one per-case pass over all their events), the case-level
// quality report, and, with table, the case table, stored in the blob
// store and held until the caller releases it. fresh holds the summary
// states of files made by this commit. Memory is bounded by the sort's
// runs, not by the version: every file is read once, in turn, and its
// events sorted by case on disk.
//
// With an upload's pass, it also writes the new version's case groups
// (groups.go); with prev, the parent's groups that the new version
// extends, their events join the sort as sorted inputs instead of the
// parent's files being read and sorted again.
func (s *Store) passVersion(ctx context.Context, ds *Dataset, files []FileEntry, fresh map[blob.ID]*summary.Accumulator, qopt quality.Options, keyID string, table bool, upass *uploadPass, prev *caseGroupSet) (*versionPass, error) {
	out := &versionPass{fileStates: map[blob.ID][]byte{}}
	excls := make([]*exclusion, len(files))
	for i, f := range files {
		excls[i] = s.exclusionOf(ds, f, qopt.UploadedAt)
	}
	total, err := s.fileSummaries(ctx, ds, files, fresh, excls, out)
	if err != nil {
		return nil, err
	}
	var cp *CasePass
	var mine []cases.Observer
	var fromUpload blob.ID
	if upass != nil {
		// The upload's events are in its pass already, marked.
		cp, mine = upass.cases, []cases.Observer{upass.acc}
		if upass.entry != nil {
			fromUpload = upass.entry.SHA256
		}
	} else {
		cp = NewCasePass(s.opt.TempDir, s.opt.RunEvents)
		defer cp.Close()
	}
	if prof, err := ds.EffectiveProfile(); err == nil {
		cp.Terminal = prof.Terminal
		qopt.Terminal = prof.Terminal
	}
	var cw *caseTableWriter
	if table {
		if cw, err = newCaseTableWriter(s.opt.TempDir, s.opt.RowGroupRows, keyID); err != nil {
			return nil, err
		}
		defer cw.Remove()
	}
	var gb *groupBuild
	if upass != nil && !s.noCaseGroups {
		if gb, err = s.openGroupBuild(ctx, ds, files, prev, qopt, cp); err != nil {
			return nil, err
		}
		defer gb.close()
		if gb.prev == nil {
			gb.table = cw
			if len(files) == 1 && files[0].SHA256 == fromUpload {
				// Every event of the pass is the upload's: its own
				// per-case checks see what the groups' builders see, in
				// the same order, so they ride along instead of a builder
				// of their own.
				gb.own, mine = mine, nil
			}
		}
	}
	for i, f := range files {
		if f.SHA256 == fromUpload || gb != nil && gb.prev != nil {
			continue
		}
		if err := s.addFile(ctx, f.SHA256, excls[i], cp); err != nil {
			return nil, err
		}
	}
	if gb != nil {
		err = s.runGroups(ctx, ds, gb, cp, mine, total, qopt, cw, out)
	} else {
		out.cases, err = runFullPass(cp, mine, total, qopt, cw)
	}
	if err == nil && cw != nil {
		err = s.storeCaseTable(ctx, cw, out)
	}
	if err == nil {
		out.summary, err = sealSummary(total)
	}
	if err != nil {
		out.release()
		return nil, err
	}
	return out, nil
}

// fileSummaries merges the event-level summary states of the files: those
// made by this commit (fresh) and the stored ones, read or made (and then
// kept in out.fileStates for storing).
func (s *Store) fileSummaries(ctx context.Context, ds *Dataset, files []FileEntry, fresh map[blob.ID]*summary.Accumulator, excls []*exclusion, out *versionPass) (*summary.Accumulator, error) {
	total := summary.New(summaryOptions(ds))
	for i, f := range files {
		acc := fresh[f.SHA256]
		if acc != nil {
			b, err := acc.MarshalBinary()
			if err != nil {
				return nil, err
			}
			out.fileStates[f.SHA256] = b
		} else {
			a, state, err := s.summaryOfFile(ctx, ds, f.SHA256, excls[i])
			if err != nil {
				return nil, err
			}
			if state != nil {
				out.fileStates[f.SHA256] = state
			}
			acc = a
		}
		if err := total.Merge(acc); err != nil {
			return nil, err
		}
	}
	return total, nil
}

// openGroupBuild prepares the case groups of the version: extending prev,
// or, when there is none or its blobs cannot be read, by a full pass.
func (s *Store) openGroupBuild(ctx context.Context, ds *Dataset, files []FileEntry, prev *caseGroupSet, qopt quality.Options, cp *CasePass) (*groupBuild, error) {
	var rows int64
	for _, f := range files {
		rows += f.Rows
	}
	gb, err := s.newGroupBuild(ctx, ds, prev, qopt, rows, cp)
	if err != nil && prev != nil {
		// The parent's groups cannot be read (a blob gone): one full
		// pass makes the version's groups anew.
		s.opt.Logger.Warn("case groups unreadable, a full per-case pass instead", "dataset", ds.Ref().String(), "err", err)
		gb, err = s.newGroupBuild(ctx, ds, nil, qopt, rows, cp)
	}
	return gb, err
}

// addFile adds the events of a stored file to the per-case pass, with
// the exclusion flags of that file.
func (s *Store) addFile(ctx context.Context, id blob.ID, excl *exclusion, cp *CasePass) error {
	var row int64
	return s.readFile(ctx, id, func(e *schema.Event) error {
		// Strings read from Parquet may point into the reader's
		// buffers; the sort keeps events past the next read.
		c := *e
		c.CloneTexts()
		c.Line = quality.PackLine(c.Line, excl.flags(e))
		c.Row, row = row, row+1
		return cp.Add(&c)
	})
}

// runGroups computes each case in its group, the version's figures the
// merge of every group's states; the groups are stored and held (out).
func (s *Store) runGroups(ctx context.Context, ds *Dataset, gb *groupBuild, cp *CasePass, mine []cases.Observer, total *summary.Accumulator, qopt quality.Options, cw *caseTableWriter, out *versionPass) error {
	if err := gb.run(cp, mine); err != nil {
		return err
	}
	set, rel, err := gb.finish(ctx)
	if err != nil {
		return err
	}
	out.groups = set
	out.releases = append(out.releases, rel...)
	if gb.table != nil {
		cw = nil // written as the cases passed
	}
	out.cases, err = s.groupFigures(ctx, ds, set, total, qopt, cw)
	return err
}

// runFullPass computes every case in one pass, without groups, and
// returns the case-level quality report.
func runFullPass(cp *CasePass, mine []cases.Observer, total *summary.Accumulator, qopt quality.Options, cw *caseTableWriter) (*quality.Report, error) {
	qacc := quality.NewAccumulator(qopt)
	obs := []cases.Observer{qacc}
	pv := total.NewProcess()
	total.SetProcess(pv)
	cp.Kept = []cases.Observer{total, pv}
	if cw != nil {
		obs = append(obs, cw)
	}
	counts, err := cp.RunSplit(obs, mine)
	if err != nil {
		return nil, err
	}
	total.SetCounts(counts)
	return qacc.Report(), nil
}

// storeCaseTable completes the case table and puts it in the blob store,
// held until out is released.
func (s *Store) storeCaseTable(ctx context.Context, cw *caseTableWriter, out *versionPass) error {
	e, err := cw.Finish()
	if err != nil {
		return err
	}
	out.releases = append(out.releases, s.hold(e.SHA256))
	if err := s.putTemp(ctx, e.SHA256, cw.f); err != nil {
		return fmt.Errorf("case table: %w", err)
	}
	out.table = e
	return nil
}

// sealSummary is the version's summary: its state and its JSON.
func sealSummary(total *summary.Accumulator) (*versionSummary, error) {
	state, err := total.MarshalBinary()
	if err != nil {
		return nil, err
	}
	js, err := json.Marshal(total.Summary())
	if err != nil {
		return nil, fmt.Errorf("summary: %w", err)
	}
	return &versionSummary{State: state, JSON: js}, nil
}

// exclusion says which events of one file summaries leave out: those
// dated later than the upload that brought the file, and those outside the
// dataset's window.
type exclusion struct {
	later, from, to int64 // µs; 0: no bound
}

func (x *exclusion) flags(e *schema.Event) quality.Flags {
	at := e.OccurredAt.UnixMicro()
	var fl quality.Flags
	if x.later != 0 && at > x.later {
		fl |= quality.FlagLater
	}
	if (x.from != 0 && at < x.from) || (x.to != 0 && at >= x.to) {
		fl |= quality.FlagOutsideWindow
	}
	return fl
}

// exclusionOf returns the exclusion of file f: its upload's receipt (or
// now, for the upload being committed) and the dataset's window.
func (s *Store) exclusionOf(ds *Dataset, f FileEntry, now time.Time) *exclusion {
	x := &exclusion{}
	var up Upload
	if seq := f.Upload.Seq(); seq != 0 {
		_ = s.db.View(func(tx *bolt.Tx) error {
			return getJSON(tx.Bucket(bucketUploads), seqKey(ds.Ref().String(), seq), &up, "upload "+f.Upload.String())
		})
	}
	switch {
	case !up.ReceivedAt.IsZero():
		x.later = up.ReceivedAt.UnixMicro()
	case !now.IsZero():
		x.later = now.UnixMicro()
	}
	if ds.WindowFrom != nil {
		x.from = ds.WindowFrom.UnixMicro()
	}
	if ds.WindowTo != nil {
		x.to = ds.WindowTo.UnixMicro()
	}
	return x
}

// readFile calls fn for every event of a stored snapshot file.
func (s *Store) readFile(ctx context.Context, id blob.ID, fn func(*schema.Event) error) error {
	r, err := s.blobs.Open(ctx, id)
	if err != nil {
		return fmt.Errorf("file %s: %w", id, err)
	}
	defer r.Close()
	if err := ReadSnapshot(r, r.Size(), fn); err != nil {
		return fmt.Errorf("file %s: %w", id, err)
	}
	return nil
}

// putSummaries stores a commit's summary states in tx.
func putSummaries(tx *bolt.Tx, ref string, n int, vs *versionSummary, files map[blob.ID][]byte) error {
	for id, b := range files {
		if err := tx.Bucket(bucketFileSummaries).Put(append([]byte(nil), id[:]...), b); err != nil {
			return err
		}
	}
	if err := tx.Bucket(bucketVersionStates).Put(seqKey(ref, n), vs.State); err != nil {
		return err
	}
	gz, err := gzipJSON(vs.JSON)
	if err != nil {
		return err
	}
	return tx.Bucket(bucketVersionSummaries).Put(seqKey(ref, n), gz)
}

func gzipJSON(b []byte) ([]byte, error) {
	var buf bytes.Buffer
	zw, err := gzip.NewWriterLevel(&buf, gzip.BestCompression)
	if err != nil {
		return nil, err
	}
	if _, err := zw.Write(b); err != nil {
		return nil, err
	}
	if err := zw.Close(); err != nil {
		return nil, err
	}
	return buf.Bytes(), nil
}

// Summary returns the stored summary JSON of version n of dataset ref
// ("project/dataset"; see
// catalog/summary/SUMMARY.md).
func (s *Store) Summary(ctx context.Context, ref string, n int) ([]byte, error) {
	gz, err := s.SummaryGzip(ctx, ref, n)
	if err != nil {
		return nil, err
	}
	zr, err := gzip.NewReader(bytes.NewReader(gz))
	if err != nil {
		return nil, fmt.Errorf("summary: %w", err)
	}
	return io.ReadAll(zr)
}

// SummaryGzip returns the stored summary JSON of a version, gzip-compressed
// as it is stored, for a server to send as it is. A version made before
// summaries were kept gets its summary computed from its files once, then
// stored.
func (s *Store) SummaryGzip(ctx context.Context, ref string, n int) ([]byte, error) {
	var gz []byte
	err := s.db.View(func(tx *bolt.Tx) error {
		gz = bytes.Clone(tx.Bucket(bucketVersionSummaries).Get(seqKey(ref, n)))
		return nil
	})
	if err != nil || gz != nil {
		return gz, err
	}
	project, name, _, err := SplitRef(ref)
	if err != nil {
		return nil, err
	}
	v, err := s.Version(ctx, project, name, n)
	if err != nil {
		return nil, err
	}
	ds, err := s.Dataset(ctx, project, name)
	if err != nil {
		return nil, err
	}
	vp, err := s.passVersion(ctx, ds, v.Manifest.Files, nil, quality.Options{}, "", false, nil, nil)
	if err != nil {
		return nil, err
	}
	err = s.db.Update(func(tx *bolt.Tx) error { return putSummaries(tx, ref, v.Number, vp.summary, vp.fileStates) })
	if err != nil {
		return nil, err
	}
	return gzipJSON(vp.summary.JSON)
}

// bucketFileReports maps a blob id to the quality report of its events.
var bucketFileReports = []byte("file_reports")

func putFileReports(tx *bolt.Tx, reports map[blob.ID]*quality.Report) error {
	for id, r := range reports {
		if err := putJSON(tx.Bucket(bucketFileReports), append([]byte(nil), id[:]...), r); err != nil {
			return err
		}
	}
	return nil
}

// reportOfFile returns the quality report of a stored file: kept from its
// commit, or else the report of the upload that made it (files from before
// reports were kept per file).
func (s *Store) reportOfFile(f FileEntry, ref string) (*quality.Report, error) {
	var r quality.Report
	err := s.db.View(func(tx *bolt.Tx) error {
		if err := getJSON(tx.Bucket(bucketFileReports), f.SHA256[:], &r, "report"); err == nil {
			return nil
		}
		var up Upload
		seq := f.Upload.Seq()
		if seq == 0 {
			return fmt.Errorf("file %s: no report and no upload: %w", f.SHA256, ErrNotFound)
		}
		if err := getJSON(tx.Bucket(bucketUploads), seqKey(ref, seq), &up, "upload "+f.Upload.String()); err != nil {
			return err
		}
		if up.Report == nil || f.DerivedFrom != nil {
			return fmt.Errorf("file %s: no report: %w", f.SHA256, ErrNotFound)
		}
		r = *up.Report
		return nil
	})
	if err != nil {
		return nil, err
	}
	return &r, nil
}

// mergeQuality builds the quality report of the new version over all its
// files: on append, the parent's report merged with the upload's; else the
// merge of every file's report (rewritten files have a report computed as
// they were rewritten, without the rejected rows and source lines of their
// first upload). Either way a rejected row an earlier upload of the version
// rejected too counts once (rejectedrows.go); entry is the upload's new
// file (nil for none), rp its rows rejected before (repeatsOfUpload).
func (s *Store) mergeQuality(ctx context.Context, parent *Version, plan *filePlan, rep *quality.Report, mode Mode, entry *FileEntry, rp quality.Repeats) (*quality.Report, error) {
	ref := parentRef(parent)
	if mode == ModeAppend && parent != nil && !parent.Quality.SHA256.IsZero() {
		if pr, err := s.Report(ctx, parent); err == nil {
			if r, err := quality.MergeReports(pr, quality.LessRepeats(rep, rp)); err == nil {
				return r, nil
			}
		}
	}
	reps, err := s.versionRepeats(ref, plan.files)
	if err != nil {
		return nil, err
	}
	if entry != nil {
		reps[entry.SHA256] = rp
	}
	var rs []*quality.Report
	for _, f := range plan.files {
		r := plan.reports[f.SHA256]
		if r == nil {
			var err error
			if r, err = s.reportOfFile(f, ref); err != nil {
				return nil, err
			}
			r.SetFile(s.uploadFilename(ref, f.Upload))
		}
		rs = append(rs, quality.LessRepeats(r, reps[f.SHA256]))
	}
	if len(rs) == 0 {
		return rep, nil
	}
	out, err := quality.MergeReports(rs...)
	if err != nil {
		return nil, fmt.Errorf("quality: %w", err)
	}
	return out, nil
}

// uploadFilename is the name the upload of id was sent with, "" when
// unknown.
func (s *Store) uploadFilename(ref string, id UploadID) string {
	seq := id.Seq()
	if seq == 0 || ref == "" {
		return ""
	}
	var up Upload
	_ = s.db.View(func(tx *bolt.Tx) error {
		return getJSON(tx.Bucket(bucketUploads), seqKey(ref, seq), &up, "upload "+id.String())
	})
	return up.Filename
}

func parentRef(v *Version) string {
	if v == nil {
		return ""
	}
	return v.Dataset.String()
}
