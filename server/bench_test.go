package server

import (
	"context"
	"crypto/rand"
	"encoding/json"
	"io"
	"log/slog"
	"net/http"
	"net/http/httptest"
	"os"
	"path/filepath"
	"strconv"
	"testing"
	"time"

	"github.com/flowcat-catalog/flowcat/anonymize"
	"github.com/flowcat-catalog/flowcat/catalog"
	"github.com/flowcat-catalog/flowcat/catalog/blob/localfs"
	"github.com/flowcat-catalog/flowcat/schema/synth"
)

// benchServer ingests n events of synth.NewStream into one version and
// returns a server (called in-process, so times are server time only), a
// member token and the version.
func benchServer(b *testing.B, n int64) (*Server, string, *catalog.Version) {
	b.Helper()
	dir := b.TempDir()
	blobs, err := localfs.New(filepath.Join(dir, "blobs"))
	if err != nil {
		b.Fatal(err)
	}
	master, err := anonymize.GenerateMasterKey()
	if err != nil {
		b.Fatal(err)
	}
	quiet := slog.New(slog.NewTextHandler(io.Discard, nil))
	// A temp folder of its own: the catalog clears its temp folder when it
	// opens, and dir holds the blob store.
	tmp := filepath.Join(dir, "tmp")
	if err := os.MkdirAll(tmp, 0o700); err != nil {
		b.Fatal(err)
	}
	store, err := catalog.Open(filepath.Join(dir, "catalog.db"), blobs, catalog.Options{Master: master, TempDir: tmp, Logger: quiet})
	if err != nil {
		b.Fatal(err)
	}
	b.Cleanup(func() { store.Close() })
	ctx := context.Background()
	if _, err := store.CreateProject(ctx, "bench", "", "bench"); err != nil {
		b.Fatal(err)
	}
	if _, err := store.CreateDataset(ctx, catalog.DatasetSpec{Project: "bench", Name: "stream"}, "bench"); err != nil {
		b.Fatal(err)
	}
	res, err := store.Ingest(ctx, "bench", "stream", synth.NewStream(1, n), catalog.IngestOptions{Filename: "stream.csv"})
	if err != nil {
		b.Fatal(err)
	}
	key := make([]byte, 32)
	rand.Read(key)
	auth := NewAuthority(key, testIssuer)
	tok, err := auth.Issue(Grant{Role: RoleMember, Subject: "bench", Project: "bench", TTL: time.Hour})
	if err != nil {
		b.Fatal(err)
	}
	// No rate limit: a benchmark sends thousands of requests a second.
	return New(Config{Store: store, Authority: auth, Logger: quiet, RateLimit: -1}), tok, res.Version
}

func serve(b *testing.B, s *Server, tok, path string, hdr ...string) *httptest.ResponseRecorder {
	req := httptest.NewRequest(http.MethodGet, path, nil)
	req.Header.Set("Authorization", "Bearer "+tok)
	for i := 0; i+1 < len(hdr); i += 2 {
		req.Header.Set(hdr[i], hdr[i+1])
	}
	w := httptest.NewRecorder()
	s.ServeHTTP(w, req)
	if w.Code != http.StatusOK {
		b.Fatalf("%s: %d %s", path, w.Code, w.Body.String())
	}
	return w
}

// BenchmarkStoredSummary: the summary stored with a version of 200k events,
// served through the whole handler chain (token check included) to a
// client that takes gzip, as browsers and Go's HTTP client do.
func BenchmarkStoredSummary(b *testing.B) {
	s, tok, _ := benchServer(b, 200_000)
	path := "/api/v1/projects/bench/datasets/stream/versions/1/summary"
	var size int
	for b.Loop() {
		w := serve(b, s, tok, path, "Accept-Encoding", "gzip")
		if w.Header().Get("Content-Encoding") != "gzip" {
			b.Fatal("not sent as stored")
		}
		size = w.Body.Len()
	}
	b.ReportMetric(float64(size), "body-bytes")
}

// BenchmarkFilteredSummary: a summary of one site over one day, computed
// from the version's Parquet files, which are skipped by their statistics.
// FLOWCAT_BENCH_EVENTS sets the version's size (default 1M).
func BenchmarkFilteredSummary(b *testing.B) {
	n := int64(1_000_000)
	if v := os.Getenv("FLOWCAT_BENCH_EVENTS"); v != "" {
		var err error
		if n, err = strconv.ParseInt(v, 10, 64); err != nil {
			b.Fatal(err)
		}
	}
	s, tok, v := benchServer(b, n)
	var sum struct {
		Sites []struct {
			Name string `json:"name"`
		} `json:"sites"`
	}
	if err := json.Unmarshal(serve(b, s, tok, "/api/v1/projects/bench/datasets/stream/versions/1/summary").Body.Bytes(), &sum); err != nil || len(sum.Sites) == 0 {
		b.Fatalf("summary: %v", err)
	}
	from := v.Manifest.Files[0].MinTime.Truncate(24 * time.Hour).Add(48 * time.Hour)
	path := "/api/v1/projects/bench/datasets/stream/versions/1/summary?site=" + sum.Sites[0].Name +
		"&from=" + from.Format(time.RFC3339) + "&to=" + from.Add(24*time.Hour).Format(time.RFC3339)
	var w *httptest.ResponseRecorder
	for b.Loop() {
		w = serve(b, s, tok, path)
	}
	for _, h := range []string{"Read", "Skipped"} {
		x, _ := strconv.ParseFloat(w.Header().Get("X-Flowcat-Row-Groups-"+h), 64)
		b.ReportMetric(x, "row-groups-"+h)
	}
	bytesRead, _ := strconv.ParseFloat(w.Header().Get("X-Flowcat-Bytes-Read"), 64)
	b.ReportMetric(bytesRead, "bytes-read")
	b.ReportMetric(float64(v.Manifest.Files[0].Bytes), "file-bytes")
}
