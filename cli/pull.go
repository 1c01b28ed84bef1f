package cli

import (
	"crypto/sha256"
	"encoding/hex"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"io/fs"
	"net/http"
	"os"
	"path/filepath"
	"strings"
	"time"

	"github.com/schollz/progressbar/v3"
	"github.com/spf13/cobra"

	"github.com/flowcat-catalog/flowcat/catalog"
	"github.com/flowcat-catalog/flowcat/catalog/blob"
)

// lockName is the lock file pull writes and verify reads.
const lockName = "flowcat.lock"

// lockFile pins a pulled version: where it came from and every byte of it.
type lockFile struct {
	LockVersion int        `json:"lock_version"`
	Server      string     `json:"server"`
	Dataset     string     `json:"dataset"`
	Version     int        `json:"version"`
	SnapshotID  string     `json:"snapshot_id"` // sha256 of manifest.json
	Files       []lockedFS `json:"files"`
	PulledAt    time.Time  `json:"pulled_at"`
}

type lockedFS struct {
	Path   string `json:"path"`
	SHA256 string `json:"sha256"`
	Bytes  int64  `json:"bytes"`
	Rows   int64  `json:"rows"`
}

func newPullCmd(e *env) *cobra.Command {
	var out, lockPath string
	c := &cobra.Command{
		Use:   "pull PROJECT/DATASET[@VERSION] -o DIR | pull --lock FILE -o DIR",
		Short: "Download a version, verify every sha256 and write a lock file",
		Long: `Pull downloads a version's manifest and Parquet files into DIR, checks each file's
sha256 and the manifest's hash (the snapshot id), and writes DIR/flowcat.lock naming the server,
dataset, version, snapshot id and every file's sha256. An interrupted pull resumes where it stopped.

VERSION is a number, latest (the default: the newest published version), a snapshot id prefix
of 8 or more hex digits, or an RFC 3339 instant (the version published and in force then).

With --lock FILE, pull reproduces a lock file written elsewhere: the same server (taken from the
lock unless --server or FLOWCAT_SERVER names one, which must then be the lock's), the same version
and exactly the same bytes; it fails, keeping nothing new, when the server's snapshot id or any
file's sha256 differs from the lock.`,
		Args: cobra.MaximumNArgs(1),
		RunE: func(cmd *cobra.Command, args []string) error {
			if out == "" {
				return usageErr("pull: -o DIR is required")
			}
			var (
				r    ref
				want *lockFile
			)
			switch {
			case lockPath != "" && len(args) > 0:
				return usageErr("pull: give a dataset or --lock, not both")
			case lockPath != "":
				l, err := readLockFile(lockPath)
				if err != nil {
					return err
				}
				if err := e.useLockServer(l); err != nil {
					return err
				}
				want = l
				r, err = parseRef(l.Dataset, false)
				if err != nil {
					return fmt.Errorf("%s: dataset %q: %w", lockPath, l.Dataset, err)
				}
				r = r.at(l.Version)
			case len(args) == 1:
				var err error
				if r, err = parseRef(args[0], true); err != nil {
					return err
				}
			default:
				return usageErr("pull: give PROJECT/DATASET[@VERSION] or --lock FILE")
			}
			cl, err := e.client()
			if err != nil {
				return err
			}
			lock, err := e.pull(cmd, cl, r, out, want)
			if err != nil {
				return err
			}
			if e.json {
				return writeJSON(e.stdout, lock)
			}
			var rows int64
			for _, f := range lock.Files {
				rows += f.Rows
			}
			how := "all sha256 verified"
			if want != nil {
				how = "identical to " + lockPath
			}
			fmt.Fprintf(e.stdout, "pulled %s@%d into %s: %d files, %d rows, %s\nsnapshot %s\n",
				lock.Dataset, lock.Version, out, len(lock.Files), rows, how, lock.SnapshotID)
			return nil
		},
	}
	c.Flags().StringVarP(&out, "output", "o", "", "directory to write into")
	c.Flags().StringVar(&lockPath, "lock", "", "reproduce the version and bytes pinned by this lock file")
	return c
}

// useLockServer makes the lock's server the one to talk to, unless one is
// configured already, which must then be the lock's.
func (e *env) useLockServer(l *lockFile) error {
	if e.server == "" {
		e.server = os.Getenv("FLOWCAT_SERVER")
	}
	if e.server == "" {
		e.server = l.Server
		return nil
	}
	if normServer(e.server) != normServer(l.Server) {
		return usageErr("the lock file is for server %s, but this pull talks to %s: pass --server %s", l.Server, e.server, l.Server)
	}
	return nil
}

