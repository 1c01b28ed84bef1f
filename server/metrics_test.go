package server

import (
	"bytes"
	"net/http"
	"os"
	"path/filepath"
	"strings"
	"testing"

	dto "github.com/prometheus/client_model/go"
	"github.com/prometheus/common/expfmt"
	"github.com/prometheus/common/model"
)

// scrape reads /metrics with the Prometheus text-format parser.
func (e *testEnv) scrape() map[string]*dto.MetricFamily {
	e.t.Helper()
	r := e.get("/metrics", "")
	e.mustStatus(r, http.StatusOK, "metrics")
	if ct := r.Header.Get("Content-Type"); !strings.HasPrefix(ct, "text/plain") {
		e.t.Errorf("metrics Content-Type %q", ct)
	}
	p := expfmt.NewTextParser(model.UTF8Validation)
	fams, err := p.TextToMetricFamilies(bytes.NewReader(r.Body))
	if err != nil {
		e.t.Fatalf("the Prometheus text parser refuses /metrics: %v", err)
	}
	return fams
}

// value sums the counter (or histogram count) samples of family name
// whose labels include want.
func value(fams map[string]*dto.MetricFamily, name string, want map[string]string) float64 {
	f := fams[name]
	if f == nil {
		return 0
	}
	var sum float64
next:
	for _, m := range f.GetMetric() {
		have := map[string]string{}
		for _, l := range m.GetLabel() {
			have[l.GetName()] = l.GetValue()
		}
		for k, v := range want {
			if have[k] != v {
				continue next
			}
		}
		switch {
		case m.Counter != nil:
			sum += m.GetCounter().GetValue()
		case m.Histogram != nil:
			sum += float64(m.GetHistogram().GetSampleCount())
		case m.Gauge != nil:
			sum += m.GetGauge().GetValue()
		}
	}
	return sum
}

// TestMetricsMove: /metrics parses as Prometheus text and its counters
// move as uploads are accepted, rejected and refused.
func TestMetricsMove(t *testing.T) {
	e := newEnv(t)
	e.createProject("clinic")
	e.createDataset("clinic", "visits", "")
	before := e.scrape()
	if value(before, "flowcat_build_info", nil) != 1 {
		t.Error("flowcat_build_info is not 1")
	}
	if value(before, "flowcat_uploads_total", nil) != 0 {
		t.Error("uploads counted before any")
	}

	good := "site,case_id,event_type,occurred_at\nnorth,c1,arrival,2026-03-02T08:00:00Z\nnorth,c1,departure,2026-03-02T09:00:00Z\n"
	tok := e.partner("clinic/visits")
	e.mustStatus(e.upload("clinic", "visits", tok, "a.csv", []byte(good)), http.StatusCreated, "upload")
	bad := "site,case_id,event_type,occurred_at\nnorth,c1,arrival,nope\nnorth,c1,bogus,2026-03-02T08:00:00Z\n"
	if r := e.upload("clinic", "visits", tok, "b.csv", []byte(bad)); r.Status != http.StatusUnprocessableEntity {
		t.Fatalf("bad upload: %d", r.Status)
	}
	if r := e.upload("clinic", "visits", tok, "c.csv", []byte("")); r.Status != http.StatusBadRequest {
		t.Fatalf("empty upload: %d", r.Status)
	}
	e.get("/api/v1/projects/clinic/datasets/visits", e.member("clinic"))
	e.get("/no/such/path", "")

	after := e.scrape()
	checks := []struct {
		name   string
		labels map[string]string
		want   float64
	}{
		{"flowcat_uploads_total", map[string]string{"status": "accepted"}, 1},
		{"flowcat_uploads_total", map[string]string{"status": "rejected"}, 1},
		{"flowcat_uploads_total", map[string]string{"status": "failed"}, 1},
		{"flowcat_upload_rows_total", map[string]string{"outcome": "accepted"}, 2},
		{"flowcat_upload_rows_total", map[string]string{"outcome": "rejected"}, 2},
		{"flowcat_upload_rejected_rows_total", map[string]string{"reason": "bad_timestamp"}, 1},
		{"flowcat_upload_rejected_rows_total", map[string]string{"reason": "unknown_code"}, 1},
		{"flowcat_upload_bytes_total", nil, float64(len(good) + len(bad))},
		{"flowcat_upload_duration_seconds", nil, 3},
		{"flowcat_http_request_duration_seconds", map[string]string{"route": "/api/v1/projects/:project/datasets/:dataset/uploads", "method": "POST", "code": "201"}, 1},
		{"flowcat_http_request_duration_seconds", map[string]string{"route": "/api/v1/projects/:project/datasets/:dataset/uploads", "code": "422"}, 1},
		{"flowcat_http_request_duration_seconds", map[string]string{"route": "/api/v1/projects/:project/datasets/:dataset", "code": "200"}, 1},
		{"flowcat_http_request_duration_seconds", map[string]string{"route": "unmatched", "code": "404"}, 1},
		{"flowcat_http_request_duration_seconds", map[string]string{"route": "/metrics", "code": "200"}, 1},
	}
	for _, c := range checks {
		if got := value(after, c.name, c.labels) - value(before, c.name, c.labels); got != c.want {
			t.Errorf("%s%v moved by %v, want %v", c.name, c.labels, got, c.want)
		}
	}
	if after["go_goroutines"] == nil || after["process_resident_memory_bytes"] == nil && after["process_cpu_seconds_total"] == nil {
		t.Error("Go and process collectors missing")
	}
	// No label carries a project or dataset name.
	r := e.get("/metrics", "")
	if bytes.Contains(r.Body, []byte("clinic")) || bytes.Contains(r.Body, []byte("visits")) {
		t.Error("/metrics names a project or dataset")
	}
}

// TestHealthAndReady: /healthz answers while the process runs; /readyz
// answers 503 naming the blob store when its folder is gone.
func TestHealthAndReady(t *testing.T) {
	e := newEnv(t)
	e.mustStatus(e.get("/healthz", ""), http.StatusOK, "healthz")
	e.mustStatus(e.get("/readyz", ""), http.StatusOK, "readyz")
	if err := os.RemoveAll(filepath.Join(e.dir, "blobs")); err != nil {
		t.Fatal(err)
	}
	r := e.get("/readyz", "")
	if r.Status != http.StatusServiceUnavailable {
		t.Fatalf("readyz without the blob folder: %d", r.Status)
	}
	if b := e.apiErr(r); b.Error.Code != "not_ready" || !strings.Contains(b.Error.Message, "blob store") {
		t.Errorf("readyz error %+v", b.Error)
	}
	e.mustStatus(e.get("/healthz", ""), http.StatusOK, "healthz stays up")
}
