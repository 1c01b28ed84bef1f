package catalog

import (
	"context"
	"slices"
	"strings"
	"testing"

	"github.com/flowcat-catalog/flowcat/quality"
)

// TestDriftAlertsAtIngest: eight similar nights, then a night whose export
// lost its queue column. Only that night raises alerts, among them the
// dropped field at its site, and Trend lists every night per site.
func TestDriftAlertsAtIngest(t *testing.T) {
	e := newEnv(t, nil)
	e.dataset(t, "lab", "flow", nil)
	const nights = 8
	for i := range nights {
		res := e.ingest(t, "lab", "flow", genCSV(genOpt{Seed: uint64(100 + i), N: 900, CasePfx: string(rune('a' + i))}), "n.csv")
		if len(res.Upload.Alerts) != 0 {
			t.Fatalf("night %d: alerts %+v on a stable history", i+1, res.Upload.Alerts)
		}
	}
	res := e.ingest(t, "lab", "flow", genCSV(genOpt{Seed: 200, N: 900, CasePfx: "z", DropCols: []int{6}}), "lost-queue.csv")
	var fieldDrops []string
	for _, a := range res.Upload.Alerts {
		if a.Code == quality.AlertFieldDrop {
			if a.Metric != "completeness:queue" {
				t.Errorf("field alert on %s, want completeness:queue", a.Metric)
			}
			fieldDrops = append(fieldDrops, a.Site)
		}
		if a.Sentence == "" {
			t.Errorf("alert %+v has no sentence", a)
		}
	}
	slices.Sort(fieldDrops)
	if !slices.Equal(fieldDrops, []string{"*", "east", "north", "south"}) {
		t.Fatalf("field-drop alerts at %v, want every site and all sites; alerts %+v", fieldDrops, res.Upload.Alerts)
	}
	points, alerts, err := e.s.Trend(context.Background(), "lab", "flow", "north")
	if err != nil {
		t.Fatal(err)
	}
	if len(points) != nights+1 || points[0].Seq != 1 || points[nights].Seq != nights+1 || points[0].Site != "north" {
		t.Fatalf("trend at north: %d points %+v", len(points), points[0])
	}
	if len(alerts) == 0 || alerts[0].Upload != res.Upload.ID || !strings.Contains(alerts[0].ReceivedAt, "T") {
		t.Fatalf("trend alerts at north: %+v", alerts)
	}
}