func normServer(s string) string { return strings.ToLower(strings.TrimRight(s, "/")) }

// errLockMismatch is a pull --lock whose server bytes differ from the lock.
func lockMismatch(format string, args ...any) error {
	return &exitError{code: ExitRejected, err: fmt.Errorf("pull --lock: "+format, args...)}
}

// pull downloads version r into out. With want (a lock file), the
// version must have want's snapshot id and files, checked before any file
// is written.
func (e *env) pull(cmd *cobra.Command, cl *client, r ref, out string, want *lockFile) (*lockFile, error) {
	ctx := cmd.Context()
	var v catalog.Version
	if err := cl.getJSON(ctx, r.versionPath(), &v); err != nil {
		return nil, err
	}
	if want != nil {
		if v.SnapshotID.String() != want.SnapshotID {
			return nil, lockMismatch("%s@%d on %s has snapshot id %s, the lock says %s: the server's version differs", want.Dataset, want.Version, want.Server, v.SnapshotID, want.SnapshotID)
		}
		if err := matchLockFiles(want, v.Manifest.Files); err != nil {
			return nil, err
		}
	}
	resp, err := cl.do(ctx, http.MethodGet, r.path()+fmt.Sprintf("/versions/%d/manifest", v.Number), nil, nil, nil)
	if err != nil {
		return nil, err
	}
	manifest, err := io.ReadAll(resp.Body)
	resp.Body.Close()
	if err != nil {
		return nil, fmt.Errorf("pull: manifest: %w", err)
	}
	if catalog.SnapshotOf(manifest) != v.SnapshotID {
		sum := sha256.Sum256(manifest)
		return nil, fmt.Errorf("pull: the manifest's sha256 %x is not the snapshot id %s", sum, v.SnapshotID)
	}
	// The file list comes from the manifest bytes just checked against the
	// snapshot id, not from the version's JSON.
	var m catalog.Manifest
	if err := json.Unmarshal(manifest, &m); err != nil {
		return nil, fmt.Errorf("pull: manifest: %w", err)
	}
	if want != nil {
		if err := matchLockFiles(want, m.Files); err != nil {
			return nil, err
		}
	}
	if err := os.MkdirAll(filepath.Join(out, "data"), 0o755); err != nil {
		return nil, err
	}
	server := *cl.base
	server.User = nil // never write credentials into the lock
	lock := &lockFile{LockVersion: 1, Server: server.String(), Dataset: r.Project + "/" + r.Dataset,
		Version: v.Number, SnapshotID: v.SnapshotID.String(), PulledAt: time.Now().UTC()}
	keep := map[string]bool{}
	for _, f := range m.Files {
		rel := dataPath(f.SHA256.String())
		if !keep[rel] {
			if err := e.fetchFile(cmd, cl, r.path()+fmt.Sprintf("/versions/%d/files/%s", v.Number, f.SHA256), filepath.Join(out, rel), f); err != nil {
				return nil, err
			}
		}
		keep[rel] = true
		lock.Files = append(lock.Files, lockedFS{Path: rel, SHA256: f.SHA256.String(), Bytes: f.Bytes, Rows: f.Rows})
	}
	if err := writeFileAtomic(filepath.Join(out, "manifest.json"), manifest); err != nil {
		return nil, err
	}
	b, _ := json.MarshalIndent(lock, "", "  ")
	if err := writeFileAtomic(filepath.Join(out, lockName), append(b, '\n')); err != nil {
		return nil, err
	}
	// Only now, with every file of this version here and its lock written,
	// remove files of another version pulled here before (only pull's own
	// data/<sha256>.parquet files), which would otherwise be read with it.
	if ents, err := os.ReadDir(filepath.Join(out, "data")); err == nil {
		for _, de := range ents {
			name := strings.TrimSuffix(de.Name(), ".part")
			sha, _, _ := strings.Cut(name, ".")
			if _, err := blob.ParseID(sha); err == nil && !keep["data/"+name] || strings.HasSuffix(de.Name(), ".part") && keep["data/"+name] {
				if err := os.Remove(filepath.Join(out, "data", de.Name())); err != nil {
					return nil, err
				}
			}
		}
	}
	return lock, nil
}

