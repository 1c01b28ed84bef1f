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

// verifyProblem is one way a pulled directory differs from its pin.
type verifyProblem struct {
	Path    string `json:"path"`
	Problem string `json:"problem"`
}

func newVerifyCmd(e *env) *cobra.Command {
	return &cobra.Command{
		Use:   "verify DIR",
		Short: "Check a pulled directory against its pin and manifest, offline",
		Long: `Verify checks, without a server, that DIR holds exactly the version its flowcat.pin (or the
flowcat.lock of older releases) names: manifest.json hashes to the snapshot id, every file the
manifest lists (and quality.json, the report it names) is there with its sha256, and nothing
else sits in data/.`,
		Args: cobra.ExactArgs(1),
		RunE: func(cmd *cobra.Command, args []string) error {
			dir := args[0]
			pin, name, err := readPin(dir)
			if err != nil {
				return err
			}
			probs := verifyDir(dir, pin, name)
			if e.json {
				writeJSON(e.stdout, map[string]any{"ok": len(probs) == 0, "dataset": pin.Dataset, "version": pin.Version, "snapshot_id": pin.SnapshotID, "problems": probs})
			} else if len(probs) == 0 {
				fmt.Fprintf(e.stdout, "ok: %s@%d, snapshot %s, %d files match\n", pin.Dataset, pin.Version, pin.SnapshotID, len(pin.Files))
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

// verifyDir compares dir with its pin (read from the file pinFile) and
// with the manifest.
func verifyDir(dir string, pin *pinFile, pinFile string) []verifyProblem {
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
	if hex.EncodeToString(sum[:]) != pin.SnapshotID {
		add("manifest.json", "sha256 %x is not the pinned snapshot id %s", sum, pin.SnapshotID)
	}
	var m catalog.Manifest
	if err := json.Unmarshal(mb, &m); err != nil {
		add("manifest.json", "not a manifest: %v", err)
		return probs
	}
	if m.Dataset.String() != pin.Dataset || m.Version != pin.Version {
		add("manifest.json", "is %s@%d, the pin says %s@%d", m.Dataset, m.Version, pin.Dataset, pin.Version)
	}
	// What the manifest says the directory holds.
	want := map[string]pinnedFile{}
	var order []string
	for _, f := range m.Blobs() {
		want[f.Path] = pinnedFile{Path: f.Path, SHA256: f.SHA256.String(), Bytes: f.Bytes, Rows: f.Rows}
		order = append(order, f.Path)
	}
	if q := m.Quality; q != nil {
		want[qualityName] = pinnedFile{Path: qualityName, SHA256: q.SHA256.String(), Bytes: q.Bytes}
		order = append(order, qualityName)
	}
	pinned := map[string]bool{}
	for _, f := range pin.Files {
		pinned[f.Path] = true
		mf, ok := want[f.Path]
		switch {
		case !ok:
			add(pinFile, "lists %s at %q, which the manifest does not", f.SHA256, f.Path)
		case f.SHA256 != mf.SHA256 || f.Bytes != mf.Bytes || f.Rows != mf.Rows:
			add(pinFile, "says %s is %s with %d bytes and %d rows, the manifest %s, %d and %d", f.Path, f.SHA256, f.Bytes, f.Rows, mf.SHA256, mf.Bytes, mf.Rows)
		}
	}
	for _, path := range order {
		// Older lock files did not list the quality report.
		if !pinned[path] && !(path == qualityName && pinFile == oldLockName) {
			add(pinFile, "does not list %s, which the manifest names", path)
		}
	}
	// Anything else in data/ or cases/ would be read as part of the
	// snapshot or its case table.
	for _, sub := range []string{"data", "cases"} {
		ents, err := os.ReadDir(filepath.Join(dir, sub))
		if err != nil {
			continue
		}
		for _, de := range ents {
			if _, ok := want[sub+"/"+de.Name()]; !ok || !strings.HasSuffix(de.Name(), ".parquet") {
				add(sub+"/"+de.Name(), "is not part of the version")
			}
		}
	}
	for _, path := range order {
		f := want[path]
		got, err := fileSHA256(filepath.Join(dir, filepath.FromSlash(path)))
		switch {
		case err != nil && path == qualityName && pinFile == oldLockName:
			// pulled by an older release, which kept the report in the manifest
		case err != nil:
			add(path, "%v", err)
		case got != f.SHA256:
			add(path, "sha256 is %s, want %s", got, f.SHA256)
		}
	}
	return probs
}
