package s3store

import (
	"bytes"
	"context"
	"crypto/sha256"
	"encoding/binary"
	"errors"
	"fmt"
	"io"
	"os"
	"strings"
	"testing"
	"time"

	"github.com/minio/minio-go/v7"
	"github.com/minio/minio-go/v7/pkg/credentials"

	"github.com/flowcat-catalog/flowcat/catalog/blob"
	"github.com/flowcat-catalog/flowcat/catalog/blob/blobtest"
	"github.com/flowcat-catalog/flowcat/catalog/blob/s3store/s3test"
)

func newStore(t *testing.T, srv s3test.Server, prefix string) (*Store, string) {
	t.Helper()
	bucket := srv.NewBucket(t)
	s, err := New(context.Background(), Config{
		Bucket: bucket, Prefix: prefix, Endpoint: srv.Endpoint, PartSize: MinPartSize,
		Credentials: credentials.NewStaticV4(srv.AccessKey, srv.SecretKey, ""),
	})
	if err != nil {
		t.Fatal(err)
	}
	return s, bucket
}

// incomplete lists the multipart uploads in progress in bucket.
func incomplete(t *testing.T, srv s3test.Server, bucket string) []string {
	t.Helper()
	var keys []string
	for u := range srv.Client(t).ListIncompleteUploads(context.Background(), bucket, "", true) {
		if u.Err != nil {
			t.Fatal(u.Err)
		}
		keys = append(keys, u.Key)
	}
	return keys
}

// TestConformance runs the blob suite against each S3-compatible server:
// gofakes3 in process, and the real server .ci/run starts.
func TestConformance(t *testing.T) {
	for _, srv := range s3test.Servers(t) {
		t.Run(srv.Name, func(t *testing.T) {
			s, bucket := newStore(t, srv, "site-a/blobs")
			blobtest.Run(t, s)
			// No multipart upload outlives a Put, failed or not.
			if left := incomplete(t, srv, bucket); len(left) != 0 {
				t.Errorf("incomplete uploads left: %v", left)
			}
		})
	}
}

// TestPrefixesAreApart: two stores in one bucket under different prefixes
// see only their own blobs, and the keys are the documented ones.
func TestPrefixesAreApart(t *testing.T) {
	srv := s3test.Fake(t)
	a, bucket := newStore(t, srv, "a")
	b, err := New(context.Background(), Config{Bucket: bucket, Prefix: "/b/", Endpoint: srv.Endpoint,
		Credentials: credentials.NewStaticV4(srv.AccessKey, srv.SecretKey, "")})
	if err != nil {
		t.Fatal(err)
	}
	ctx := context.Background()
	data := []byte("only in a")
	id := blob.ID(sha256.Sum256(data))
	if err := a.Put(ctx, id, bytes.NewReader(data)); err != nil {
		t.Fatal(err)
	}
	if _, err := b.Stat(ctx, id); !errors.Is(err, blob.ErrNotFound) {
		t.Errorf("store b sees a's blob: %v", err)
	}
	n := 0
	b.List(ctx, func(blob.Info) error { n++; return nil })
	if n != 0 {
		t.Errorf("store b lists %d blobs", n)
	}
	h := id.String()
	if _, err := srv.Client(t).StatObject(ctx, bucket, "a/sha256/"+h[:2]+"/"+h, minio.StatObjectOptions{}); err != nil {
		t.Errorf("object not at a/sha256/%s/%s: %v", h[:2], h, err)
	}
}

// gate gives n bytes, then waits for release.
type gate struct {
	n       int
	started chan struct{}
	release chan struct{}
}

func (g *gate) Read(p []byte) (int, error) {
	if g.n == 0 {
		close(g.started)
		<-g.release
		return 0, io.EOF
	}
	k := min(len(p), g.n)
	for i := range k {
		p[i] = 'x'
	}
	g.n -= k
	return k, nil
}

