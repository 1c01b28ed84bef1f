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
	"path/filepath"
	"time"

	bolt "go.etcd.io/bbolt"

	"github.com/flowcat-catalog/flowcat/anonymize"
	"github.com/flowcat-catalog/flowcat/quality"
	"github.com/flowcat-catalog/flowcat/schema"
)

// IngestOptions describe one upload.
type IngestOptions struct {
	Filename string // as the partner named it; base name only is kept
	By       string // token subject of the uploader
}

// IngestResult is what became of an upload. Version is nil unless the
// upload was accepted or was a duplicate of an accepted one.
type IngestResult struct {
	Upload  Upload
	Version *Version
}

// Ingest reads one export file for a dataset from src, as it streams:
// parse and validate through the dataset's profile, pseudonymize, sort by
// occurred_at (spilling sorted runs of pseudonymized events to the temp
// dir), observe quality, write one zstd Parquet file, put it in the blob
// store and commit a new version whose files are the parent's plus the new
// one. Memory is bounded by Options.RunEvents, not by the file.
//
// A file that cannot be read fails with an error wrapping ErrFileInvalid
// and a *schema.FileError; one with too many invalid rows (above the
// dataset's RejectAbove) or none valid fails with ErrRejected. In both
// cases nothing but the upload record is stored, and the result carries
// the upload and its report. Identical bytes sent again to the same dataset
// return the version they made the first time, with status duplicate.
func (s *Store) Ingest(ctx context.Context, project, dataset string, src io.Reader, opt IngestOptions) (*IngestResult, error) {
	ds, err := s.Dataset(ctx, project, dataset)
	if err != nil {
		return nil, err
	}
	proj, err := s.Project(ctx, project)
	if err != nil {
		return nil, err
	}
	pz, err := anonymize.OpenProjectKey(s.opt.Master, proj.Name, proj.Key)
	if err != nil {
		return nil, fmt.Errorf("ingest: %w", err)
	}
	prof, err := ds.EffectiveProfile()
	if err != nil {
		return nil, fmt.Errorf("ingest: dataset profile: %w", err)
	}
	received := s.opt.Now().UTC()
	up := Upload{Dataset: ds.Ref(), ReceivedAt: received, By: opt.By}
	if opt.Filename != "" {
		up.Filename = filepath.Base(opt.Filename)
	}

	raw := &hashCounter{h: sha256.New()}
	tee := io.TeeReader(src, raw)
	qopt := quality.Options{UploadedAt: received, MappedFields: mappedFields(prof)}
	if ds.WindowFrom != nil {
		qopt.WindowFrom = *ds.WindowFrom
	}
	if ds.WindowTo != nil {
		qopt.WindowTo = *ds.WindowTo
	}
	acc := quality.NewAccumulator(qopt)
	srt := newSorter(s.opt.TempDir, s.opt.RunEvents)
	defer srt.Close()

	fail := func(err error) (*IngestResult, error) {
		up.Bytes = raw.n
		if fe, ok := schema.AsFileError(err); ok {
			up.Status = UploadFailed
			up.Error = &UploadError{Rule: fe.Rule, Line: fe.Line, Column: fe.Column, Message: fe.Msg}
			if rerr := s.recordUpload(ds, &up); rerr != nil {
				return nil, rerr
			}
			s.opt.Logger.Warn("upload failed", "dataset", ds.Ref(), "upload", up.ID, "rule", fe.Rule, "line", fe.Line, "column", fe.Column)
			return &IngestResult{Upload: up}, fmt.Errorf("%w: %w", ErrFileInvalid, err)
		}
		return nil, fmt.Errorf("ingest: %w", err)
	}

	rd, err := schema.NewReader(tee, prof, schema.ReaderOptions{Name: up.Filename})
	if err != nil {
		return fail(err)
	}
	if err := readAll(ctx, rd, pz, acc, srt); err != nil {
		return fail(err)
	}
	// Hash any bytes the parser did not need (a gzip trailer, say).
	if _, err := io.Copy(io.Discard, tee); err != nil {
		return fail(&schema.FileError{Rule: schema.RuleRead, Msg: "reading the upload failed", Err: err})
	}
	up.Bytes = raw.n
	up.SHA256 = hex.EncodeToString(raw.h.Sum(nil))
	up.Unmapped = rd.Unmapped()

	if v, err := s.versionByDigest(ds.Ref(), up.SHA256); err == nil {
		return s.duplicate(ds, up, v)
	} else if !errors.Is(err, ErrNotFound) {
		return nil, err
	}

	sw, err := newSnapshotWriter(s.opt.TempDir, s.opt.RowGroupRows, pz.KeyID())
	if err != nil {
		return nil, err
	}
	defer sw.Remove()
	err = srt.Finish(func(e *schema.Event) error {
		acc.Observe(e)
		return sw.Write(e)
	})
	if err != nil {
		return nil, fmt.Errorf("ingest: %w", err)
	}
	rep := acc.Report()
	rep.UnmappedColumns = up.Unmapped
	up.Report = rep
	if sw.rows == 0 || rep.RejectedShare() > ds.RejectAbove {
		up.Status = UploadRejected
		if err := s.recordUpload(ds, &up); err != nil {
			return nil, err
		}
		s.opt.Logger.Warn("upload rejected", "dataset", ds.Ref(), "upload", up.ID,
			"rejected_share", rep.RejectedShare(), "reject_above", ds.RejectAbove)
		if sw.rows == 0 {
			return &IngestResult{Upload: up}, fmt.Errorf("no valid rows among %d: %w", rep.Rows.Total, ErrRejected)
		}
		return &IngestResult{Upload: up}, fmt.Errorf("%.2f%% of rows are invalid, above the dataset's threshold of %.2f%%: %w",
			100*rep.RejectedShare(), 100*ds.RejectAbove, ErrRejected)
	}
	id, size, err := sw.Finish()
	if err != nil {
		return nil, fmt.Errorf("ingest: %w", err)
	}
	if err := s.blobs.Put(ctx, id, sw.f); err != nil {
		return nil, fmt.Errorf("ingest: %w", err)
	}
	if testHookBeforeCommit != nil {
		testHookBeforeCommit()
	}
	entry := FileEntry{SHA256: id, Bytes: size, Rows: sw.rows, MinTime: sw.min, MaxTime: sw.max, RowGroup: s.opt.RowGroupRows}

	var ver *Version
	err = s.db.Update(func(tx *bolt.Tx) error {
		// A concurrent upload of the same bytes may have committed first.
		if k := tx.Bucket(bucketDigests).Get(digestKey(ds.Ref(), up.SHA256)); k != nil {
			return errDuplicateRace
		}
		var cur Dataset
		if err := getJSON(tx.Bucket(bucketDatasets), []byte(ds.Ref()), &cur, "dataset "+ds.Ref()); err != nil {
			return err
		}
		nextUpload(&cur, &up)
		entry.Upload = up.ID
		m := Manifest{
			Dataset:       cur.Ref(),
			Version:       cur.Latest + 1,
			Parent:        cur.Latest,
			SchemaVersion: schema.Version,
			ProfileHash:   cur.ProfileHash,
			KeyID:         pz.KeyID(),
			Quality:       rep,
			CreatedBy:     opt.By,
			CreatedAt:     received,
		}
		if cur.Latest > 0 {
			var parent Version
			if err := getJSON(tx.Bucket(bucketVersions), seqKey(cur.Ref(), cur.Latest), &parent, "parent version"); err != nil {
				return err
			}
			// The same events sent again in other bytes (gzip, other line
			// ends, ...) make the same Parquet file: nothing new.
			if _, ok := parent.File(id); ok {
				return errDuplicateContent
			}
			m.Files = append(m.Files, parent.Manifest.Files...)
			m.Uploads = append(m.Uploads, parent.Manifest.Uploads...)
		}
		m.Files = append(m.Files, entry)
		m.Uploads = append(m.Uploads, up.ID)
		for _, f := range m.Files {
			m.Rows += f.Rows
		}
		v, err := newVersion(m)
		if err != nil {
			return err
		}
		ver = v
		up.Status = UploadAccepted
		up.Version = v.Number
		cur.Latest = v.Number
		if err := putJSON(tx.Bucket(bucketVersions), seqKey(cur.Ref(), v.Number), v); err != nil {
			return err
		}
		if err := putJSON(tx.Bucket(bucketDatasets), []byte(cur.Ref()), &cur); err != nil {
			return err
		}
		if err := putJSON(tx.Bucket(bucketUploads), seqKey(cur.Ref(), up.Seq), &up); err != nil {
			return err
		}
		if err := tx.Bucket(bucketDigests).Put(digestKey(cur.Ref(), up.SHA256), binary.BigEndian.AppendUint32(nil, uint32(v.Number))); err != nil {
			return err
		}
		return audit(tx, received, opt.By, "version.create", fmt.Sprintf("%s@%d", cur.Ref(), v.Number))
	})
	if errors.Is(err, errDuplicateContent) {
		v, err := s.Version(ctx, ds.Project, ds.Name, 0)
		if err != nil {
			return nil, err
		}
		return s.duplicate(ds, up, v)
	}
	if errors.Is(err, errDuplicateRace) {
		v, err := s.versionByDigest(ds.Ref(), up.SHA256)
		if err != nil {
			return nil, err
		}
		return s.duplicate(ds, up, v)
	}
	if err != nil {
		// The blob stays, unreferenced, for garbage collection.
		s.opt.Logger.Error("commit failed; the new file is unreferenced", "dataset", ds.Ref(), "file", id.String(), "err", err)
		return nil, fmt.Errorf("ingest: commit: %w", err)
	}
	s.opt.Logger.Info("version created", "dataset", ds.Ref(), "version", ver.Number, "upload", up.ID,
		"rows", entry.Rows, "rejected", rep.Rows.Rejected, "score", rep.Score, "file", id.String())
	return &IngestResult{Upload: up, Version: ver}, nil
}

