package cases

import (
	"bytes"
	"compress/gzip"
	"encoding/csv"
	"io"
	"math"
	"os"
	"path/filepath"
	"slices"
	"testing"
	"time"

	"github.com/flowcat-catalog/flowcat/schema"
)

// readPatients reads the patients log (testdata/patients, see its README)
// through its profile, with instance_id mapped or not, sorted as the
// per-case computation takes events.
func readPatients(t *testing.T, data []byte, withInstance bool) []schema.Event {
	t.Helper()
	py, err := os.ReadFile(filepath.Join("..", "..", "testdata", "patients", "profile.yaml"))
	if err != nil {
		t.Fatal(err)
	}
	p, err := schema.ParseProfile(py)
	if err != nil {
		t.Fatal(err)
	}
	if _, ok := p.Fields[schema.FieldInstanceID]; !ok {
		t.Fatal("the patients profile does not map instance_id")
	}
	if !withInstance {
		delete(p.Fields, schema.FieldInstanceID)
	}
	rd, err := schema.NewReader(bytes.NewReader(data), p, schema.ReaderOptions{Name: "patients.csv.gz"})
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
		if err != nil {
			t.Fatal(err)
		}
		if rej != nil {
			t.Fatalf("rejected: %v", rej)
		}
		evs = append(evs, e)
	}
	slices.SortStableFunc(evs, func(a, b schema.Event) int { return Less(&a, &b) })
	return evs
}

// TestPatientsByInstance: the patients log mapped with its activity
// instance column (handling_id as instance_id) gives the README's 500
// cases, its mean case duration, and per activity the count and mean of
// the services, each equal to an independent standard-library pairing of
// each handling_id's start with its complete (README "Mean service time";
// the means to the README's three decimals, the independent ones to 1e-6).
func TestPatientsByInstance(t *testing.T) {
	data, err := os.ReadFile(filepath.Join("..", "..", "testdata", "patients", "patients.csv.gz"))
	if err != nil {
		t.Fatal(err)
	}
	// Independent reading: encoding/csv and time.Parse only.
	zr, err := gzip.NewReader(bytes.NewReader(data))
	if err != nil {
		t.Fatal(err)
	}
	recs, err := csv.NewReader(zr).ReadAll()
	if err != nil {
		t.Fatal(err)
	}
	head, recs := recs[0], recs[1:]
	col := func(n string) int { return slices.Index(head, n) }
	type inst struct {
		act          string
		start, compl *time.Time
	}
	insts := map[string]*inst{}
	first, last := map[string]time.Time{}, map[string]time.Time{}
	for _, r := range recs {
		at, err := time.Parse(time.RFC3339, r[col("time")])
		if err != nil {
			t.Fatal(err)
		}
		c := r[col("patient")]
		if f, ok := first[c]; !ok || at.Before(f) {
			first[c] = at
		}
		if l, ok := last[c]; !ok || at.After(l) {
			last[c] = at
		}
		in := insts[r[col("handling_id")]]
		if in == nil {
			in = &inst{act: r[col("handling")]}
			insts[r[col("handling_id")]] = in
		}
		if r[col("registration_type")] == "start" {
			in.start = &at
		} else {
			in.compl = &at
		}
	}
	var durSum float64
	for c := range first {
		durSum += last[c].Sub(first[c]).Seconds()
	}
	indepN, indepSum := map[string]int{}, map[string]float64{}
	for _, in := range insts {
		if in.start != nil && in.compl != nil {
			indepN[in.act]++
			indepSum[in.act] += in.compl.Sub(*in.start).Seconds()
		}
	}

	c := &collect{}
	b := NewBuilder(c)
	for _, e := range readPatients(t, data, true) {
		if e.InstanceID == "" && e.Type == schema.Start {
			t.Fatal("a start without its instance id")
		}
		b.Add(&e)
	}
	b.Flush()

	var mean float64
	for _, r := range c.recs {
		mean += float64(r.Duration()) / 1e6
	}
	mean /= float64(len(c.recs))
	// README: 500 cases, mean case duration 576832.972 s.
	if len(c.recs) != 500 || len(first) != 500 || math.Abs(mean-576832.972) > 5e-4 || math.Abs(mean-durSum/500) > 1e-6 {
		t.Errorf("%d cases (independent %d), mean duration %.4f s (independent %.4f); README 500, 576832.972 s", len(c.recs), len(first), mean, durSum/500)
	}
	gotN, gotSum := map[string]int{}, map[string]float64{}
	for _, s := range c.services {
		gotN[s.Activity]++
		gotSum[s.Activity] += float64(s.Duration) / 1e6
	}
	readme := map[string]struct {
		n    int
		mean float64
	}{
		"Blood test": {237, 19928.802}, "Check-out": {492, 7426.417}, "Discuss Results": {495, 9992.733},
		"MRI SCAN": {236, 14939.169}, "Registration": {500, 9913.680}, "Triage and Assessment": {500, 47179.796}, "X-Ray": {261, 17445.724},
	}
	if len(gotN) != len(readme) {
		t.Errorf("services of %d activities, README %d", len(gotN), len(readme))
	}
	for act, w := range readme {
		m, im := gotSum[act]/float64(gotN[act]), indepSum[act]/float64(indepN[act])
		if gotN[act] != w.n || indepN[act] != w.n || math.Abs(m-w.mean) > 5e-4 || math.Abs(m-im) > 1e-6 {
			t.Errorf("%s: %d services, mean %.4f s; independent %d, %.4f; README %d, %.3f", act, gotN[act], m, indepN[act], im, w.n, w.mean)
		}
	}
}