// TestSweepTemp: an incomplete multipart upload (what a crash mid-Put
// leaves) is aborted by age, while the upload of a Put in progress is never
// touched, and a failed completion leaves nothing behind.
func TestSweepTemp(t *testing.T) {
	for _, srv := range s3test.Servers(t) {
		t.Run(srv.Name, func(t *testing.T) {
			s, bucket := newStore(t, srv, "p")
			ctx := context.Background()
			// What a crash leaves: an upload begun, a part sent, never
			// completed nor aborted.
			core := minio.Core{Client: srv.Client(t)}
			h := strings.Repeat("ab", 32)
			key := "p/sha256/ab/" + h
			up, err := core.NewMultipartUpload(ctx, bucket, key, minio.PutObjectOptions{})
			if err != nil {
				t.Fatal(err)
			}
			if _, err := core.PutObjectPart(ctx, bucket, key, up, 1, strings.NewReader("partial"), 7, minio.PutObjectPartOptions{
				Sha256Hex: fmt.Sprintf("%x", sha256.Sum256([]byte("partial"))), DisableContentSha256: true}); err != nil {
				t.Fatal(err)
			}
			// A Put in progress: its first part is sent, the rest waits.
			body := MinPartSize + 100
			g := &gate{n: body, started: make(chan struct{}), release: make(chan struct{})}
			id := blob.ID(sha256.Sum256(bytes.Repeat([]byte("x"), body)))
			done := make(chan error, 1)
			go func() { done <- s.Put(ctx, id, g) }()
			<-g.started

			if n, _, err := s.SweepTemp(ctx, time.Hour, false); err != nil || n != 0 {
				t.Errorf("sweep over an hour: %d uploads, %v; want 0 (the leftover is young)", n, err)
			}
			n, b, err := s.SweepTemp(ctx, 0, true)
			if err != nil || n != 1 || b != 7 {
				t.Errorf("dry run of all: %d uploads, %d bytes, %v; want 1, 7 (the leftover, not the Put's)", n, b, err)
			}
			if got := len(incomplete(t, srv, bucket)); got != 2 {
				t.Errorf("after a dry run: %d incomplete uploads, want 2", got)
			}
			if n, _, err := s.SweepTemp(ctx, 0, false); err != nil || n != 1 {
				t.Errorf("sweep of all: %d uploads, %v; want 1", n, err)
			}
			if got := incomplete(t, srv, bucket); len(got) != 1 || got[0] == key {
				t.Errorf("after the sweep: incomplete uploads %v, want only the Put's", got)
			}
			close(g.release)
			// The gate hands the short tail over at EOF: the Put ends
			// with the bytes it was given, which hash to id.
			if err := <-done; err != nil {
				t.Fatalf("Put during sweeps: %v", err)
			}
			if left := incomplete(t, srv, bucket); len(left) != 0 {
				t.Errorf("incomplete uploads left: %v", left)
			}
			if info, err := s.Stat(ctx, id); err != nil || info.Size != int64(body) {
				t.Errorf("blob put during the sweeps: %+v, %v", info, err)
			}

			// A completion that fails aborts the upload.
			testHookBeforeComplete = func() error { return errors.New("server went away (test)") }
			defer func() { testHookBeforeComplete = nil }()
			big := bytes.Repeat([]byte("y"), MinPartSize+1)
			bid := blob.ID(sha256.Sum256(big))
			if err := s.Put(ctx, bid, bytes.NewReader(big)); err == nil {
				t.Fatal("Put with a failing completion succeeded")
			}
			if _, err := s.Stat(ctx, bid); !errors.Is(err, blob.ErrNotFound) {
				t.Errorf("failed completion left a blob: %v", err)
			}
			if left := incomplete(t, srv, bucket); len(left) != 0 {
				t.Errorf("failed completion left incomplete uploads: %v", left)
			}
		})
	}
}

func TestParseURL(t *testing.T) {
	for _, c := range []struct{ in, bucket, prefix, err string }{
		{"s3://flowcat-data/site/blobs", "flowcat-data", "site/blobs", ""},
		{"s3://flowcat-data", "flowcat-data", "", ""},
		{"s3://flowcat-data/", "flowcat-data", "", ""},
		{"s3://flowcat-data/a/", "flowcat-data", "a", ""},
		{"s3://Flowcat/a", "", "", "lowercase"},
		{"s3://ab/a", "", "", "3 to 63"},
		{"s3://bucket/a//b", "", "", "empty"},
		{"s3://bucket/a/../b", "", "", ".."},
		{"file:///tmp", "", "", "want s3://BUCKET/PREFIX"},
		{"s3://bucket/a?x=1", "", "", "want s3://BUCKET/PREFIX"},
		{"/var/lib/flowcat", "", "", "want s3://BUCKET/PREFIX"},
	} {
		b, p, err := ParseURL(c.in)
		if c.err != "" {
			if err == nil || !strings.Contains(err.Error(), c.err) {
				t.Errorf("ParseURL(%q) = %v, want an error with %q", c.in, err, c.err)
			}
			continue
		}
		if err != nil || b != c.bucket || p != c.prefix {
			t.Errorf("ParseURL(%q) = %q, %q, %v; want %q, %q", c.in, b, p, err, c.bucket, c.prefix)
		}
	}
}

