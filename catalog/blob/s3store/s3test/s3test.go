// Package s3test gives tests S3-compatible servers to run against: an
// in-process one (gofakes3, served over real HTTP on loopback) always, and
// a real server when the environment names one (FLOWCAT_TEST_S3_ENDPOINT,
// FLOWCAT_TEST_S3_ACCESS_KEY, FLOWCAT_TEST_S3_SECRET_KEY; .ci/run starts
// one and sets them). In CI (CI set) the real server is required.
package s3test

import (
	"context"
	"crypto/rand"
	"encoding/hex"
	"net/http/httptest"
	"os"
	"testing"

	"github.com/johannesboyne/gofakes3"
	"github.com/johannesboyne/gofakes3/backend/s3mem"
	"github.com/minio/minio-go/v7"
	"github.com/minio/minio-go/v7/pkg/credentials"
)

// The environment naming a real server.
const (
	EnvEndpoint  = "FLOWCAT_TEST_S3_ENDPOINT" // http://127.0.0.1:PORT
	EnvAccessKey = "FLOWCAT_TEST_S3_ACCESS_KEY"
	EnvSecretKey = "FLOWCAT_TEST_S3_SECRET_KEY"
)

// Server is an S3-compatible server a test may use.
type Server struct {
	Name      string // "gofakes3" or "real"
	Endpoint  string // http://HOST:PORT
	AccessKey string
	SecretKey string
}

// Servers returns the in-process server (started now, stopped when the
// test ends) and, when the environment names one, the real server. In CI
// a missing real server fails the test.
func Servers(t testing.TB) []Server {
	t.Helper()
	out := []Server{Fake(t)}
	if r, ok := Real(t); ok {
		out = append(out, r)
	}
	return out
}

// Fake starts gofakes3 with an in-memory backend on a loopback port.
func Fake(t testing.TB) Server {
	t.Helper()
	faker := gofakes3.New(s3mem.New())
	ts := httptest.NewServer(faker.Server())
	t.Cleanup(ts.Close)
	return Server{Name: "gofakes3", Endpoint: ts.URL, AccessKey: "test-access", SecretKey: "test-secret-key"}
}

// Real returns the real server the environment names. Without one it
// reports false, or fails the test in CI.
func Real(t testing.TB) (Server, bool) {
	t.Helper()
	ep := os.Getenv(EnvEndpoint)
	if ep == "" {
		if os.Getenv("CI") != "" {
			t.Fatalf("no real S3-compatible server: .ci/run starts one and sets %s, %s and %s", EnvEndpoint, EnvAccessKey, EnvSecretKey)
		}
		t.Logf("real S3-compatible server not used: set %s, %s and %s (see DEVELOPERS.md)", EnvEndpoint, EnvAccessKey, EnvSecretKey)
		return Server{}, false
	}
	return Server{Name: "real", Endpoint: ep, AccessKey: os.Getenv(EnvAccessKey), SecretKey: os.Getenv(EnvSecretKey)}, true
}

// Client returns a client of srv.
func (srv Server) Client(t testing.TB) *minio.Client {
	t.Helper()
	u := srv.Endpoint
	secure := false
	switch {
	case len(u) > 7 && u[:7] == "http://":
		u = u[7:]
	case len(u) > 8 && u[:8] == "https://":
		u, secure = u[8:], true
	}
	cl, err := minio.New(u, &minio.Options{
		Creds:        credentials.NewStaticV4(srv.AccessKey, srv.SecretKey, ""),
		Secure:       secure,
		Region:       "us-east-1",
		BucketLookup: minio.BucketLookupPath,
	})
	if err != nil {
		t.Fatal(err)
	}
	return cl
}

// NewBucket creates a bucket of a fresh random name on srv and removes
// it, with whatever it holds, when the test ends.
func (srv Server) NewBucket(t testing.TB) string {
	t.Helper()
	var rnd [6]byte
	rand.Read(rnd[:])
	name := "flowcat-test-" + hex.EncodeToString(rnd[:])
	cl := srv.Client(t)
	ctx := context.Background()
	if err := cl.MakeBucket(ctx, name, minio.MakeBucketOptions{}); err != nil {
		t.Fatalf("%s: make bucket: %v", srv.Name, err)
	}
	t.Cleanup(func() {
		for u := range cl.ListIncompleteUploads(ctx, name, "", true) {
			if u.Err == nil {
				cl.RemoveIncompleteUpload(ctx, name, u.Key)
			}
		}
		for o := range cl.ListObjects(ctx, name, minio.ListObjectsOptions{Recursive: true}) {
			if o.Err == nil {
				cl.RemoveObject(ctx, name, o.Key, minio.RemoveObjectOptions{})
			}
		}
		cl.RemoveBucket(ctx, name)
	})
	return name
}

// Env returns the environment that points flowcat's blob store at srv
// (the variables s3store.FromEnv reads), for a test to pass to a
// command.
func (srv Server) Env() map[string]string {
	return map[string]string{
		"AWS_ENDPOINT_URL_S3":   srv.Endpoint,
		"AWS_ACCESS_KEY_ID":     srv.AccessKey,
		"AWS_SECRET_ACCESS_KEY": srv.SecretKey,
		"AWS_REGION":            "us-east-1",
	}
}