// readAll reads every row of rd: rejections go to acc, accepted events are
// pseudonymized and handed to srt. File errors are returned as they come.
func readAll(ctx context.Context, rd *schema.Reader, pz *anonymize.Pseudonymizer, acc *quality.Accumulator, srt *sorter) error {
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
		if rej != nil {
			acc.Reject(*rej)
			continue
		}
		pz.Apply(&e)
		// Snapshots keep microseconds; truncate before any comparison so
		// quality, sort order and the file agree.
		e.OccurredAt = e.OccurredAt.Truncate(time.Microsecond).UTC()
		if err := srt.Add(&e); err != nil {
			return err
		}
	}
}

// mappedFields lists the fields a profile fills on purpose, for the
// completeness score; the default profile's columns are all optional, so
// it lists none and quality scores the fields the file fills.
func mappedFields(p *schema.Profile) []schema.Field {
	var out []schema.Field
	for _, f := range schema.Fields {
		if m, ok := p.Fields[f]; ok && !m.Optional && (m.Column != "" || m.Value != "") {
			out = append(out, f)
		}
	}
	return out
}

// testHookBeforeCommit, when set by a test, runs after the new file is
// durable in the blob store and before the version is committed: the
// crash tests end the process there.
var testHookBeforeCommit func()

var (
	errDuplicateRace    = errors.New("duplicate committed concurrently")
	errDuplicateContent = errors.New("the latest version holds this file already")
)

