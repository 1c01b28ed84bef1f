package catalog

import (
	"bytes"
	"context"
	"encoding/binary"
	"encoding/json"
	"errors"
	"fmt"
	"log/slog"
	"os"
	"path/filepath"
	"slices"
	"sync"
	"time"

	bolt "go.etcd.io/bbolt"
	bolterrors "go.etcd.io/bbolt/errors"

	"github.com/flowcat-catalog/flowcat/anonymize"
	"github.com/flowcat-catalog/flowcat/catalog/blob"
	"github.com/flowcat-catalog/flowcat/schema"
)

// ErrLocked is returned by Open when another process holds the metadata
// file (bbolt takes an exclusive lock).
var ErrLocked = errors.New("catalog is open in another process")

var (
	bucketMeta     = []byte("meta")
	bucketProjects = []byte("projects")
	bucketDatasets = []byte("datasets")
	bucketVersions = []byte("versions")
	bucketUploads  = []byte("uploads")
	bucketDigests  = []byte("digests")
	bucketAudit    = []byte("audit")
)

// Options configure a Store. The zero value of each optional field is a
// sensible default.
type Options struct {
	Master anonymize.MasterKey // required: seals and opens project keys
	// TempDir holds sort runs and Parquet files being written. When set,
	// the folder is the store's own: Open empties it (what a crash left;
	// only pseudonymized events). Default os.TempDir(), which Open leaves
	// alone.
	TempDir string
	Logger  *slog.Logger     // default slog.Default()
	Now     func() time.Time // default time.Now
	// RunEvents bounds the events the ingest sorts in memory before it
	// spills a sorted run to TempDir (default 65536).
	RunEvents int
	// RowGroupRows bounds the rows of a Parquet row group (default 65536).
	RowGroupRows int64
	// ChangeWindowBytes bounds about what the events an upload keeps to
	// find changes and conflicts (stable event ids: 24 h either way) take
	// (DefaultChangeWindowBytes; held events about 104 bytes each, the upload's
	// about 220). Past it the look-around narrows (EventCounts.ChangeWindow); the
	// events of the current instant are always kept.
	ChangeWindowBytes int64
	// Limits bound what one uploaded file may hold: line length, columns,
	// bytes after decompression and rows (see schema.Limits; zero fields
	// take the defaults). Going over one fails the upload, naming it.
	Limits schema.Limits
}

// DefaultChangeWindowBytes is Options.ChangeWindowBytes when unset: 48
// MiB keeps an upload of 10M events, each sent twice with stable ids,
// within 256 MiB of the server's memory (DEVELOPERS.md).
const DefaultChangeWindowBytes = 48 << 20

// Store is the catalog: metadata in bbolt, snapshot files in a blob.Store.
// It is safe for concurrent use.
type Store struct {
	db    *metaDB
	blobs blob.Store
	opt   Options

	mu      sync.Mutex
	commits map[string]*sync.Mutex // per dataset: plan and commit of a version
	pending map[blob.ID]int        // blobs put but not yet committed; the collector keeps them
	// noCaseGroups makes every commit a full per-case pass (tests compare
	// the two).
	noCaseGroups bool
	// audits commits the entries of RecordAudit in groups (audit.go).
	audits auditGroup
	// versions keeps decoded version records (versionmemo.go).
	versions  *decodedMemo[Version]
	manifests *decodedMemo[Manifest] // decoded manifests, as versions
	// Answers of the reads each request repeats, kept until the next
	// write (metadb.go).
	standings *readMemo[string, tokenStanding]
	resolved  *readMemo[resolveKey, Version]
	numbered  *readMemo[versionKey, Version] // with its manifest
}

