package catalog

import (
	"bytes"
	"context"
	"crypto/sha256"
	"encoding/json"
	"io"
	"io/fs"
	"os"
	"path/filepath"
	"reflect"
	"strconv"
	"strings"
	"testing"

	bolt "go.etcd.io/bbolt"

	"github.com/flowcat-catalog/flowcat/anonymize"
	"github.com/flowcat-catalog/flowcat/catalog/blob/localfs"
	"github.com/flowcat-catalog/flowcat/quality"
)

// copyTree copies the directory src to dst (created), files readable and
// writable by the test.
func copyTree(t testing.TB, src, dst string) {
	t.Helper()
	err := filepath.WalkDir(src, func(p string, d fs.DirEntry, err error) error {
		if err != nil {
			return err
		}
		rel, _ := filepath.Rel(src, p)
		to := filepath.Join(dst, rel)
		if d.IsDir() {
			return os.MkdirAll(to, 0o700)
		}
		b, err := os.ReadFile(p)
		if err != nil {
			return err
		}
		return os.WriteFile(to, b, 0o600)
	})
	if err != nil {
		t.Fatal(err)
	}
}

// TestGoldenDataDirectories opens every data directory under
// testdata/golden (each written by an earlier release, see its README)
// with today's code and checks that nothing it stored changed meaning:
// every version's manifest is served as the bytes that hash to its
// snapshot id, equal to what that release served, and every file of every
// manifest hashes to its sha256. It opens each twice, since the first
// open migrates.
func TestGoldenDataDirectories(t *testing.T) {
	dirs, err := filepath.Glob("../testdata/golden/*/data")
	if err != nil || len(dirs) == 0 {
		t.Fatalf("no golden data directories (%v)", err)
	}
	for _, src := range dirs {
		name := filepath.Base(filepath.Dir(src))
		t.Run(name, func(t *testing.T) {
			dir := t.TempDir()
			copyTree(t, src, dir)
			master, err := anonymize.LoadMasterKeyFile(filepath.Join(dir, "master.key"))
			if err != nil {
				t.Fatal(err)
			}
			for round := 1; round <= 2; round++ {
				checkGolden(t, filepath.Dir(src), dir, master)
			}
		})
	}
}