func (s *Store) duplicate(ds *Dataset, up Upload, v *Version) (*IngestResult, error) {
	up.Status = UploadDuplicate
	up.Version = v.Number
	up.Report = nil
	if err := s.recordUpload(ds, &up); err != nil {
		return nil, err
	}
	s.opt.Logger.Info("upload is a duplicate", "dataset", ds.Ref(), "upload", up.ID, "version", v.Number)
	return &IngestResult{Upload: up, Version: v}, nil
}

// recordUpload stores an upload that made no new version.
func (s *Store) recordUpload(ds *Dataset, up *Upload) error {
	err := s.db.Update(func(tx *bolt.Tx) error {
		var cur Dataset
		if err := getJSON(tx.Bucket(bucketDatasets), []byte(ds.Ref()), &cur, "dataset "+ds.Ref()); err != nil {
			return err
		}
		nextUpload(&cur, up)
		if err := putJSON(tx.Bucket(bucketDatasets), []byte(cur.Ref()), &cur); err != nil {
			return err
		}
		if err := putJSON(tx.Bucket(bucketUploads), seqKey(cur.Ref(), up.Seq), up); err != nil {
			return err
		}
		if up.Status == UploadDuplicate && up.SHA256 != "" {
			// These bytes, too, now answer with that version at once.
			if err := tx.Bucket(bucketDigests).Put(digestKey(cur.Ref(), up.SHA256), binary.BigEndian.AppendUint32(nil, uint32(up.Version))); err != nil {
				return err
			}
		}
		return audit(tx, up.ReceivedAt, up.By, "upload."+string(up.Status), cur.Ref()+"/"+up.ID)
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
	up.ID = fmt.Sprintf("u%d", up.Seq)
}

func digestKey(ref, hexDigest string) []byte { return []byte(ref + "/" + hexDigest) }

func (s *Store) versionByDigest(ref, hexDigest string) (*Version, error) {
	var v Version
	err := s.db.View(func(tx *bolt.Tx) error {
		n := tx.Bucket(bucketDigests).Get(digestKey(ref, hexDigest))
		if n == nil {
			return ErrNotFound
		}
		return getJSON(tx.Bucket(bucketVersions), seqKey(ref, int(binary.BigEndian.Uint32(n))), &v, "version")
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
