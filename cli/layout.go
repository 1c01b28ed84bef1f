package cli

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io/fs"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"time"

	"github.com/spf13/cobra"

	"github.com/flowcat-catalog/flowcat/catalog"
	"github.com/flowcat-catalog/flowcat/catalog/blob/s3store"
	"github.com/flowcat-catalog/flowcat/catalog/export"
)

// exportLayout writes version r as an engine-readable layout at dest: a
// new (or empty) directory, or s3://bucket/prefix under which nothing is
// stored yet. It pulls the version into a temporary directory (every
// sha256 verified), partitions its events there (catalog/export), and
// only then publishes: a directory by one rename, S3 file by file with
// the manifest and index last, removing what it sent if a send fails.
func (e *env) exportLayout(cmd *cobra.Command, r ref, dest string) error {
	ctx := cmd.Context()
	var objs *s3store.Objects
	if strings.HasPrefix(dest, "s3://") {
		cfg, err := s3store.FromEnv(dest, os.Getenv)
		if err != nil {
			return fmt.Errorf("export --layout: %w", err)
		}
		if objs, err = s3store.NewObjects(ctx, cfg); err != nil {
			return fmt.Errorf("export --layout: %w", err)
		}
		empty, err := objs.Empty(ctx)
		if err != nil {
			return fmt.Errorf("export --layout: %w", err)
		}
		if !empty {
			return &exitError{code: ExitRejected, err: fmt.Errorf("export --layout: %s holds objects already; give a new prefix", dest)}
		}
	} else if ents, err := os.ReadDir(dest); err == nil && len(ents) > 0 {
		return &exitError{code: ExitRejected, err: fmt.Errorf("export --layout: %s is not empty; give a new directory", dest)}
	} else if err != nil && !errors.Is(err, fs.ErrNotExist) {
		return fmt.Errorf("export --layout: %w", err)
	}
	cl, err := e.client()
	if err != nil {
		return err
	}
	var ds catalog.Dataset
	if err := cl.getJSON(ctx, r.path(), &ds); err != nil {
		return err
	}
	zone, err := time.LoadLocation(ds.Timezone)
	if err != nil {
		return fmt.Errorf("export --layout: the dataset's zone %q: %w", ds.Timezone, err)
	}
	work, err := os.MkdirTemp("", "flowcat-layout-*")
	if err != nil {
		return err
	}
	defer os.RemoveAll(work)
	pulled := filepath.Join(work, "pull")
	pin, err := e.pull(cmd, cl, r, pulled, nil, false)
	if err != nil {
		return err
	}
	manifest, err := os.ReadFile(filepath.Join(pulled, "manifest.json"))
	if err != nil {
		return err
	}
	var m catalog.Manifest
	if err := json.Unmarshal(manifest, &m); err != nil {
		return fmt.Errorf("export --layout: manifest: %w", err)
	}
	stage := filepath.Join(work, "layout")
	if objs == nil {
		abs, err := filepath.Abs(dest)
		if err != nil {
			return err
		}
		if err := os.MkdirAll(filepath.Dir(abs), 0o755); err != nil {
			return err
		}
		// Beside dest, so that publishing is one rename.
		if stage, err = os.MkdirTemp(filepath.Dir(abs), "."+filepath.Base(abs)+".partial-"); err != nil {
			return err
		}
		defer os.RemoveAll(stage) // gone after the rename
	}
	meta := map[string]string{"flowcat.dataset": pin.Dataset, "flowcat.version": strconv.Itoa(pin.Version), "flowcat.snapshot_id": pin.SnapshotID}
	files, err := export.WriteLayout(ctx, export.DirSource(pulled, work), m.Files, stage, export.LayoutOptions{Zone: zone, Metadata: meta})
	if err != nil {
		return err
	}
	ix := export.NewLayoutIndex(pin.Dataset, pin.Version, pin.SnapshotID, zone, files)
	if err := os.WriteFile(filepath.Join(stage, export.ManifestName), manifest, 0o644); err != nil {
		return err
	}
	if err := os.WriteFile(filepath.Join(stage, export.LayoutIndexName), ix.Marshal(), 0o644); err != nil {
		return err
	}
	if objs == nil {
		if err := os.Remove(dest); err != nil && !errors.Is(err, fs.ErrNotExist) {
			return fmt.Errorf("export --layout: %w", err)
		}
		if err := os.Chmod(stage, 0o755); err != nil {
			return err
		}
		if err := os.Rename(stage, dest); err != nil {
			return fmt.Errorf("export --layout: %w", err)
		}
	} else if err := publishS3(ctx, objs, stage, files); err != nil {
		return err
	}
	if e.json {
		return writeJSON(e.stdout, ix)
	}
	glob := strings.TrimSuffix(dest, "/") + "/**/*.parquet"
	fmt.Fprintf(e.stdout, "wrote %s@%d as %d partitions (site, date in %s), %d rows, into %s, with %s and %s\n",
		pin.Dataset, pin.Version, len(files), zone, ix.Rows, dest, export.ManifestName, export.LayoutIndexName)
	fmt.Fprintf(e.stdout, "DuckDB: SELECT * FROM read_parquet('%s', hive_partitioning = true)\n", glob)
	return nil
}

// publishS3 sends the layout's files, then the manifest and the index;
// on a failure it removes what it sent.
func publishS3(ctx context.Context, objs *s3store.Objects, stage string, files []export.LayoutFile) (err error) {
	var sent []string
	defer func() {
		if err != nil {
			cctx := context.WithoutCancel(ctx)
			for _, rel := range sent {
				objs.Remove(cctx, rel)
			}
		}
	}()
	for _, f := range files {
		sha, err := objs.PutFile(ctx, f.Path, filepath.Join(stage, filepath.FromSlash(f.Path)))
		if err != nil {
			return fmt.Errorf("export --layout: %w", err)
		}
		sent = append(sent, f.Path)
		if sha != f.SHA256 {
			return fmt.Errorf("export --layout: %s changed while it was sent (sha256 %s, written %s)", f.Path, sha, f.SHA256)
		}
	}
	for _, name := range []string{export.ManifestName, export.LayoutIndexName} {
		if _, err := objs.PutFile(ctx, name, filepath.Join(stage, name)); err != nil {
			return fmt.Errorf("export --layout: %w", err)
		}
		sent = append(sent, name)
	}
	return nil
}