// fetchFile downloads one file to dst, resuming a dst.part left by an
// interrupted pull with a Range request, and verifies its sha256.
func (e *env) fetchFile(cmd *cobra.Command, cl *client, path, dst string, f catalog.FileEntry) error {
	want := f.SHA256.String()
	if got, err := fileSHA256(dst); err == nil && got == want {
		return nil // already here and whole
	}
	part := dst + ".part"
	var have int64
	if fi, err := os.Stat(part); err == nil && fi.Size() < f.Bytes {
		have = fi.Size()
	}
	hdr := http.Header{}
	if have > 0 {
		hdr.Set("Range", fmt.Sprintf("bytes=%d-", have))
		hdr.Set("If-Range", `"`+want+`"`)
	}
	resp, err := cl.do(cmd.Context(), http.MethodGet, path, nil, nil, hdr)
	if err != nil {
		return err
	}
	defer resp.Body.Close()
	flags := os.O_WRONLY | os.O_CREATE | os.O_TRUNC
	if resp.StatusCode == http.StatusPartialContent {
		flags = os.O_WRONLY | os.O_APPEND
	} else {
		have = 0
	}
	w, err := os.OpenFile(part, flags, 0o644)
	if err != nil {
		return err
	}
	var body io.Reader = resp.Body
	if e.tty() && !e.quiet && !e.json {
		bar := progressbar.NewOptions64(f.Bytes, progressbar.OptionSetWriter(e.stderr), progressbar.OptionShowBytes(true),
			progressbar.OptionSetDescription("pulling "+want[:12]), progressbar.OptionClearOnFinish())
		bar.Set64(have)
		pr := progressbar.NewReader(resp.Body, bar)
		body = &pr
	}
	if _, err := io.Copy(w, body); err != nil {
		w.Close()
		return fmt.Errorf("pull: %s: download interrupted after some bytes; run pull again to resume: %w", want[:12], err)
	}
	if err := w.Sync(); err != nil {
		w.Close()
		return err
	}
	if err := w.Close(); err != nil {
		return err
	}
	got, err := fileSHA256(part)
	if err != nil {
		return err
	}
	if got != want {
		os.Remove(part)
		return fmt.Errorf("pull: file %s arrived with sha256 %s: the bytes differ from the manifest", want, got)
	}
	return os.Rename(part, dst)
}

// dataPath is where pull puts a file of a version, relative to its directory.
func dataPath(sha string) string { return "data/" + sha + ".parquet" }

func fileSHA256(path string) (string, error) {
	f, err := os.Open(path)
	if err != nil {
		return "", err
	}
	defer f.Close()
	h := sha256.New()
	if _, err := io.Copy(h, f); err != nil {
		return "", err
	}
	return hex.EncodeToString(h.Sum(nil)), nil
}

func writeFileAtomic(path string, data []byte) error {
	tmp := path + ".tmp"
	if err := os.WriteFile(tmp, data, 0o644); err != nil {
		return err
	}
	return os.Rename(tmp, path)
}

// matchLockFiles checks that files are exactly the lock's.
func matchLockFiles(want *lockFile, files []catalog.FileEntry) error {
	if len(files) != len(want.Files) {
		return lockMismatch("the server lists %d files, the lock %d", len(files), len(want.Files))
	}
	for i, f := range files {
		if w := want.Files[i]; w.SHA256 != f.SHA256.String() || w.Bytes != f.Bytes || w.Path != dataPath(f.SHA256.String()) {
			return lockMismatch("file %d: the server has %s (%d bytes), the lock %s (%d bytes)", i+1, f.SHA256, f.Bytes, w.SHA256, w.Bytes)
		}
	}
	return nil
}

// readLockFile reads a lock file by its path.
func readLockFile(path string) (*lockFile, error) {
	b, err := os.ReadFile(path)
	if err != nil {
		return nil, usageErr("lock file: %v", err)
	}
	var l lockFile
	if err := json.Unmarshal(b, &l); err != nil || l.LockVersion != 1 || l.Server == "" || l.SnapshotID == "" || l.Version < 1 {
		return nil, usageErr("%s: not a flowcat lock file (version 1 with server, dataset, version and snapshot id)", path)
	}
	return &l, nil
}

func readLock(dir string) (*lockFile, error) {
	b, err := os.ReadFile(filepath.Join(dir, lockName))
	if errors.Is(err, fs.ErrNotExist) {
		if _, derr := os.Stat(dir); derr != nil {
			return nil, usageErr("%s: no such directory", dir)
		}
		return nil, fmt.Errorf("%s: no %s here: not a pulled version, or its lock was removed", dir, lockName)
	}
	if err != nil {
		return nil, err
	}
	var l lockFile
	if err := json.Unmarshal(b, &l); err != nil || l.LockVersion != 1 {
		return nil, fmt.Errorf("%s: not a flowcat lock file (version 1)", filepath.Join(dir, lockName))
	}
	return &l, nil
}
