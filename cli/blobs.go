package cli

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"os"
	"strings"
	"time"

	"github.com/flowcat-catalog/flowcat/catalog/blob"
	"github.com/flowcat-catalog/flowcat/catalog/blob/localfs"
	"github.com/flowcat-catalog/flowcat/catalog/blob/s3store"
)

// blobsFlagHelp is the help of --blobs on every command that takes it.
const blobsFlagHelp = "where snapshot files are kept: s3://BUCKET/PREFIX for an S3-compatible store (endpoint and keys from the environment, see README), default DIR/blobs; recorded in DIR/instance.json"

// openBlobs opens the blob store named by spec: "" is the data
// directory's blobs/ folder, s3://bucket/prefix an S3-compatible store
// configured from the environment (s3store.FromEnv).
func (d dataDir) openBlobs(spec string) (blob.Store, error) {
	if spec == "" {
		return localfs.New(d.blobs())
	}
	if !strings.HasPrefix(spec, "s3://") {
		return nil, usageErr("--blobs %q: want s3://BUCKET/PREFIX (or no --blobs for DIR/blobs)", spec)
	}
	cfg, err := s3store.FromEnv(spec, os.Getenv)
	if err != nil {
		return nil, err
	}
	ctx, cancel := context.WithTimeout(context.Background(), 30*time.Second)
	defer cancel()
	return s3store.New(ctx, cfg)
}

// blobsSpec resolves the blob store of the data directory: what
// instance.json records, which --blobs (flag) may repeat but not change.
// A directory that records none keeps its blobs in DIR/blobs; --blobs
// given for it is recorded when DIR/blobs holds no blob yet (a new
// directory), and refused otherwise, since the versions already made
// name files kept there.
func (d dataDir) blobsSpec(flag string) (string, error) {
	inst, err := d.readInstance()
	if err != nil {
		return "", err
	}
	switch {
	case flag == "" || flag == inst.Blobs:
		return inst.Blobs, nil
	case inst.Blobs != "":
		return "", usageErr("--blobs %s: %s keeps its snapshot files in %s (per %s); a data directory's blob store does not change", flag, d, inst.Blobs, d.instance())
	}
	local, err := localfs.New(d.blobs())
	if err != nil {
		return "", err
	}
	errHeld := errors.New("held")
	if err := local.List(context.Background(), func(blob.Info) error { return errHeld }); errors.Is(err, errHeld) {
		return "", usageErr("--blobs %s: %s already keeps snapshot files in %s; a data directory's blob store does not change", flag, d, d.blobs())
	} else if err != nil {
		return "", err
	}
	if _, err := d.openBlobs(flag); err != nil {
		return "", err
	}
	inst.Blobs = flag
	if err := d.writeInstance(inst); err != nil {
		return "", err
	}
	return flag, nil
}

// writeInstance replaces instance.json (written whole, then renamed).
func (d dataDir) writeInstance(inst instance) error {
	b, _ := json.MarshalIndent(inst, "", "  ")
	tmp := d.instance() + ".tmp"
	if err := os.WriteFile(tmp, append(b, '\n'), 0o600); err != nil {
		return err
	}
	if err := os.Rename(tmp, d.instance()); err != nil {
		return fmt.Errorf("%s: %w", d.instance(), err)
	}
	return nil
}
