package s3store

import (
	"context"
	"crypto/sha256"
	"encoding/hex"
	"fmt"
	"io"
	"os"
	"strings"

	"github.com/minio/minio-go/v7"
)

// Objects writes plain files as objects under a prefix of a bucket: the
// target of an engine-readable layout written to S3 (catalog/export).
type Objects struct {
	cl       *minio.Client
	bucket   string
	prefix   string // "" or ending in "/"
	partSize int64
}

// NewObjects connects as New does.
func NewObjects(ctx context.Context, cfg Config) (*Objects, error) {
	cl, prefix, ps, err := connect(ctx, cfg)
	if err != nil {
		return nil, err
	}
	return &Objects{cl: cl, bucket: cfg.Bucket, prefix: prefix, partSize: ps}, nil
}

// URL returns s3://bucket/prefix/rel.
func (o *Objects) URL(rel string) string { return "s3://" + o.bucket + "/" + o.prefix + rel }

// Empty reports whether no object has a key under the prefix.
func (o *Objects) Empty(ctx context.Context) (bool, error) {
	ctx, cancel := context.WithCancel(ctx)
	defer cancel()
	obj, listed := <-o.cl.ListObjects(ctx, o.bucket, minio.ListObjectsOptions{Prefix: o.prefix, Recursive: true, MaxKeys: 1})
	switch {
	case !listed:
		return true, nil
	case obj.Err != nil:
		return false, fmt.Errorf("s3store: list %s: %w", o.URL(""), obj.Err)
	}
	return false, nil
}

// PutFile stores the file at path as the object prefix/rel, in parts of
// the part size (one part in memory at a time), each part checked by the
// server against its MD5, and checks the stored size. It returns the
// file's SHA-256 (hex) as read while sending.
func (o *Objects) PutFile(ctx context.Context, rel, path string) (string, error) {
	f, err := os.Open(path)
	if err != nil {
		return "", err
	}
	defer f.Close()
	fi, err := f.Stat()
	if err != nil {
		return "", err
	}
	h := sha256.New()
	key := o.prefix + rel
	// A plain reader (not the file, which minio-go would read at offsets
	// in parallel): parts go one after another through one buffer.
	r := io.TeeReader(struct{ io.Reader }{f}, h)
	_, err = o.cl.PutObject(ctx, o.bucket, key, r, fi.Size(), minio.PutObjectOptions{
		ContentType: "application/octet-stream", PartSize: uint64(o.partSize), NumThreads: 1,
		SendContentMd5: true, DisableContentSha256: true,
	})
	if err != nil {
		return "", fmt.Errorf("s3store: put %s: %w", o.URL(rel), err)
	}
	info, err := o.cl.StatObject(ctx, o.bucket, key, minio.StatObjectOptions{})
	if err != nil {
		return "", fmt.Errorf("s3store: put %s: %w", o.URL(rel), err)
	}
	if info.Size != fi.Size() {
		return "", fmt.Errorf("s3store: put %s: sent %d bytes, the server holds %d", o.URL(rel), fi.Size(), info.Size)
	}
	return hex.EncodeToString(h.Sum(nil)), nil
}

// Remove deletes the object prefix/rel; a missing object is not an error.
func (o *Objects) Remove(ctx context.Context, rel string) error {
	err := o.cl.RemoveObject(ctx, o.bucket, o.prefix+rel, minio.RemoveObjectOptions{})
	if err != nil && !notFound(err) {
		return fmt.Errorf("s3store: delete %s: %w", o.URL(rel), err)
	}
	return nil
}

// Get returns the bytes of prefix/rel (for tests and small files).
func (o *Objects) Get(ctx context.Context, rel string) ([]byte, error) {
	obj, err := o.cl.GetObject(ctx, o.bucket, o.prefix+rel, minio.GetObjectOptions{})
	if err != nil {
		return nil, err
	}
	defer obj.Close()
	b, err := io.ReadAll(obj)
	if notFound(err) {
		return nil, fmt.Errorf("s3store: %s: %w", o.URL(rel), os.ErrNotExist)
	}
	return b, err
}

// List calls fn with every key under the prefix, relative to it.
func (o *Objects) List(ctx context.Context, fn func(rel string, size int64) error) error {
	ctx, cancel := context.WithCancel(ctx)
	defer cancel()
	for obj := range o.cl.ListObjects(ctx, o.bucket, minio.ListObjectsOptions{Prefix: o.prefix, Recursive: true}) {
		if obj.Err != nil {
			return fmt.Errorf("s3store: list %s: %w", o.URL(""), obj.Err)
		}
		if err := fn(strings.TrimPrefix(obj.Key, o.prefix), obj.Size); err != nil {
			return err
		}
	}
	return nil
}
