package cli

import (
	"crypto/sha256"
	"encoding/hex"
	"encoding/json"
	"fmt"
	"os"
	"path/filepath"
	"strings"

	"github.com/spf13/cobra"

	"github.com/flowcat-catalog/flowcat/catalog"
)

// verifyProblem is one way a pulled directory differs from its lock.
type verifyProblem struct {
	Path    string `json:"path"`
	Problem string `json:"problem"`
}

func newVerifyCmd(e *env) *cobra.Command {
	return &cobra.Command{
		Use:   "verify DIR",
		Short: "Check a pulled directory against its lock file and manifest, offline",
		Args:  cobra.ExactArgs(1),
		RunE: func(cmd *cobra.Command, args []string) error {
			dir := args[0]
			lock, err := readLock(dir)
			if err != nil {
				return err
			}
			probs := verifyDir(dir, lock)
			if e.json {
				writeJSON(e.stdout, map[string]any{"ok": len(probs) == 0, "dataset": lock.Dataset, "version": lock.Version, "snapshot_id": lock.SnapshotID, "problems": probs})
			} else if len(probs) == 0 {
				fmt.Fprintf(e.stdout, "ok: %s@%d, snapshot %s, %d files match\n", lock.Dataset, lock.Version, lock.SnapshotID, len(lock.Files))
			} else {
				for _, p := range probs {
					fmt.Fprintf(e.stdout, "FAIL %s: %s\n", p.Path, p.Problem)
				}
			}
			if len(probs) > 0 {
				return errSilent
			}
			return nil
		},
	}
}

func verifyDir(dir string, lock *lockFile) []verifyProblem {
	var probs []verifyProblem
	add := func(path, format string, args ...any) {
		probs = append(probs, verifyProblem{Path: path, Problem: fmt.Sprintf(format, args...)})
	}
	mb, err := os.ReadFile(filepath.Join(dir, "manifest.json"))
	if err != nil {
		add("manifest.json", "%v", err)
		return probs
	}
	sum := sha256.Sum256(mb)
	if hex.EncodeToString(sum[:]) != lock.SnapshotID {
		add("manifest.json", "sha256 %x is not the locked snapshot id %s", sum, lock.SnapshotID)
	}
	var m catalog.Manifest
	if err := json.Unmarshal(mb, &m); err != nil {
		add("manifest.json", "not a manifest: %v", err)
		return probs
	}
	if m.Dataset.String() != lock.Dataset || m.Version != lock.Version {
		add("manifest.json", "is %s@%d, the lock says %s@%d", m.Dataset, m.Version, lock.Dataset, lock.Version)
	}
	inManifest := map[string]catalog.FileEntry{}
	for _, f := range m.Files {
		inManifest[f.SHA256.String()] = f
	}
	locked := map[string]bool{}
	for _, f := range lock.Files {
		locked[f.SHA256] = true
		mf, ok := inManifest[f.SHA256]
		switch {
		case !ok:
			add("flowcat.lock", "lists %s, which the manifest does not", f.SHA256)
		case f.Bytes != mf.Bytes || f.Rows != mf.Rows:
			add("flowcat.lock", "says %s has %d bytes and %d rows, the manifest %d and %d", f.SHA256, f.Bytes, f.Rows, mf.Bytes, mf.Rows)
		}
		if f.Path != dataPath(f.SHA256) {
			add("flowcat.lock", "names %s at %q, not at %s", f.SHA256, f.Path, dataPath(f.SHA256))
		}
	}
	for _, f := range m.Files {
		if !locked[f.SHA256.String()] {
			add("flowcat.lock", "does not list manifest file %s", f.SHA256)
		}
	}
	if len(m.Files) != len(lock.Files) {
		add("flowcat.lock", "lists %d files, the manifest %d", len(lock.Files), len(m.Files))
	}
	// Anything else in data/ would be read as part of the snapshot.
	if ents, err := os.ReadDir(filepath.Join(dir, "data")); err == nil {
		for _, de := range ents {
			name := de.Name()
			if sha, ok := strings.CutSuffix(name, ".parquet"); !ok || !locked[sha] {
				add("data/"+name, "is not part of the version")
			}
		}
	}
	for _, f := range lock.Files {
		got, err := fileSHA256(filepath.Join(dir, filepath.FromSlash(f.Path)))
		switch {
		case err != nil:
			add(f.Path, "%v", err)
		case got != f.SHA256:
			add(f.Path, "sha256 is %s, want %s", got, f.SHA256)
		}
	}
	return probs
}
