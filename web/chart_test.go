package web

import (
	"bytes"
	"math"
	"strings"
	"testing"
	"time"

	"github.com/flowcat-catalog/flowcat/catalog"
	"github.com/flowcat-catalog/flowcat/catalog/summary"
	"github.com/flowcat-catalog/flowcat/quality"
)

func TestPlotTextAlternativeAndEscaping(t *testing.T) {
	p := &Plot{ID: "x", Title: `a <b> & "c"`, Desc: "d<script>", X: Axis{Min: 0, Max: 2}, Y: Axis{Min: 0, Max: 1},
		Bars:  []Bar{{X0: 0, X1: 1, Y: 0.5, Label: "<i>", Data: map[string]string{"value": "0.5"}}},
		Table: Table{Caption: "c", Head: []string{"k", "v"}, Rows: [][]string{{"<k>", "1"}}}}
	svg := string(p.SVG())
	for _, want := range []string{`role="img" aria-labelledby="x-t" aria-describedby="x-d"`, `<title id="x-t">a &lt;b&gt; &amp; &#34;c&#34;</title>`,
		`<desc id="x-d">d&lt;script&gt;</desc>`, `data-value="0.5"`, `<title>&lt;i&gt;</title>`, `<th scope="row">&lt;k&gt;</th>`} {
		if !strings.Contains(svg, want) {
			t.Errorf("SVG lacks %q:\n%s", want, svg)
		}
	}
	if strings.Contains(svg, "<script>") || strings.Contains(svg, "<b>") {
		t.Error("text reached the SVG unescaped")
	}
}

func TestTrendMarksAlerts(t *testing.T) {
	s1, s2, s3 := 90.0, 91.0, 40.0
	at := time.Date(2026, 3, 1, 2, 0, 0, 0, time.UTC)
	pt := func(seq int, score *float64) catalog.TrendPoint {
		return catalog.TrendPoint{TrendPoint: quality.TrendPoint{Seq: seq, Site: "ward-3", Score: score, ReceivedAt: at}, Status: catalog.UploadAccepted}
	}
	p := Trend("ward-3", []catalog.TrendPoint{pt(1, &s1), pt(2, &s2), pt(3, &s3), pt(4, nil)},
		[]catalog.UploadAlert{{Seq: 3, Alert: quality.Alert{Site: "ward-3", Sentence: "The score fell."}}, {Seq: 2, Alert: quality.Alert{Site: "other"}}})
	svg := string(p.SVG())
	if n := strings.Count(svg, `class="mark"`) + strings.Count(svg, `class="mark alert"`); n != 3 {
		t.Errorf("%d markers, want one per scored upload (3)", n)
	}
	if n := strings.Count(svg, `class="mark alert"`); n != 1 || !strings.Contains(svg, `data-seq="3"`) || !strings.Contains(svg, "alert: The score fell.") {
		t.Errorf("alert markers: %d\n%s", n, svg)
	}
	if len(p.Table.Rows) != 4 {
		t.Errorf("table has %d rows, want every upload (4)", len(p.Table.Rows))
	}
}

func TestRenderEveryPage(t *testing.T) {
	for _, name := range Pages {
		var b bytes.Buffer
		var content any
		switch name {
		case "signin":
			content = SignIn{}
		case "error":
			content = ErrorPage{Status: 404, Heading: "h", Message: "m"}
		case "catalog":
			content = Catalog{}
		case "dataset":
			content = DatasetPage{D: &catalog.Dataset{Project: "p", Name: "d"}, Curator: true,
				Audit: []catalog.AuditEntry{{At: time.Date(2026, 3, 1, 0, 0, 0, 0, time.UTC), By: "curator-p", Action: "version.publish", Target: "p/d@1"}},
				Uploads: []catalog.Upload{{ID: "u2", Seq: 2, Status: catalog.UploadDuplicate, Version: 1, RejectedBefore: 1, Report: &quality.Report{
					Rows:       quality.Rows{Total: 1, Rejected: 1, Held: 499},
					Rejections: []quality.RejectionCount{{Reason: "bad_timestamp", Count: 1, Samples: []quality.Sample{{Line: 202}}}}}}}}
		case "version":
			content = VersionPage{D: &catalog.Dataset{Project: "p", Name: "d"}, V: &catalog.Version{Number: 1, State: catalog.StateDraft}, Curator: true,
				Report: &quality.Report{Rows: quality.Rows{Total: 3002, Accepted: 2997, Rejected: 3, Again: 2}}}
		}
		if err := Render(&b, name, &Page{Title: name, Viewer: &Viewer{Subject: "s", Role: "member"}, CSRF: "tok", Content: content}); err != nil {
			t.Fatalf("%s: %v", name, err)
		}
		if name == "dataset" && !strings.Contains(b.String(), "<td>version.publish</td><td>p/d@1</td>") {
			t.Error("the dataset page does not show its audit entries")
		}
		// A re-send's refused rows are counted among the file's rows,
		// held ones included (quality.Rows.InFile).
		if name == "dataset" && !strings.Contains(b.String(), "Rows refused, by reason (1 of 500; 1 refused before, sent again)") {
			t.Error("the dataset page does not count a re-send's refused rows among the file's")
		}
		// A version counts a re-sent refused row once, and says so.
		if name == "version" && !strings.Contains(b.String(), "2,997 accepted and 3 refused rows (2 more refused rows were sent again by a later file and are counted once)") {
			t.Errorf("the version page does not tell the refused rows sent again")
		}
		if !strings.Contains(b.String(), `<html lang="en">`) || !strings.Contains(b.String(), `name="csrf" value="tok"`) {
			t.Errorf("%s: no language or no form token", name)
		}
	}
}

// The service chart draws the observed services as a density per log10
// unit beside the fitted lognormal: bars times their log width sum to the
// share of services in bins from 1 s on.
func TestServiceTimeHistogram(t *testing.T) {
	a := &summary.ActivitySummary{Name: "scan",
		Service:   summary.Durations{N: 10, P50: 300, P90: 900, P95: 1000, P99: 1100},
		Lognormal: &summary.Lognormal{N: 10, MeanLog: 5.8, SDLog: 0.6},
		Histogram: &summary.Histogram{Edges: []float64{0, 1, 2, 5, 10, 20, 50, 100, 200, 500, 1000, 2000}, Counts: []uint64{1, 0, 0, 0, 0, 0, 0, 2, 4, 2, 1}}}
	p := ServiceTime(a)
	if len(p.Bars) != 4 {
		t.Fatalf("%d bars, want 4 (empty bins and the one from 0 are not drawn)", len(p.Bars))
	}
	var share float64
	for _, b := range p.Bars {
		share += b.Y * (math.Log10(b.X1) - math.Log10(b.X0))
	}
	if math.Abs(share-0.9) > 1e-9 || p.Bars[0].Data["value"] != "2" || p.Y.Max < p.Bars[1].Y {
		t.Errorf("bars %+v: share %v, want 0.9; y max %v", p.Bars, share, p.Y.Max)
	}
	w := WaitHistogram(&summary.QueueSummary{Name: "triage", Wait: summary.Wait{Durations: summary.Durations{N: 3}, Histogram: &summary.Histogram{Edges: []float64{0, 1, 2}, Counts: []uint64{1, 2}}}})
	if w == nil || w.ID != "wait-hist-triage" || len(w.Bars) != 2 || w.Bars[1].Data["value"] != "2" || len(w.Table.Rows) != 2 {
		t.Errorf("wait histogram %+v", w)
	}
}