// Open opens (creating if needed) the bbolt file at path. It fails with
// ErrLocked after a second when another process has it open, and with
// anonymize.ErrKeyMismatch when the master key is not the one the catalog
// was created with.
func Open(path string, blobs blob.Store, opt Options) (*Store, error) {
	ownTemp := opt.TempDir != ""
	if !ownTemp {
		opt.TempDir = os.TempDir()
	}
	if opt.Logger == nil {
		opt.Logger = slog.Default()
	}
	if opt.Now == nil {
		opt.Now = time.Now
	}
	if opt.RunEvents <= 0 {
		opt.RunEvents = 1 << 16
	}
	if opt.RowGroupRows <= 0 {
		opt.RowGroupRows = 1 << 16
	}
	if opt.ChangeWindowBytes <= 0 {
		opt.ChangeWindowBytes = DefaultChangeWindowBytes
	}
	if opt.Master == (anonymize.MasterKey{}) {
		return nil, fmt.Errorf("catalog: no master key given")
	}
	db, err := bolt.Open(path, 0o600, &bolt.Options{Timeout: time.Second})
	if errors.Is(err, bolterrors.ErrTimeout) {
		return nil, fmt.Errorf("catalog: %s: %w", path, ErrLocked)
	}
	if err != nil {
		return nil, fmt.Errorf("catalog: %w", err)
	}
	err = db.Update(func(tx *bolt.Tx) error {
		for _, b := range [][]byte{bucketMeta, bucketProjects, bucketDatasets, bucketVersions, bucketUploads, bucketDigests, bucketAudit, bucketFileSummaries, bucketVersionSummaries, bucketVersionStates, bucketFileReports, bucketCaseGroups, bucketManifests, bucketReports, bucketTokens, bucketRevocations, bucketProfiles, bucketRejectedRows, bucketRowKeys} {
			if _, err := tx.CreateBucketIfNotExists(b); err != nil {
				return err
			}
		}
		if err := migrate(tx, opt.Logger); err != nil {
			return err
		}
		meta := tx.Bucket(bucketMeta)
		id := opt.Master.ID()
		switch have := meta.Get([]byte("master_key_id")); {
		case have == nil:
			return meta.Put([]byte("master_key_id"), []byte(id))
		case string(have) != id:
			return fmt.Errorf("the catalog was created under master key %s, the key given is %s: %w", have, id, anonymize.ErrKeyMismatch)
		}
		return nil
	})
	if err != nil {
		db.Close()
		return nil, fmt.Errorf("catalog: %w", err)
	}
	st := &Store{db: &metaDB{bolt: db}, blobs: blobs, opt: opt, commits: map[string]*sync.Mutex{}, pending: map[blob.ID]int{},
		versions: newDecodedMemo[Version](memoVersions, 0), manifests: newDecodedMemo[Manifest](memoManifests, memoManifestBytes),
		standings: &readMemo[string, tokenStanding]{max: memoStandings},
		resolved:  &readMemo[resolveKey, Version]{max: memoVersions},
		numbered:  &readMemo[versionKey, Version]{max: memoManifests}}
	if st.audits.j, err = openAuditJournal(st.db, path); err != nil {
		db.Close()
		return nil, fmt.Errorf("catalog: %w", err)
	}
	st.audits.log = opt.Logger
	// Holding the bbolt lock, no other catalog writes here: clear what an
	// earlier run left in the temp folder and the blob store's.
	if ownTemp {
		if ents, err := os.ReadDir(opt.TempDir); err == nil {
			for _, e := range ents {
				os.RemoveAll(filepath.Join(opt.TempDir, e.Name()))
			}
		}
	}
	if sw, ok := blobs.(blob.TempSweeper); ok {
		n, b, err := sw.SweepTemp(context.Background(), 0, false)
		if err != nil {
			st.Close()
			return nil, fmt.Errorf("catalog: %w", err)
		}
		if n > 0 {
			opt.Logger.Info("removed temporary blob files left by an earlier run", "files", n, "bytes", b)
		}
	}
	return st, nil
}

// Close folds the audit journal into the metadata file and closes both.
func (s *Store) Close() error {
	return errors.Join(s.audits.j.close(s.db), s.db.Close())
}

// TempDir returns the directory the store writes temporary files to.
func (s *Store) TempDir() string { return s.opt.TempDir }

// Blobs returns the store's blob store.
func (s *Store) Blobs() blob.Store { return s.blobs }

// CreateProject creates a project with a fresh pseudonym key.
func (s *Store) CreateProject(ctx context.Context, name, title, by string) (*Project, error) {
	if err := ValidName("project", name); err != nil {
		return nil, err
	}
	key, err := anonymize.NewProjectKey(s.opt.Master, name)
	if err != nil {
		return nil, fmt.Errorf("catalog: %w", err)
	}
	p := &Project{Name: name, Title: title, CreatedAt: s.opt.Now().UTC(), CreatedBy: by, Key: key}
	err = s.db.Update(func(tx *bolt.Tx) error {
		b := tx.Bucket(bucketProjects)
		if b.Get([]byte(name)) != nil {
			return fmt.Errorf("project %q: %w", name, ErrExists)
		}
		if err := putJSON(b, []byte(name), p); err != nil {
			return err
		}
		return auditCtx(ctx, tx, s.opt.Now(), by, "project.create", name)
	})
	if err != nil {
		return nil, err
	}
	s.opt.Logger.Info("project created", "project", name, "by", by)
	return p, nil
}

