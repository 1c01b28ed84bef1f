package summary

import (
	"cmp"
	"compress/gzip"
	"encoding/csv"
	"io"
	"math"
	"os"
	"slices"
	"strings"
	"testing"
	"time"

	"github.com/flowcat-catalog/flowcat/schema"
)

// TestSepsisProcess checks the directly-follows pairs and the trace
// variants of the public sepsis log (testdata/sepsis) against a reading
// with encoding/csv and the standard library alone. Within a case, events
// are in time order, events of one instant in the order of the file (one
// event type here; cases.Less, with each event's Row its place in the
// file, as a snapshot keeps it). So the variants are the log's own: its
// Variant column names 846 distinct traces, also asserted.
func TestSepsisProcess(t *testing.T) {
	const dir = "../../testdata/sepsis/"
	ams, err := time.LoadLocation("Europe/Amsterdam")
	if err != nil {
		t.Fatal(err)
	}
	f, err := os.Open(dir + "sepsis-cases.csv.gz")
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	zr, err := gzip.NewReader(f)
	if err != nil {
		t.Fatal(err)
	}
	cr := csv.NewReader(zr)
	cr.Comma = ';'
	head, err := cr.Read()
	if err != nil {
		t.Fatal(err)
	}
	ci, ai, ti, vi := slices.Index(head, "Case ID"), slices.Index(head, "Activity"), slices.Index(head, "Complete Timestamp"), slices.Index(head, "Variant")
	type row struct {
		at  time.Time
		act string
	}
	byCase := map[string][]row{}
	logVariants := map[string]bool{}
	for {
		rec, err := cr.Read()
		if err == io.EOF {
			break
		}
		if err != nil {
			t.Fatal(err)
		}
		at, err := time.ParseInLocation("2006/01/02 15:04:05.000", rec[ti], ams)
		if err != nil {
			t.Fatal(err)
		}
		byCase[rec[ci]] = append(byCase[rec[ci]], row{at, strings.TrimSpace(rec[ai])})
		logVariants[rec[vi]] = true
	}
	type pair struct{ from, to string }
	follows := map[pair][]float64{}
	variants := map[string]uint64{}
	for _, rows := range byCase {
		slices.SortStableFunc(rows, func(x, y row) int { return x.at.Compare(y.at) })
		var seq []string
		for i, r := range rows {
			seq = append(seq, r.act)
			if i > 0 {
				p := pair{rows[i-1].act, r.act}
				follows[p] = append(follows[p], r.at.Sub(rows[i-1].at).Seconds())
			}
		}
		variants[strings.Join(seq, "\x00")]++
	}

	// Through the schema reader and the per-case computation.
	pb, err := os.ReadFile(dir + "profile.yaml")
	if err != nil {
		t.Fatal(err)
	}
	prof, err := schema.ParseProfile(pb)
	if err != nil {
		t.Fatal(err)
	}
	g, err := os.Open(dir + "sepsis-cases.csv.gz")
	if err != nil {
		t.Fatal(err)
	}
	defer g.Close()
	rd, err := schema.NewReader(g, prof, schema.ReaderOptions{})
	if err != nil {
		t.Fatal(err)
	}
	var evs []schema.Event
	for {
		var e schema.Event
		rej, err := rd.Next(&e)
		if err == io.EOF {
			break
		}
		if err != nil || rej != nil {
			t.Fatal(err, rej)
		}
		e.Row = int64(len(evs))
		evs = append(evs, e)
	}
	acc := New(Options{Location: ams})
	acc.ObserveAll(evs)
	p := acc.Summary().Process
	if p == nil {
		t.Fatal("no process views")
	}
	if len(p.DirectlyFollows) != len(follows) || p.OtherFollows != 0 {
		t.Errorf("%d directly-follows pairs, standard library %d", len(p.DirectlyFollows), len(follows))
	}
	q7 := func(v []float64, q float64) float64 { // Hyndman-Fan type 7
		s := slices.Clone(v)
		slices.Sort(s)
		h := float64(len(s)-1) * q
		i := int(h)
		if i+1 >= len(s) {
			return s[len(s)-1]
		}
		return s[i] + (h-float64(i))*(s[i+1]-s[i])
	}
	var total uint64
	for _, df := range p.DirectlyFollows {
		want := follows[pair{df.From, df.To}]
		total += df.Count
		if df.Count != uint64(len(want)) {
			t.Errorf("%s -> %s: %d, standard library %d", df.From, df.To, df.Count, len(want))
			continue
		}
		if df.Exact && (math.Abs(df.P50-q7(want, 0.5)) > 1e-6 || math.Abs(df.P90-q7(want, 0.9)) > 1e-6) {
			t.Errorf("%s -> %s: p50 %v p90 %v, standard library %v %v", df.From, df.To, df.P50, df.P90, q7(want, 0.5), q7(want, 0.9))
		}
	}
	// 15214 events in 1050 cases, every event naming an activity.
	if total != 15214-1050 {
		t.Errorf("%d directly-follows steps, want %d", total, 15214-1050)
	}
	if p.DistinctVariant != uint64(len(variants)) || len(variants) != len(logVariants) || len(logVariants) != 846 {
		t.Errorf("%d variants, standard library %d, the log's Variant column %d (846 distinct values)", p.DistinctVariant, len(variants), len(logVariants))
	}
	type vc struct {
		k string
		n uint64
	}
	var vs []vc
	for k, n := range variants {
		vs = append(vs, vc{k, n})
	}
	slices.SortFunc(vs, func(x, y vc) int { return cmp.Or(cmp.Compare(y.n, x.n), cmp.Compare(x.k, y.k)) })
	if len(p.Variants) != min(TopVariants, len(vs)) {
		t.Fatalf("%d variants listed", len(p.Variants))
	}
	for i, v := range p.Variants {
		if k := strings.Join(v.Activities, "\x00"); k != vs[i].k || v.Cases != vs[i].n || v.Share != float64(vs[i].n)/1050 {
			t.Errorf("variant %d: %d cases %v, standard library %d cases %q", i, v.Cases, v.Activities, vs[i].n, vs[i].k)
		}
	}
	t.Logf("sepsis: %d directly-follows pairs, %d variants, top variant %d cases; %d handover pairs", len(follows), len(variants), vs[0].n, len(p.Handovers))
}