func checkGolden(t *testing.T, golden, dir string, master anonymize.MasterKey) {
	t.Helper()
	ctx := context.Background()
	blobs, err := localfs.New(filepath.Join(dir, "blobs"))
	if err != nil {
		t.Fatal(err)
	}
	s, err := Open(filepath.Join(dir, "catalog.db"), blobs, Options{Master: master, TempDir: t.TempDir()})
	if err != nil {
		t.Fatal(err)
	}
	defer s.Close()
	s.db.View(func(tx *bolt.Tx) error {
		if f := string(tx.Bucket(bucketMeta).Get([]byte("format"))); f != storeFormat || tx.Bucket(bucketOldHeads) != nil || tx.Bucket(bucketMeta).Get([]byte("heads_format")) != nil {
			t.Errorf("after open: format %q (want %s), old heads left: %v", f, storeFormat, tx.Bucket(bucketOldHeads) != nil)
		}
		return nil
	})
	projects, err := s.Projects(ctx)
	if err != nil || len(projects) == 0 {
		t.Fatalf("projects %v, %v", projects, err)
	}
	versions := 0
	for _, p := range projects {
		dss, err := s.Datasets(ctx, p.Name)
		if err != nil {
			t.Fatal(err)
		}
		for _, d := range dss {
			vs, err := s.Versions(ctx, d.Project, d.Name)
			if err != nil {
				t.Fatal(err)
			}
			if len(vs) != d.Latest {
				t.Errorf("%s: %d versions, latest is %d", d.Ref(), len(vs), d.Latest)
			}
			for i := range vs {
				v := &vs[i]
				versions++
				mb, err := s.ManifestBytes(ctx, v)
				if err != nil {
					t.Fatal(err)
				}
				if SnapshotOf(mb) != v.SnapshotID {
					t.Errorf("%s@%d: manifest hashes to %x, snapshot id %s", d.Ref(), v.Number, sha256.Sum256(mb), v.SnapshotID)
				}
				served, err := os.ReadFile(filepath.Join(golden, "served", "manifest-"+strconv.Itoa(v.Number)+".json"))
				if err != nil {
					t.Fatal(err)
				}
				if !bytes.Equal(mb, served) {
					t.Errorf("%s@%d: manifest differs from the one the release served", d.Ref(), v.Number)
				}
				// The report is the one the manifest names, or, for a
				// manifest that embeds it, moved out byte for byte.
				var old struct {
					Quality json.RawMessage `json:"quality"`
				}
				json.Unmarshal(mb, &old)
				rep, err := s.QualityReport(ctx, v)
				switch q := v.Manifest.Quality; {
				case err != nil:
					t.Errorf("%s@%d: report: %v", d.Ref(), v.Number, err)
				case q != nil && (sha256.Sum256(rep) != q.SHA256 || int64(len(rep)) != q.Bytes || old.Quality != nil):
					t.Errorf("%s@%d: stored report differs from the one its manifest names", d.Ref(), v.Number)
				case q == nil && !bytes.Equal(rep, old.Quality):
					t.Errorf("%s@%d: stored report differs from the one embedded in its manifest", d.Ref(), v.Number)
				}
				r, err := s.Report(ctx, v)
				if err != nil {
					t.Errorf("%s@%d: report does not decode: %v", d.Ref(), v.Number, err)
				} else {
					checkHeadline(t, v, r)
				}
				if len(v.Manifest.Blobs()) == 0 {
					t.Errorf("%s@%d: no files", d.Ref(), v.Number)
				}
				for _, f := range v.Manifest.Blobs() {
					r, _, err := s.OpenFile(ctx, v, f.SHA256)
					if err != nil {
						t.Fatal(err)
					}
					h := sha256.New()
					n, err := io.Copy(h, r)
					r.Close()
					if err != nil || n != f.Bytes || !bytes.Equal(h.Sum(nil), f.SHA256[:]) {
						t.Errorf("%s@%d: file %s: %d bytes, sha256 %x (%v)", d.Ref(), v.Number, f.SHA256, n, h.Sum(nil), err)
					}
				}
			}
		}
	}
	readme, _ := os.ReadFile(filepath.Join(golden, "README.md"))
	if versions == 0 || !strings.Contains(string(readme), "| "+strconv.Itoa(versions)+" |") {
		t.Errorf("%d versions; the README's table should list each", versions)
	}
}

// checkHeadline checks that v's record holds its manifest's and report's
// headline figures (filled at commit, or by the migration for records of
// older formats), as the list of versions serves them.
func checkHeadline(t *testing.T, v *Version, r *quality.Report) {
	t.Helper()
	m := v.Manifest
	if v.Mode != m.Lineage.Mode || v.Files != len(m.Files) || v.Rows != m.Rows || !reflect.DeepEqual(v.Events, m.Lineage.Events) {
		t.Errorf("%s@%d: record's mode %q files %d rows %d events %v; manifest's %q, %d, %d, %v", v.Dataset, v.Number, v.Mode, v.Files, v.Rows, v.Events, m.Lineage.Mode, len(m.Files), m.Rows, m.Lineage.Events)
	}
	if (v.Quality.Score == nil) != (r.Score == nil) || r.Score != nil && *v.Quality.Score != *r.Score {
		t.Errorf("%s@%d: record's score %v, report's %v", v.Dataset, v.Number, v.Quality.Score, r.Score)
	}
	if len(v.Scores) != len(r.Dimensions) {
		t.Errorf("%s@%d: record has %d dimension scores, report %d", v.Dataset, v.Number, len(v.Scores), len(r.Dimensions))
	}
	for _, d := range r.Dimensions {
		if s, ok := v.Scores[d.Name]; !ok || (s == nil) != (d.Score == nil) || s != nil && *s != *d.Score {
			t.Errorf("%s@%d: record's %s score %v, report's %v", v.Dataset, v.Number, d.Name, s, d.Score)
		}
	}
}