// TestNewRefuses: a missing bucket, and on the real server (which checks
// signatures) a wrong secret, fail at New with the store named.
func TestNewRefuses(t *testing.T) {
	ctx := context.Background()
	for _, srv := range s3test.Servers(t) {
		_, err := New(ctx, Config{Bucket: "no-such-bucket-here", Endpoint: srv.Endpoint,
			Credentials: credentials.NewStaticV4(srv.AccessKey, srv.SecretKey, "")})
		if err == nil || !strings.Contains(err.Error(), "s3://no-such-bucket-here/") {
			t.Errorf("%s: missing bucket: %v", srv.Name, err)
		}
		if srv.Name != "real" {
			continue
		}
		bucket := srv.NewBucket(t)
		_, err = New(ctx, Config{Bucket: bucket, Endpoint: srv.Endpoint,
			Credentials: credentials.NewStaticV4(srv.AccessKey, "wrong-secret", "")})
		if err == nil || strings.Contains(err.Error(), "wrong-secret") {
			t.Errorf("real: wrong secret: %v", err)
		}
	}
	if _, err := New(ctx, Config{Bucket: "abc", Endpoint: "127.0.0.1:9000"}); err == nil || !strings.Contains(err.Error(), "want http://HOST:PORT") {
		t.Errorf("endpoint without scheme: %v", err)
	}
	if _, err := New(ctx, Config{Bucket: "abc", Endpoint: "http://127.0.0.1:9", PartSize: 1 << 20}); err == nil || !strings.Contains(err.Error(), "5 MiB") {
		t.Errorf("small part size: %v", err)
	}
}

func TestFromEnv(t *testing.T) {
	env := func(m map[string]string) func(string) string { return func(k string) string { return m[k] } }
	cfg, err := FromEnv("s3://data-bucket/x", env(map[string]string{
		EnvEndpoint: "http://a:1", EnvEndpointS3: "http://b:2", EnvAccessKey: "AK", EnvSecretKey: "sk-secret-1", EnvPartSizeMiB: "16",
	}))
	if err != nil || cfg.Endpoint != "http://b:2" || cfg.Bucket != "data-bucket" || cfg.Prefix != "x" || cfg.PartSize != 16<<20 {
		t.Fatalf("FromEnv = %+v, %v", cfg, err)
	}
	if v, _ := cfg.Credentials.GetWithContext(nil); v.AccessKeyID != "AK" || v.SecretAccessKey != "sk-secret-1" {
		t.Errorf("credentials %q", v.AccessKeyID)
	}
	dir := t.TempDir()
	file := dir + "/credentials"
	os.WriteFile(file, []byte("[default]\naws_access_key_id = DK\naws_secret_access_key = DS\n[lab]\naws_access_key_id = LK\naws_secret_access_key = ls-secret-2\n"), 0o600)
	cfg, err = FromEnv("s3://data-bucket", env(map[string]string{EnvEndpoint: "http://a:1", EnvCredsFile: file, EnvProfile: "lab"}))
	if err != nil {
		t.Fatal(err)
	}
	if v, _ := cfg.Credentials.GetWithContext(nil); v.AccessKeyID != "LK" || v.SecretAccessKey != "ls-secret-2" {
		t.Errorf("file credentials: %q", v.AccessKeyID)
	}
	for _, c := range []struct {
		env  map[string]string
		want string
	}{
		{map[string]string{}, "AWS_ENDPOINT_URL_S3"},
		{map[string]string{EnvEndpoint: "http://a:1", EnvAccessKey: "AK"}, "set both"},
		{map[string]string{EnvEndpoint: "http://a:1", EnvCredsFile: dir + "/none"}, "no credentials"},
		{map[string]string{EnvEndpoint: "http://a:1", EnvCredsFile: file, EnvProfile: "nobody"}, "profile nobody"},
		{map[string]string{EnvEndpoint: "http://a:1", EnvAccessKey: "AK", EnvSecretKey: "sk-secret-1", EnvPartSizeMiB: "2"}, "FLOWCAT_S3_PART_MIB"},
	} {
		_, err := FromEnv("s3://data-bucket", env(c.env))
		if err == nil || !strings.Contains(err.Error(), c.want) {
			t.Errorf("FromEnv(%v) = %v, want an error with %q", c.env, err, c.want)
		}
		if err != nil && (strings.Contains(err.Error(), "sk-secret-1") || strings.Contains(err.Error(), "ls-secret-2")) {
			t.Errorf("error shows a secret: %v", err)
		}
	}
}

