package web

import (
	"bytes"
	"strings"
	"testing"
	"time"

	"github.com/flowcat-catalog/flowcat/catalog"
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
				Audit: []catalog.AuditEntry{{At: time.Date(2026, 3, 1, 0, 0, 0, 0, time.UTC), By: "curator-p", Action: "version.publish", Target: "p/d@1"}}}
		case "version":
			content = VersionPage{D: &catalog.Dataset{Project: "p", Name: "d"}, V: &catalog.Version{Number: 1, State: catalog.StateDraft}, Curator: true}
		}
		if err := Render(&b, name, &Page{Title: name, Viewer: &Viewer{Subject: "s", Role: "member"}, CSRF: "tok", Content: content}); err != nil {
			t.Fatalf("%s: %v", name, err)
		}
		if name == "dataset" && !strings.Contains(b.String(), "<td>version.publish</td><td>p/d@1</td>") {
			t.Error("the dataset page does not show its audit entries")
		}
		if !strings.Contains(b.String(), `<html lang="en">`) || !strings.Contains(b.String(), `name="csrf" value="tok"`) {
			t.Errorf("%s: no language or no form token", name)
		}
	}
}
