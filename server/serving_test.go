package server

import (
	"bufio"
	"bytes"
	"encoding/json"
	"fmt"
	"net/http"
	"testing"

	"github.com/flowcat-catalog/flowcat/server/api"
)

// TestDownloadServedFromFile: a stored file sent through the connection's
// ReadFrom (sendfile where the blob store is a local file) arrives whole
// and byte for byte, and the access log counts what was sent: the whole
// file, a range, nothing for HEAD.
func TestDownloadServedFromFile(t *testing.T) {
	e := newEnv(t)
	e.createProject("ward")
	e.createDataset("ward", "events", wardProfile)
	r := e.upload("ward", "events", e.admin, "a.csv", wardFile(7, 900))
	e.mustStatus(r, http.StatusCreated, "upload")
	var res api.UploadResult
	e.decode(r, &res)
	f := res.Version.Manifest.Files[0]
	if f.Bytes < 4096 {
		t.Fatalf("a file of %d bytes: want one longer than net/http's first 512 bytes and a page", f.Bytes)
	}
	path := fmt.Sprintf("/api/v1/projects/ward/datasets/events/versions/1/files/%s", f.SHA256)
	member := e.member("ward")
	whole := e.get(path, member)
	e.mustStatus(whole, http.StatusOK, "download")
	if int64(len(whole.Body)) != f.Bytes || !bytes.HasPrefix(whole.Body, []byte("PAR1")) || !bytes.HasSuffix(whole.Body, []byte("PAR1")) {
		t.Fatalf("download: %d bytes, want the %d-byte Parquet file", len(whole.Body), f.Bytes)
	}
	part := e.do(http.MethodGet, path, member, nil, map[string]string{"Range": "bytes=1000-"})
	e.mustStatus(part, http.StatusPartialContent, "range")
	if !bytes.Equal(part.Body, whole.Body[1000:]) {
		t.Errorf("range from byte 1000: %d bytes, not the file's tail", len(part.Body))
	}
	e.mustStatus(e.do(http.MethodHead, path, member, nil, nil), http.StatusOK, "head")

	// The access log's bytes of the three requests, in order.
	var logged []int64
	sc := bufio.NewScanner(bytes.NewReader(e.log.Bytes()))
	for sc.Scan() {
		var l struct {
			Msg, Path string
			Bytes     int64
		}
		if json.Unmarshal(sc.Bytes(), &l) == nil && l.Msg == "request" && l.Path == path {
			logged = append(logged, l.Bytes)
		}
	}
	want := []int64{f.Bytes, f.Bytes - 1000, 0}
	if fmt.Sprint(logged) != fmt.Sprint(want) {
		t.Errorf("access log bytes %v, want %v", logged, want)
	}
}
