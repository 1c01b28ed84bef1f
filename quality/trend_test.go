package quality

import (
	"bytes"
	"fmt"
	"math"
	"reflect"
	"strings"
	"testing"
	"time"

	"github.com/flowcat-catalog/flowcat/schema"
)

// night is one nightly upload of two sites: 50+k%3 clean cases per site,
// the queue column dropped when dropQueue.
func night(k int, dropQueue bool) *Report {
	day := time.Date(2024, 6, 1, 0, 0, 0, 0, time.UTC).Add(time.Duration(k) * 24 * time.Hour)
	var evs []schema.Event
	for _, site := range []string{"north", "south"} {
		for i := range 50 + k%3 {
			at := day.Add(time.Duration(i) * 15 * time.Minute)
			id := fmt.Sprintf("%s-%d-%d", site, k, i)
			for j, ty := range []schema.EventType{schema.Arrival, schema.Enqueue, schema.Start, schema.Complete, schema.Departure} {
				e := schema.Event{Site: site, CaseID: id, Type: ty, Activity: "triage", Queue: "q1",
					EventID: fmt.Sprintf("%s#%d", id, j), OccurredAt: at.Add(time.Duration(j) * 3 * time.Minute)}
				if dropQueue && site == "north" {
					e.Queue = ""
				}
				evs = append(evs, e)
			}
		}
	}
	sortEvents(evs)
	return run(Options{UploadedAt: day.Add(30 * time.Hour), MappedFields: []schema.Field{schema.FieldActivity, schema.FieldQueue, schema.FieldEventID}}, evs, nil, nil)
}

func sortEvents(evs []schema.Event) {
	for i := 1; i < len(evs); i++ {
		for j := i; j > 0 && evs[j].OccurredAt.Before(evs[j-1].OccurredAt); j-- {
			evs[j], evs[j-1] = evs[j-1], evs[j]
		}
	}
	for i := range evs {
		evs[i].Line = int64(i + 2)
	}
}

func history(n int) []TrendPoint {
	var h []TrendPoint
	for k := range n {
		h = append(h, TrendPoints(fmt.Sprintf("u%d", k+1), k+1, time.Date(2024, 6, 2+k, 2, 0, 0, 0, time.UTC), night(k, false))...)
	}
	return h
}

func TestDrift(t *testing.T) {
	h := history(16)
	pick := func(pts []TrendPoint, site string) TrendPoint {
		for _, p := range pts {
			if p.Site == site {
				return p
			}
		}
		t.Fatalf("no point for %s", site)
		return TrendPoint{}
	}
	stable := TrendPoints("u17", 17, time.Date(2024, 6, 18, 2, 0, 0, 0, time.UTC), night(16, false))
	for _, site := range []string{"north", "south", AllSites} {
		if a := Drift(h, pick(stable, site), DriftOptions{}); len(a) != 0 {
			t.Errorf("stable night, %s: alerts %+v", site, a)
		}
	}
	dropped := TrendPoints("u17", 17, time.Date(2024, 6, 18, 2, 0, 0, 0, time.UTC), night(16, true))
	type key struct{ code, metric string }
	want := map[string][]key{
		// north lost its queue: the site's completeness (3 mapped fields,
		// one now 0) falls by 33.3 points, its score by 8.3.
		"north": {{AlertScoreDrop, "score"}, {AlertScoreDrop, DimCompleteness}, {AlertFieldDrop, "completeness:queue"}},
		"south": nil,
		// all sites: the queue is filled in half the events (not < 0.5),
		// so no field alert; completeness (required term + 3 fields) falls
		// by 12.5 points, the score by 3.1, just past the floor band of 3.
		AllSites: {{AlertScoreDrop, "score"}, {AlertScoreDrop, DimCompleteness}},
	}
	for site, w := range want {
		var got []key
		for _, a := range Drift(h, pick(dropped, site), DriftOptions{}) {
			got = append(got, key{a.Code, a.Metric})
			// A score's usual range stops at 100, the top of the scale.
			if a.Site != site || a.Sentence == "" || (a.Code == AlertScoreDrop && (a.Value >= a.Low || a.High > 100)) {
				t.Errorf("alert %+v", a)
			}
		}
		if !reflect.DeepEqual(got, w) {
			t.Errorf("%s: alerts %v, want %v", site, got, w)
		}
	}
	// Too little history: nothing.
	if a := Drift(h[:3*4], pick(dropped, "north"), DriftOptions{}); len(a) != 0 {
		t.Errorf("4 points of history gave %v", a)
	}
}

// TestMedianMAD checks the robust statistics on a hand-worked sample:
// median of {1,2,3,4,100} is 3, absolute deviations {2,1,0,1,97}, MAD 1
// (definition of the median absolute deviation; from memory). The scale
// 1.4826 ≈ 1/Φ⁻¹(3/4) makes it estimate σ for normal data (from memory).
func TestMedianMAD(t *testing.T) {
	xs := []float64{4, 1, 100, 3, 2}
	if m := median(xs); m != 3 {
		t.Errorf("median %v", m)
	}
	if d := mad(xs, 3); d != 1 {
		t.Errorf("MAD %v", d)
	}
	if m := median([]float64{1, 2, 3, 10}); m != 2.5 {
		t.Errorf("even median %v", m)
	}
	// Φ⁻¹(0.75) = 0.6744897…: 1/0.6744897 = 1.482602.
	if math.Abs(1/0.6744897501960817-MADScale) > 1e-4 {
		t.Errorf("MADScale %v", MADScale)
	}
}

func TestWriteTrend(t *testing.T) {
	h := history(6)
	cur := TrendPoints("u7", 7, time.Date(2024, 6, 8, 2, 0, 0, 0, time.UTC), night(6, true))
	var alerts []Alert
	for _, p := range cur {
		alerts = append(alerts, Drift(h, p, DriftOptions{})...)
	}
	var plain, color bytes.Buffer
	if err := WriteTrend(&plain, append(h, cur...), alerts, false); err != nil {
		t.Fatal(err)
	}
	if err := WriteTrend(&color, append(h, cur...), alerts, true); err != nil {
		t.Fatal(err)
	}
	s := plain.String()
	if strings.Contains(s, "\x1b") || !strings.Contains(color.String(), "\x1b[") {
		t.Error("colour mismatch")
	}
	for _, want := range []string{"site north", "all sites", "u7", "field_dropped", "complet"} {
		if !strings.Contains(s, want) {
			t.Errorf("trend lacks %q:\n%s", want, s)
		}
	}
}