// Project returns the named project or ErrNotFound.
func (s *Store) Project(ctx context.Context, name string) (*Project, error) {
	var p Project
	err := s.db.View(func(tx *bolt.Tx) error {
		return getJSON(tx.Bucket(bucketProjects), []byte(name), &p, "project "+name)
	})
	if err != nil {
		return nil, err
	}
	return &p, nil
}

// Projects lists the projects by name, archived ones included, deleted
// ones not.
func (s *Store) Projects(ctx context.Context) ([]Project, error) {
	var out []Project
	err := s.db.View(func(tx *bolt.Tx) (err error) {
		out, err = scanJSON[Project](tx.Bucket(bucketProjects), nil)
		return err
	})
	return slices.DeleteFunc(out, func(p Project) bool { return p.Deleted != nil }), err
}

// DatasetSpec is what a curator gives to create a dataset.
type DatasetSpec struct {
	Project     string
	Name        string
	Title       string
	Profile     []byte     // YAML; empty means the schema's own column names
	Timezone    string     // overrides the profile's zone when set
	RejectAbove *float64   // nil means DefaultRejectAbove
	WindowFrom  *time.Time // optional declared window of the data
	WindowTo    *time.Time
	Drafts      bool // new versions start as drafts
	// Changes is the dataset's policy for changed events under a stable
	// event_id; empty means ChangesRefuse.
	Changes ChangePolicy
	// Historical marks past events, not a live feed: the quality report
	// does not score currentness.
	Historical bool
}

// CreateDataset validates the spec (names, profile, zone, threshold) and
// creates the dataset, or fails with ErrInvalid, ErrExists or ErrNotFound
// (no such project).
func (s *Store) CreateDataset(ctx context.Context, spec DatasetSpec, by string) (*Dataset, error) {
	if err := ValidName("dataset", spec.Name); err != nil {
		return nil, err
	}
	prof, err := effectiveProfile(spec.Profile, spec.Timezone)
	if err != nil {
		return nil, fmt.Errorf("%w: %w", err, ErrInvalid)
	}
	reject := DefaultRejectAbove
	if spec.RejectAbove != nil {
		reject = *spec.RejectAbove
	}
	if !(reject >= 0 && reject <= 1) { // also refuses NaN
		return nil, fmt.Errorf("reject-above %v: want a share between 0 and 1: %w", reject, ErrInvalid)
	}
	// The window is half-open, [from, to): from == to would hold no instant.
	if spec.WindowFrom != nil && spec.WindowTo != nil && !spec.WindowTo.After(*spec.WindowFrom) {
		return nil, fmt.Errorf("window: from is not before to: %w", ErrInvalid)
	}
	changes, err := ParseChangePolicy(string(spec.Changes))
	if err != nil {
		return nil, err
	}
	d := &Dataset{
		Project: spec.Project, Name: spec.Name, Title: spec.Title,
		Profile: string(spec.Profile), ProfileHash: prof.Hash(), Timezone: prof.Location().String(),
		RejectAbove: reject, Drafts: spec.Drafts, Changes: changes, WindowFrom: utcPtr(spec.WindowFrom), WindowTo: utcPtr(spec.WindowTo),
		Historical: spec.Historical, CreatedAt: s.opt.Now().UTC(), CreatedBy: by,
	}
	err = s.db.Update(func(tx *bolt.Tx) error {
		var p Project
		if err := getJSON(tx.Bucket(bucketProjects), []byte(spec.Project), &p, fmt.Sprintf("project %q", spec.Project)); err != nil {
			return err
		}
		if p.Deleted != nil || p.Archived != nil {
			return fmt.Errorf("project %s is archived or deleted: no new datasets: %w", p.Name, ErrState)
		}
		b := tx.Bucket(bucketDatasets)
		key := []byte(d.Ref().String())
		if b.Get(key) != nil {
			return fmt.Errorf("dataset %q (a deleted dataset's name is not reused): %w", d.Ref().String(), ErrExists)
		}
		d.ProfileRevision = 1
		if err := putJSON(b, key, d); err != nil {
			return err
		}
		if err := putJSON(tx.Bucket(bucketProfiles), seqKey(string(key), 1), profileRevision(d, d.CreatedAt, by)); err != nil {
			return err
		}
		return auditCtx(ctx, tx, s.opt.Now(), by, "dataset.create", d.Ref().String())
	})
	if err != nil {
		return nil, err
	}
	s.opt.Logger.Info("dataset created", "dataset", d.Ref().String(), "by", by)
	return d, nil
}

