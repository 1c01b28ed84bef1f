package catalog

import (
	"context"
	"errors"
	"fmt"
	"time"

	"github.com/flowcat-catalog/flowcat/anonymize"
	"github.com/flowcat-catalog/flowcat/catalog/blob"
	"github.com/flowcat-catalog/flowcat/catalog/summary"
	"github.com/flowcat-catalog/flowcat/quality"
	"github.com/flowcat-catalog/flowcat/schema"
)

// ErrKeyRotated reports an upload read under a pseudonym key generation
// that was replaced before its commit: its events carry the old
// generation's pseudonyms, so it is refused whole and is to be sent again.
var ErrKeyRotated = errors.New("the project's pseudonym key was rotated during the upload; send it again")

// carried is a dataset's latest version carried to the project's current
// key generation, for an upload that makes the next version: every file
// rewritten with its pseudonyms re-keyed (anonymize.Rekeyer), nothing else
// changed (times, order and all other fields stay). The upload compares
// its events with these files (held-event identity holds across the
// rotation) and the new version is made from them, so it names one key
// id for all its files. The files are written to the blob store but
// referenced only if the version commits.
type carried struct {
	version   *Version // the latest version, its files and key id replaced
	summaries map[blob.ID]*summary.Accumulator
	reports   map[blob.ID]*quality.Report
	releases  []func()
}

// carriedVersion returns the version an upload to ds compares with and
// builds on: nil when that is the latest version as stored (it is of
// pz's generation, there is none, or the mode carries nothing over).
func (c *carried) carriedVersion() *Version {
	if c == nil {
		return nil
	}
	return c.version
}

// into adds the carried files' summaries, reports and blob holds to plan.
func (c *carried) into(p *filePlan) {
	if c == nil {
		return
	}
	for id, a := range c.summaries {
		p.summaries[id] = a
	}
	for id, r := range c.reports {
		p.reports[id] = r
	}
	p.releases = append(p.releases, c.releases...)
	c.releases = nil
}

func (c *carried) release() {
	if c == nil {
		return
	}
	for _, r := range c.releases {
		r()
	}
}

// carryLatest re-keys ds's latest version when it was made under an older
// key generation than pz's. The caller holds the dataset's commit lock.
// Cost: one read and one write of every file of the version, once per
// rotation and dataset (the next version is of pz's generation); memory is
// bounded as in a replace-window rewrite (one row group, the case pass's
// runs).
func (s *Store) carryLatest(ctx context.Context, ds *Dataset, pz *anonymize.Pseudonymizer, mode Mode, qopt quality.Options) (*carried, error) {
	proj, err := s.Project(ctx, ds.Project)
	if err != nil {
		return nil, err
	}
	if proj.Key.ID != pz.KeyID() {
		return nil, fmt.Errorf("read under key %s, now %s: %w", pz.KeyID(), proj.Key.ID, ErrKeyRotated)
	}
	latest, err := s.Version(ctx, ds.Project, ds.Name, 0)
	if errors.Is(err, ErrNotFound) {
		return nil, nil
	} else if err != nil {
		return nil, err
	}
	if latest.Manifest.KeyID == pz.KeyID() || mode == ModeReplaceAll {
		return nil, nil
	}
	rk, err := pz.Rekeyer(latest.Manifest.KeyID)
	if err != nil {
		return nil, fmt.Errorf("version %d: %w", latest.Number, err)
	}
	c := &carried{summaries: map[blob.ID]*summary.Accumulator{}, reports: map[blob.ID]*quality.Report{}}
	m := *latest.Manifest
	m.Files = make([]FileEntry, 0, len(latest.Manifest.Files))
	for _, f := range latest.Manifest.Files {
		nf, err := s.rekeyFile(ctx, ds, f, rk, pz.KeyID(), qopt, c)
		if err != nil {
			c.release()
			return nil, err
		}
		m.Files = append(m.Files, *nf)
	}
	m.KeyID = pz.KeyID()
	v := *latest
	v.Manifest = &m
	// The stored report's samples name cases under the old generation:
	// the new version's report is merged from the files' own.
	v.Quality = ReportRef{}
	v.carryCase = func(id string) (string, error) { return rk.Pseudonym(schema.FieldCaseID, id) }
	c.version = &v
	s.opt.Logger.Info("version carried to a new pseudonym key", "dataset", ds.Ref().String(), "version", latest.Number,
		"from_key", latest.Manifest.KeyID, "to_key", pz.KeyID(), "files", len(m.Files))
	return c, nil
}

// rekeyFile writes file f with its identifiers carried by rk, and its
// summary state and quality report computed on the way.
func (s *Store) rekeyFile(ctx context.Context, ds *Dataset, f FileEntry, rk *anonymize.Rekeyer, keyID string, qopt quality.Options, c *carried) (*FileEntry, error) {
	r, err := s.blobs.Open(ctx, f.SHA256)
	if err != nil {
		return nil, fmt.Errorf("rekey: %w", err)
	}
	defer r.Close()
	origin := f.SHA256
	if f.DerivedFrom != nil {
		origin = *f.DerivedFrom
	}
	sw, err := newSnapshotWriter(s.opt.TempDir, s.opt.RowGroupRows, keyID, origin.String())
	if err != nil {
		return nil, err
	}
	defer sw.Remove()
	excl := s.exclusionOf(ds, f, qopt.UploadedAt)
	qo := qopt
	if excl.later != 0 {
		qo.UploadedAt = time.UnixMicro(excl.later).UTC() // the file's own upload
	}
	sacc := summary.New(summaryOptions(ds))
	qacc := quality.NewAccumulator(qo)
	cp := NewCasePass(s.opt.TempDir, s.opt.RunEvents)
	defer cp.Close()
	var n int
	err = ReadSnapshot(r, r.Size(), func(e *schema.Event) error {
		if n++; n&4095 == 0 {
			if err := ctx.Err(); err != nil {
				return err
			}
		}
		if err := rk.Apply(e); err != nil {
			return err
		}
		if excl.flags(e) == 0 {
			sacc.Observe(e)
		}
		qacc.ObserveFileOrder(e)
		fl := qacc.Observe(e)
		e.Row = sw.rows // its place in the new file (the old one's: every row is kept)
		if err := sw.Write(e); err != nil {
			return err
		}
		ce := *e
		ce.CloneTexts()
		ce.Line = quality.PackLine(ce.Line, fl)
		return cp.Add(&ce)
	})
	if err == nil {
		_, err = cp.Run(qacc)
	}
	if err != nil {
		return nil, fmt.Errorf("rekey: file %s: %w", f.SHA256, err)
	}
	id, size, err := sw.Finish()
	if err != nil {
		return nil, err
	}
	if sw.rows != f.Rows {
		return nil, fmt.Errorf("rekey: file %s: %d rows written of %d", f.SHA256, sw.rows, f.Rows)
	}
	c.releases = append(c.releases, s.hold(id))
	if err := s.putTemp(ctx, id, sw.f); err != nil {
		return nil, fmt.Errorf("rekey: %w", err)
	}
	rep := qacc.Report()
	rep.SetFile(s.uploadFilename(ds.Ref().String(), f.Upload))
	c.summaries[id], c.reports[id] = sacc, rep
	return &FileEntry{
		SHA256: id, Bytes: size, Rows: sw.rows, Upload: f.Upload,
		MinTime: f.MinTime, MaxTime: f.MaxTime, RowGroup: s.opt.RowGroupRows, DerivedFrom: &origin,
	}, nil
}