// TestObjects: a file larger than two parts is stored whole, listed,
// read back and removed, on each server.
func TestObjects(t *testing.T) {
	for _, srv := range s3test.Servers(t) {
		t.Run(srv.Name, func(t *testing.T) {
			bucket := srv.NewBucket(t)
			ctx := context.Background()
			o, err := NewObjects(ctx, Config{Bucket: bucket, Prefix: "layouts/v1", Endpoint: srv.Endpoint, PartSize: MinPartSize,
				Credentials: credentials.NewStaticV4(srv.AccessKey, srv.SecretKey, "")})
			if err != nil {
				t.Fatal(err)
			}
			if empty, err := o.Empty(ctx); err != nil || !empty {
				t.Fatalf("Empty = %v, %v", empty, err)
			}
			data := make([]byte, blobtest.LargeSize)
			for i := range data {
				data[i] = byte(i * 7 % 251)
			}
			path := t.TempDir() + "/f"
			os.WriteFile(path, data, 0o644)
			sha, err := o.PutFile(ctx, "site=a/date=2026-03-01/part-0.parquet", path)
			if err != nil {
				t.Fatal(err)
			}
			if want := fmt.Sprintf("%x", sha256.Sum256(data)); sha != want {
				t.Errorf("PutFile sha256 %s, want %s", sha, want)
			}
			got, err := o.Get(ctx, "site=a/date=2026-03-01/part-0.parquet")
			if err != nil || !bytes.Equal(got, data) {
				t.Fatalf("read back %d bytes, %v; want the %d sent", len(got), err, len(data))
			}
			var keys []string
			o.List(ctx, func(rel string, size int64) error { keys = append(keys, fmt.Sprint(rel, " ", size)); return nil })
			if want := fmt.Sprint("site=a/date=2026-03-01/part-0.parquet ", len(data)); len(keys) != 1 || keys[0] != want {
				t.Errorf("List = %v, want [%s]", keys, want)
			}
			if empty, _ := o.Empty(ctx); empty {
				t.Error("Empty after a put")
			}
			if err := o.Remove(ctx, "site=a/date=2026-03-01/part-0.parquet"); err != nil {
				t.Fatal(err)
			}
			if left := incomplete(t, srv, bucket); len(left) != 0 {
				t.Errorf("incomplete uploads left: %v", left)
			}
		})
	}
}

// BenchmarkPut stores a 64 MiB blob on the real server (a process of its
// own, so the allocations counted are the client's): B/op shows what one
// Put holds, about one part, not the blob. Run with the real server's
// variables set (see DEVELOPERS.md):
//
//	go test ./catalog/blob/s3store -run '^$' -bench Put -benchtime 3x
func BenchmarkPut(b *testing.B) {
	srv, ok := s3test.Real(b)
	if !ok {
		b.Skip("needs the real server")
	}
	bucket := srv.NewBucket(b)
	s, err := New(context.Background(), Config{Bucket: bucket, Endpoint: srv.Endpoint,
		Credentials: credentials.NewStaticV4(srv.AccessKey, srv.SecretKey, "")})
	if err != nil {
		b.Fatal(err)
	}
	const size = 64 << 20
	b.SetBytes(size)
	b.ReportAllocs()
	for i := 0; b.Loop(); i++ {
		// A blob of its own each time (the first 8 bytes differ), so no
		// Put finds it stored already.
		seed := make([]byte, 8)
		binary.LittleEndian.PutUint64(seed, uint64(i))
		h := sha256.New()
		h.Write(seed)
		io.CopyN(h, zeros{}, size-8)
		id := blob.ID(h.Sum(nil))
		if err := s.Put(context.Background(), id, io.MultiReader(bytes.NewReader(seed), io.LimitReader(zeros{}, size-8))); err != nil {
			b.Fatal(err)
		}
	}
}

type zeros struct{}

func (zeros) Read(p []byte) (int, error) { clear(p); return len(p), nil }