// TestParallelRepeat: one case runs the same activity twice at once (two
// scans, instances "a" and "b", overlapping). By instance each complete
// ends its own start: 40 and 35 minutes. By activity alone the second
// start takes the first for lost and the first complete ends the second
// start: one service of 30 minutes, the other complete unpaired. Both
// readings are worked out by hand.
func TestParallelRepeat(t *testing.T) {
	type row struct {
		typ  schema.EventType
		min  int
		inst string
	}
	rows := []row{{schema.Arrival, 0, ""}, {schema.Start, 0, "a"}, {schema.Start, 10, "b"}, {schema.Complete, 40, "a"}, {schema.Complete, 45, "b"}, {schema.Departure, 50, ""}}
	run := func(withInstance bool) *collect {
		c := &collect{}
		b := NewBuilder(c)
		for _, r := range rows {
			e := schema.Event{Site: "s", CaseID: "c1", Type: r.typ, OccurredAt: t0.Add(time.Duration(r.min) * time.Minute)}
			if r.typ == schema.Start || r.typ == schema.Complete {
				e.Activity = "scan"
				if withInstance {
					e.InstanceID = r.inst
				}
			}
			b.Add(&e)
		}
		b.Flush()
		return c
	}
	durs := func(c *collect) []int64 {
		var out []int64
		for _, s := range c.services {
			out = append(out, s.Duration/60e6)
		}
		return out
	}
	by := run(true)
	if got := durs(by); !slices.Equal(got, []int64{40, 35}) || secs(by.recs[0].Service) != 75*60 || by.recs[0].Outcome != Served {
		t.Errorf("by instance: services %v min, sum %v s, outcome %s; want [40 35], 4500 s, served", got, secs(by.recs[0].Service), by.recs[0].Outcome)
	}
	act := run(false)
	if got := durs(act); !slices.Equal(got, []int64{30}) {
		t.Errorf("by activity: services %v min, want [30] (the pairing instance ids exist to avoid)", got)
	}
	// A complete that names an instance still ends a start that names
	// none (a log that fills instance_id on completes only).
	c := &collect{}
	b := NewBuilder(c)
	for _, e := range []schema.Event{
		{Site: "s", CaseID: "c1", Type: schema.Start, Activity: "scan", OccurredAt: t0},
		{Site: "s", CaseID: "c1", Type: schema.Complete, Activity: "scan", InstanceID: "x", OccurredAt: t0.Add(time.Minute)},
	} {
		b.Add(&e)
	}
	b.Flush()
	if got := durs(c); !slices.Equal(got, []int64{1}) {
		t.Errorf("start without instance, complete with one: services %v min, want [1]", got)
	}
}
