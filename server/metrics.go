package server

import (
	"context"
	"net/http"
	"runtime/debug"
	"strconv"
	"time"

	"github.com/labstack/echo/v4"
	"github.com/prometheus/client_golang/prometheus"
	"github.com/prometheus/client_golang/prometheus/collectors"
	"github.com/prometheus/client_golang/prometheus/promhttp"

	"github.com/flowcat-catalog/flowcat/catalog"
	"github.com/flowcat-catalog/flowcat/server/api"
)

// promMetrics are the server's Prometheus metrics, in a registry of its own
// (so two servers in one process, as in tests, count apart). Labels hold
// route patterns, statuses, outcomes and reasons, never a project,
// dataset or identifier, so their number stays bounded.
type promMetrics struct {
	reg *prometheus.Registry

	uploads        *prometheus.CounterVec   // by status
	uploadRows     *prometheus.CounterVec   // by outcome: accepted, rejected
	rejections     *prometheus.CounterVec   // rejected rows by reason
	uploadBytes    prometheus.Counter       // bytes of upload bodies read
	uploadDuration *prometheus.HistogramVec // by status
	httpDuration   *prometheus.HistogramVec // by method, route, code
}

func newMetrics() *promMetrics {
	m := &promMetrics{reg: prometheus.NewRegistry()}
	m.uploads = prometheus.NewCounterVec(prometheus.CounterOpts{
		Name: "flowcat_uploads_total",
		Help: "Uploads whose body the server began to read, by their status (accepted, duplicate, rejected, failed).",
	}, []string{"status"})
	m.uploadRows = prometheus.NewCounterVec(prometheus.CounterOpts{
		Name: "flowcat_upload_rows_total",
		Help: "Data rows read from uploads, by outcome (accepted, rejected).",
	}, []string{"outcome"})
	m.rejections = prometheus.NewCounterVec(prometheus.CounterOpts{
		Name: "flowcat_upload_rejected_rows_total",
		Help: "Rows rejected in uploads, by reason code.",
	}, []string{"reason"})
	m.uploadBytes = prometheus.NewCounter(prometheus.CounterOpts{
		Name: "flowcat_upload_bytes_total",
		Help: "Bytes of upload bodies read, as sent (compressed when the file is gzip).",
	})
	m.uploadDuration = prometheus.NewHistogramVec(prometheus.HistogramOpts{
		Name:    "flowcat_upload_duration_seconds",
		Help:    "Time from an upload's first byte read to its answer, by status.",
		Buckets: prometheus.ExponentialBuckets(0.01, 4, 10), // 10 ms to about 44 min
	}, []string{"status"})
	m.httpDuration = prometheus.NewHistogramVec(prometheus.HistogramOpts{
		Name:    "flowcat_http_request_duration_seconds",
		Help:    "HTTP request latency, by method, route pattern and status code.",
		Buckets: prometheus.DefBuckets,
	}, []string{"method", "route", "code"})
	version, goVersion := BuildVersion()
	info := prometheus.NewGauge(prometheus.GaugeOpts{
		Name:        "flowcat_build_info",
		Help:        "Always 1; the labels name the running build.",
		ConstLabels: prometheus.Labels{"version": version, "goversion": goVersion},
	})
	info.Set(1)
	m.reg.MustRegister(m.uploads, m.uploadRows, m.rejections, m.uploadBytes, m.uploadDuration, m.httpDuration, info,
		collectors.NewGoCollector(), collectors.NewProcessCollector(collectors.ProcessCollectorOpts{}))
	return m
}

// observeUpload counts one upload whose body was read (res is nil when the
// upload was refused before it had a record).
func (m *promMetrics) observeUpload(res *catalog.IngestResult, took time.Duration) {
	if res == nil {
		return
	}
	u := &res.Upload
	status := string(u.Status)
	if status == "" {
		status = "failed"
	}
	m.uploads.WithLabelValues(status).Inc()
	m.uploadBytes.Add(float64(u.Bytes))
	m.uploadDuration.WithLabelValues(status).Observe(took.Seconds())
	if r := u.Report; r != nil {
		m.uploadRows.WithLabelValues("accepted").Add(float64(r.Rows.Accepted))
		m.uploadRows.WithLabelValues("rejected").Add(float64(r.Rows.Rejected))
		for _, rc := range r.Rejections {
			m.rejections.WithLabelValues(string(rc.Reason)).Add(float64(rc.Count))
		}
	}
}

// instrument times every request by its route pattern (echo's c.Path(),
// "unmatched" for none), so that no name from a path becomes a label.
func (m *promMetrics) instrument(next echo.HandlerFunc) echo.HandlerFunc {
	return func(c echo.Context) error {
		start := time.Now()
		err := next(c)
		if err != nil {
			c.Error(err)
		}
		route := c.Path()
		if route == "" || route == "/*" {
			route = "unmatched"
		}
		m.httpDuration.WithLabelValues(c.Request().Method, route, strconv.Itoa(c.Response().Status)).Observe(time.Since(start).Seconds())
		return nil
	}
}

// serveMetrics answers GET /metrics in the Prometheus text format.
func (s *Server) serveMetrics(c echo.Context) error {
	promhttp.HandlerFor(s.metrics.reg, promhttp.HandlerOpts{}).ServeHTTP(c.Response(), c.Request())
	return nil
}

// healthz answers 200 while the process serves HTTP: liveness.
func (s *Server) healthz(c echo.Context) error {
	return c.JSON(http.StatusOK, api.Status{Status: "ok"})
}

// readyz answers 200 when the catalog's metadata and blob store answer
// within 5 s, else 503 naming the part that failed: readiness.
func (s *Server) readyz(c echo.Context) error {
	ctx, cancel := context.WithTimeout(c.Request().Context(), 5*time.Second)
	defer cancel()
	if err := s.cfg.Store.Ready(ctx); err != nil {
		s.cfg.Logger.Warn("not ready", "err", err)
		return fail(http.StatusServiceUnavailable, "not_ready", "%s", err.Error())
	}
	return c.JSON(http.StatusOK, api.Status{Status: "ready"})
}

// buildVersion, when set at link time (-ldflags "-X
// github.com/flowcat-catalog/flowcat/server.buildVersion=V", as the
// Dockerfile does), names the build where the toolchain records none.
var buildVersion string

// BuildVersion returns the main module's version as the Go toolchain
// recorded it at build time (a tag, a pseudo-version, or "(devel)" with
// the VCS revision when known; buildVersion in place of "(devel)" when
// set) and the Go version that built it.
func BuildVersion() (version, goVersion string) {
	bi, ok := debug.ReadBuildInfo()
	if !ok {
		return "unknown", "unknown"
	}
	version = bi.Main.Version
	if (version == "" || version == "(devel)") && buildVersion != "" {
		return buildVersion, bi.GoVersion
	}
	if version == "" {
		version = "(devel)"
	}
	var rev, modified string
	for _, kv := range bi.Settings {
		switch kv.Key {
		case "vcs.revision":
			rev = kv.Value
		case "vcs.modified":
			modified = kv.Value
		}
	}
	if rev != "" && version == "(devel)" {
		if len(rev) > 12 {
			rev = rev[:12]
		}
		version += " " + rev
		if modified == "true" {
			version += "+dirty"
		}
	}
	return version, bi.GoVersion
}
