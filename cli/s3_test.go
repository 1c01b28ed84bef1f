package cli_test

import (
	"bytes"
	"context"
	"crypto/sha256"
	"encoding/json"
	"io"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/minio/minio-go/v7"

	"github.com/flowcat-catalog/flowcat/catalog"
	"github.com/flowcat-catalog/flowcat/catalog/blob"
	"github.com/flowcat-catalog/flowcat/catalog/blob/s3store/s3test"
)

// TestS3EndToEnd runs a data directory whose snapshot files live in an
// S3-compatible store (gofakes3 over HTTP on loopback, and the real server
// .ci/run starts) through the real command line: init --blobs, serve,
// uploads, a pull verified byte for byte, and a sweep that deletes a stray
// object and aborts an abandoned multipart upload while every referenced
// object stays.
func TestS3EndToEnd(t *testing.T) {
	for _, srv := range s3test.Servers(t) {
		t.Run(srv.Name, func(t *testing.T) { s3EndToEnd(t, srv) })
	}
}

func s3EndToEnd(t *testing.T, srv s3test.Server) {
	bucket := srv.NewBucket(t)
	store := "s3://" + bucket + "/lab/flowcat"
	for k, v := range srv.Env() {
		t.Setenv(k, v)
	}
	t.Setenv("FLOWCAT_MASTER_KEY", "")
	t.Setenv("FLOWCAT_MASTER_KEY_FILE", "")
	dir := t.TempDir()
	data := filepath.Join(dir, "data")

	// A wrong bucket fails init, leaving no directory.
	if code, _, errs := run(t, nil, "init", "--data", data, "--blobs", "s3://no-such-bucket-9/x"); code == 0 || !strings.Contains(errs, "no such bucket") {
		t.Fatalf("init with a missing bucket: exit %d, %q", code, errs)
	}
	if _, err := os.Stat(data); err == nil {
		t.Fatal("a failed init left the data directory")
	}
	if code, _, errs := run(t, nil, "init", "--data", data, "--blobs", "local/dir"); code != 2 || !strings.Contains(errs, "want s3://BUCKET/PREFIX") {
		t.Fatalf("init --blobs local/dir: exit %d, %q", code, errs)
	}
	if code, _, errs := run(t, nil, "init", "--data", data, "--blobs", store); code != 0 {
		t.Fatalf("init: exit %d: %s", code, errs)
	}
	inst, _ := os.ReadFile(filepath.Join(data, "instance.json"))
	if !bytes.Contains(inst, []byte(`"blobs": "`+store+`"`)) {
		t.Fatalf("instance.json does not record the store:\n%s", inst)
	}
	// The store of a data directory does not change.
	if code, _, errs := run(t, nil, "serve", "--data", data, "--blobs", "s3://"+bucket+"/other", "--addr", "127.0.0.1:0"); code != 2 || !strings.Contains(errs, "does not change") {
		t.Fatalf("serve with another store: exit %d, %q", code, errs)
	}

	_, serveErr, stop := background(t, "serve", "--data", data, "--addr", "127.0.0.1:0")
	url := waitFor(t, "the server's URL in its log", func() string {
		if m := urlRE.FindStringSubmatch(serveErr.String()); m != nil {
			return m[1]
		}
		return ""
	})
	if !strings.Contains(serveErr.String(), `"blobs":"`+store+`"`) {
		t.Errorf("the server's log does not name its store: %s", serveErr.String())
	}
	issue := func(args ...string) string {
		code, out, errs := run(t, nil, append([]string{"token", "issue", "--data", data}, args...)...)
		if code != 0 {
			t.Fatalf("token issue %v: exit %d: %s", args, code, errs)
		}
		return strings.TrimSpace(out)
	}
	admin := issue("--role", "admin", "--subject", "ops")
	partner := issue("--role", "partner", "--subject", "north-site", "--dataset", "flow/visits")
	member := issue("--role", "member", "--subject", "student", "--project", "flow")
	as := func(tok string) map[string]string {
		return map[string]string{"FLOWCAT_SERVER": url, "FLOWCAT_TOKEN": tok}
	}
	if code, _, errs := run(t, as(admin), "project", "create", "flow"); code != 0 {
		t.Fatalf("project create: %d %s", code, errs)
	}
	if code, _, errs := run(t, as(admin), "dataset", "create", "flow/visits"); code != 0 {
		t.Fatalf("dataset create: %d %s", code, errs)
	}
	files := t.TempDir()
	for day := 1; day <= 2; day++ {
		f := writeFile(t, files, "night.csv", night(day, "RAWCASE"))
		if code, out, errs := run(t, as(partner), "upload", "flow/visits", f); code != 0 {
			t.Fatalf("upload %d: exit %d, %q %q", day, code, out, errs)
		}
	}

	snap := filepath.Join(t.TempDir(), "snap")
	if code, out, errs := run(t, as(member), "pull", "flow/visits", "-o", snap); code != 0 || !strings.Contains(out, "verified") {
		t.Fatalf("pull: exit %d, %q %q", code, out, errs)
	}
	if code, out, _ := run(t, nil, "verify", snap); code != 0 {
		t.Fatalf("verify: exit %d, %q", code, out)
	}
	var m catalog.Manifest
	mb, _ := os.ReadFile(filepath.Join(snap, "manifest.json"))
	if err := json.Unmarshal(mb, &m); err != nil {
		t.Fatal(err)
	}

	// Every referenced file is an object under the prefix; the data
	// directory's own blobs/ folder holds none.
	ctx := context.Background()
	cl := srv.Client(t)
	objects := map[string]bool{}
	for o := range cl.ListObjects(ctx, bucket, minio.ListObjectsOptions{Prefix: "lab/flowcat/", Recursive: true}) {
		if o.Err != nil {
			t.Fatal(o.Err)
		}
		objects[o.Key] = true
		obj, err := cl.GetObject(ctx, bucket, o.Key, minio.GetObjectOptions{})
		if err != nil {
			t.Fatal(err)
		}
		b, _ := io.ReadAll(obj)
		obj.Close()
		if bytes.Contains(b, []byte("RAWCASE")) {
			t.Errorf("object %s holds a raw identifier", o.Key)
		}
	}
	key := func(id blob.ID) string { h := id.String(); return "lab/flowcat/sha256/" + h[:2] + "/" + h }
	for _, f := range m.Blobs() {
		if !objects[key(f.SHA256)] {
			t.Errorf("%s (%s) is not in the store", f.Path, key(f.SHA256))
		}
	}
	if local, _ := filepath.Glob(filepath.Join(data, "blobs", "sha256", "*", "*")); len(local) != 0 {
		t.Errorf("local blobs/ holds %v", local)
	}

	// What a crash leaves: an object no version lists, and a multipart
	// upload begun and never completed.
	stray := []byte("a file whose version was never committed")
	strayID := blob.ID(sha256.Sum256(stray))
	if _, err := cl.PutObject(ctx, bucket, key(strayID), bytes.NewReader(stray), int64(len(stray)), minio.PutObjectOptions{DisableContentSha256: true}); err != nil {
		t.Fatal(err)
	}
	core := minio.Core{Client: cl}
	if _, err := core.NewMultipartUpload(ctx, bucket, key(blob.ID{1}), minio.PutObjectOptions{}); err != nil {
		t.Fatal(err)
	}
	code, out, errs := run(t, as(admin), "sweep", "--grace", "0", "--json")
	var res catalog.GCResult
	if code != 0 || json.Unmarshal([]byte(out), &res) != nil {
		t.Fatalf("sweep: exit %d, %q %q", code, out, errs)
	}
	// Version 1's case table is referenced too, beside version 2's files.
	if len(res.Deleted) != 1 || res.Deleted[0] != strayID || res.Referenced != res.Blobs-1 || res.Referenced < len(m.Blobs()) || res.Temporaries != 1 {
		t.Errorf("sweep: %+v; want the stray object deleted, every other kept, 1 incomplete upload aborted", res)
	}
	if _, err := cl.StatObject(ctx, bucket, key(strayID), minio.StatObjectOptions{}); err == nil {
		t.Error("the stray object is still there")
	}
	for u := range cl.ListIncompleteUploads(ctx, bucket, "", true) {
		t.Errorf("incomplete upload left: %s %v", u.Key, u.Err)
	}
	// The version is whole after the sweep: a fresh pull verifies.
	snap2 := filepath.Join(t.TempDir(), "snap2")
	if code, _, errs := run(t, as(member), "pull", "flow/visits", "-o", snap2); code != 0 {
		t.Fatalf("pull after the sweep: exit %d, %q", code, errs)
	}
	if code := stop(); code != 0 {
		t.Errorf("serve exited %d: %s", code, serveErr.String())
	}
	if strings.Contains(serveErr.String(), "RAWCASE") {
		t.Error("the server log holds a raw identifier")
	}
}