// effectiveProfile parses a dataset's profile (or the default one) and
// applies a zone override.
func effectiveProfile(yaml []byte, zone string) (*schema.Profile, error) {
	var prof *schema.Profile
	if len(bytes.TrimSpace(yaml)) == 0 {
		prof = schema.DefaultProfile()
	} else {
		p, err := schema.ParseProfile(yaml)
		if err != nil {
			return nil, err
		}
		prof = p
	}
	if zone != "" {
		if err := prof.SetTimezone(zone); err != nil {
			return nil, err
		}
	}
	return prof, nil
}

// EffectiveProfile returns the dataset's mapping profile with its zone
// override applied.
func (d *Dataset) EffectiveProfile() (*schema.Profile, error) {
	return effectiveProfile([]byte(d.Profile), d.Timezone)
}

// Dataset returns one dataset or ErrNotFound.
func (s *Store) Dataset(ctx context.Context, project, name string) (*Dataset, error) {
	var d Dataset
	err := s.db.View(func(tx *bolt.Tx) error {
		return getJSON(tx.Bucket(bucketDatasets), []byte(project+"/"+name), &d, "dataset "+project+"/"+name)
	})
	if err != nil {
		return nil, err
	}
	return &d, nil
}

// Datasets lists a project's datasets by name, archived ones included,
// deleted ones not.
func (s *Store) Datasets(ctx context.Context, project string) ([]Dataset, error) {
	var out []Dataset
	err := s.db.View(func(tx *bolt.Tx) (err error) {
		if tx.Bucket(bucketProjects).Get([]byte(project)) == nil {
			return fmt.Errorf("project %q: %w", project, ErrNotFound)
		}
		out, err = scanJSON[Dataset](tx.Bucket(bucketDatasets), []byte(project+"/"))
		return err
	})
	return slices.DeleteFunc(out, func(d Dataset) bool { return d.Deleted != nil }), err
}

// Uploads lists a dataset's uploads, oldest first.
func (s *Store) Uploads(ctx context.Context, project, dataset string) ([]Upload, error) {
	return listOfDataset[Upload](s, bucketUploads, project, dataset)
}

// OpenFile opens a stored file of version v (with its manifest) for
// reading; the file must be one of the manifest's Blobs.
func (s *Store) OpenFile(ctx context.Context, v *Version, id blob.ID) (blob.Reader, BlobEntry, error) {
	var f BlobEntry
	ok := false
	if v.Manifest != nil {
		f, ok = v.Manifest.Blob(id)
	}
	if !ok {
		return nil, BlobEntry{}, fmt.Errorf("file %s is not part of version %d: %w", id, v.Number, ErrNotFound)
	}
	r, err := s.blobs.Open(ctx, id)
	if err != nil {
		return nil, BlobEntry{}, fmt.Errorf("catalog: %w", err)
	}
	return r, f, nil
}

// seqKey is ref + "/" + big-endian n, so a cursor lists in numeric order.
func seqKey(ref string, n int) []byte {
	k := make([]byte, 0, len(ref)+5)
	k = append(k, ref...)
	k = append(k, '/')
	return binary.BigEndian.AppendUint32(k, uint32(n))
}

// scanJSON decodes every value under prefix (all, for nil), in key order.
func scanJSON[T any](b *bolt.Bucket, prefix []byte) ([]T, error) {
	var out []T
	c := b.Cursor()
	for k, v := c.Seek(prefix); k != nil && bytes.HasPrefix(k, prefix); k, v = c.Next() {
		var x T
		if err := json.Unmarshal(v, &x); err != nil {
			return nil, fmt.Errorf("catalog: %s: %w", k, err)
		}
		out = append(out, x)
	}
	return out, nil
}

// listOfDataset lists one dataset's records of a bucket keyed by seqKey.
func listOfDataset[T any](s *Store, bucket []byte, project, dataset string) ([]T, error) {
	var out []T
	ref := project + "/" + dataset
	err := s.db.View(func(tx *bolt.Tx) (err error) {
		if tx.Bucket(bucketDatasets).Get([]byte(ref)) == nil {
			return fmt.Errorf("dataset %q: %w", ref, ErrNotFound)
		}
		out, err = scanJSON[T](tx.Bucket(bucket), []byte(ref+"/"))
		return err
	})
	return out, err
}

func putJSON(b *bolt.Bucket, k []byte, v any) error {
	data, err := json.Marshal(v)
	if err != nil {
		return err
	}
	return b.Put(k, data)
}

func getJSON(b *bolt.Bucket, k []byte, v any, what string) error {
	data := b.Get(k)
	if data == nil {
		return fmt.Errorf("%s: %w", what, ErrNotFound)
	}
	return json.Unmarshal(data, v)
}

func utcPtr(t *time.Time) *time.Time {
	if t == nil {
		return nil
	}
	u := t.UTC()
	return &u
}
