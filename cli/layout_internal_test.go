package cli

import (
	"context"
	"os"
	"path/filepath"
	"testing"

	"github.com/minio/minio-go/v7/pkg/credentials"

	"github.com/flowcat-catalog/flowcat/catalog/blob/s3store"
	"github.com/flowcat-catalog/flowcat/catalog/blob/s3store/s3test"
	"github.com/flowcat-catalog/flowcat/catalog/export"
)

// TestPublishS3RemovesWhatItSentOnFailure: a layout whose second file
// cannot be sent leaves no object under the prefix (the first removed),
// and no manifest names a half layout.
func TestPublishS3RemovesWhatItSentOnFailure(t *testing.T) {
	srv := s3test.Fake(t)
	bucket := srv.NewBucket(t)
	ctx := context.Background()
	objs, err := s3store.NewObjects(ctx, s3store.Config{Bucket: bucket, Prefix: "lay", Endpoint: srv.Endpoint,
		Credentials: credentials.NewStaticV4(srv.AccessKey, srv.SecretKey, "")})
	if err != nil {
		t.Fatal(err)
	}
	stage := t.TempDir()
	first := "site=a/date=2026-03-01/part-0.parquet"
	os.MkdirAll(filepath.Join(stage, "site=a", "date=2026-03-01"), 0o755)
	os.WriteFile(filepath.Join(stage, filepath.FromSlash(first)), []byte("PAR1 test"), 0o644)
	os.WriteFile(filepath.Join(stage, export.ManifestName), []byte("{}"), 0o644)
	files := []export.LayoutFile{
		{Path: first},
		{Path: "site=b/date=2026-03-01/part-0.parquet"}, // not written: the send fails
	}
	files[0].SHA256, _ = fileSHA256(filepath.Join(stage, filepath.FromSlash(first)))
	if err := publishS3(ctx, objs, stage, files); err == nil {
		t.Fatal("publish of a layout with a missing file succeeded")
	}
	if empty, err := objs.Empty(ctx); err != nil || !empty {
		var left []string
		objs.List(ctx, func(rel string, _ int64) error { left = append(left, rel); return nil })
		t.Errorf("objects left after a failed publish: %v (%v)", left, err)
	}
}
