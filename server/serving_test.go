package server

import (
	"bufio"
	"bytes"
	"compress/gzip"
	"encoding/json"
	"fmt"
	"io"
	"net/http"
	"testing"
	"time"

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
	// A whole-file GET is answered without http.ServeContent; one with a
	// precondition that does not hold back the file goes through it. Both
	// answers are the same, headers and bytes.
	through := e.do(http.MethodGet, path, member, nil, map[string]string{"If-None-Match": `"another-file"`})
	e.mustStatus(through, http.StatusOK, "download with If-None-Match")
	if !bytes.Equal(through.Body, whole.Body) {
		t.Errorf("download through ServeContent: %d bytes, the plain one %d", len(through.Body), len(whole.Body))
	}
	for _, hs := range []http.Header{whole.Header, through.Header} {
		hs.Del("Date")
		hs.Del("X-Request-Id")
	}
	if fmt.Sprint(whole.Header) != fmt.Sprint(through.Header) {
		t.Errorf("headers of a plain download:\n%v\nthrough ServeContent:\n%v", whole.Header, through.Header)
	}

	// The access log's bytes of the four requests, in order. A request's
	// line is written after its answer is sent, so the last may come a
	// moment after the client has the answer: wait for it, up to 5 s.
	want := []int64{f.Bytes, f.Bytes - 1000, 0, f.Bytes}
	var logged []int64
	for deadline := time.Now().Add(5 * time.Second); ; time.Sleep(10 * time.Millisecond) {
		logged = logged[:0]
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
		if len(logged) >= len(want) || time.Now().After(deadline) {
			break
		}
	}
	if fmt.Sprint(logged) != fmt.Sprint(want) {
		t.Errorf("access log bytes %v, want %v", logged, want)
	}
}

// TestSummaryKept: a client that takes gzip gets the stored summary's
// bytes on the first request (read) and the next (kept); one that does
// not gets them decompressed, the same on the first request (decoded) and
// the next (kept); a new version's summary is not answered with the old
// one's.
func TestSummaryKept(t *testing.T) {
	e := newEnv(t)
	e.createProject("ward")
	e.createDataset("ward", "events", wardProfile)
	member := e.member("ward")
	path := "/api/v1/projects/ward/datasets/events/versions/latest/summary"
	var prev []byte
	for day := 7; day <= 8; day++ {
		e.mustStatus(e.upload("ward", "events", e.admin, "a.csv", wardFile(day, 300)), http.StatusCreated, "upload")
		gz := e.do(http.MethodGet, path, member, nil, map[string]string{"Accept-Encoding": "gzip"})
		e.mustStatus(gz, http.StatusOK, "gzip summary")
		if gz.Header.Get("Content-Encoding") != "gzip" {
			t.Fatalf("day %d: Content-Encoding %q, want the stored gzip", day, gz.Header.Get("Content-Encoding"))
		}
		again := e.do(http.MethodGet, path, member, nil, map[string]string{"Accept-Encoding": "gzip"})
		e.mustStatus(again, http.StatusOK, "gzip summary again")
		if !bytes.Equal(again.Body, gz.Body) || again.Header.Get("ETag") != gz.Header.Get("ETag") {
			t.Errorf("day %d: the kept gzip summary differs from the stored one", day)
		}
		zr, err := gzip.NewReader(bytes.NewReader(gz.Body))
		if err != nil {
			t.Fatal(err)
		}
		want, err := io.ReadAll(zr)
		if err != nil {
			t.Fatal(err)
		}
		for i := range 2 {
			// identity: else Go's client asks for gzip and decompresses it.
			r := e.do(http.MethodGet, path, member, nil, map[string]string{"Accept-Encoding": "identity"})
			e.mustStatus(r, http.StatusOK, "plain summary")
			if cl := r.Header.Get("Content-Length"); cl != fmt.Sprint(len(want)) {
				t.Errorf("day %d, request %d: Content-Length %q, want %d", day, i, cl, len(want))
			}
			if r.Header.Get("Content-Encoding") != "" || !bytes.Equal(r.Body, want) {
				t.Errorf("day %d, request %d: %d bytes (Content-Encoding %q), want the %d decompressed", day, i, len(r.Body), r.Header.Get("Content-Encoding"), len(want))
			}
		}
		if bytes.Equal(want, prev) {
			t.Errorf("day %d: the second version's summary is the first's", day)
		}
		prev = want
	}
}

// TestSummaryCacheBound: the kept plain summaries stay within their byte
// bound, the least recently served going first; one larger than an entry
// may be is not kept.
func TestSummaryCacheBound(t *testing.T) {
	var c summaryCache
	b := make([]byte, summaryCacheEntry)
	n := summaryCacheBytes/summaryCacheEntry + 1 // one past the bound
	for i := range n {
		c.put(fmt.Sprint(i), b)
		if i == 1 {
			c.get("0") // served again: now the most recent
		}
	}
	if c.bytes > summaryCacheBytes || c.bytes != c.lru.Len()*len(b) {
		t.Errorf("%d bytes kept in %d entries, bound %d", c.bytes, c.lru.Len(), summaryCacheBytes)
	}
	if _, ok := c.get("0"); !ok {
		t.Error("the entry served again was dropped before older ones")
	}
	if _, ok := c.get("1"); ok {
		t.Error("the least recently served entry was kept past the bound")
	}
	c.put("big", make([]byte, summaryCacheEntry+1))
	if _, ok := c.get("big"); ok {
		t.Error("an entry over summaryCacheEntry was kept")
	}
}
