package synth

import (
	"bufio"
	"bytes"
	"encoding/csv"
	"encoding/json"
	"errors"
	"fmt"
	"math"
	"slices"
	"strings"
	"testing"
	"time"

	"github.com/goccy/go-yaml"
	"github.com/itchyny/timefmt-go"
)

var firstDay = time.Date(2026, 3, 2, 0, 0, 0, 0, time.UTC) // a Monday; the week holds America/Halifax's DST start (Sun 8 March 2026)

var sites = []string{"qb-walkin", "qb-nurseline"}

// testProfile is the profile shape, decoded by an independent YAML parser.
type testProfile struct {
	Format    string         `yaml:"format"`
	Delimiter string         `yaml:"delimiter"`
	Timezone  string         `yaml:"timezone"`
	Fields    map[string]any `yaml:"fields"`
}

func (p *testProfile) column(field string) string {
	switch v := p.Fields[field].(type) {
	case string:
		return v
	case map[string]any:
		s, _ := v["column"].(string)
		return s
	}
	return ""
}

func (p *testProfile) attr(field, key string) any {
	m, _ := p.Fields[field].(map[string]any)
	return m[key]
}

func (p *testProfile) codes() map[string]string {
	m, _ := p.attr("event_type", "codes").(map[string]any)
	out := map[string]string{}
	for k, v := range m {
		out[k] = fmt.Sprint(v)
	}
	return out
}

func loadProfile(t *testing.T, sc *Scenario, site string) *testProfile {
	t.Helper()
	var p testProfile
	if err := yaml.Unmarshal(sc.Profile(site), &p); err != nil {
		t.Fatalf("profile of %s: %v", site, err)
	}
	return &p
}

// tev is one exported row read back with the standard library, through the
// site's profile.
type tev struct {
	raw     string // the row as written, for duplicate detection
	caseID  string
	subject string
	staff   string
	typ     string // schema event type by the profile's codes; "" when unmapped
	code    string
	step    string
	at      time.Time
	ok      bool // the timestamp parsed
}

// readBack parses a night's export with encoding/csv or encoding/json and
// reads it through the profile: column names, codes, layout and zone.
func readBack(t *testing.T, sc *Scenario, site string, data []byte) []tev {
	t.Helper()
	p := loadProfile(t, sc, site)
	loc, err := time.LoadLocation(p.Timezone)
	if err != nil {
		t.Fatal(err)
	}
	codes := p.codes()
	layout, _ := p.attr("occurred_at", "layout").(string)
	var out []tev
	get := func(m map[string]string, e tev) tev {
		e.caseID = m[p.column("case_id")]
		e.subject = m[p.column("subject_id")]
		e.staff = m[p.column("resource_id")]
		e.code = m[p.column("event_type")]
		e.typ = codes[e.code]
		e.step = m[p.column("activity")]
		stamp := m[p.column("occurred_at")]
		if layout != "" {
			e.at, err = timefmt.ParseInLocation(stamp, layout, loc)
			// A wall-clock time that does not round-trip fell in a DST gap.
			e.ok = err == nil && timefmt.Format(e.at, layout) == stamp
		} else {
			e.at, err = time.Parse(time.RFC3339, stamp)
			e.ok = err == nil
		}
		return e
	}
	switch p.Format {
	case "csv":
		r := csv.NewReader(bytes.NewReader(data))
		r.Comma = []rune(p.Delimiter)[0]
		recs, err := r.ReadAll()
		if err != nil {
			t.Fatalf("%s: csv: %v", site, err)
		}
		head := recs[0]
		for _, rec := range recs[1:] {
			m := map[string]string{}
			for i, h := range head {
				m[h] = rec[i]
			}
			out = append(out, get(m, tev{raw: strings.Join(rec, "\x1f")}))
		}
	case "jsonl":
		sc := bufio.NewScanner(bytes.NewReader(data))
		for sc.Scan() {
			var m map[string]string
			if err := json.Unmarshal(sc.Bytes(), &m); err != nil {
				t.Fatalf("%s: json line %q: %v", site, sc.Text(), err)
			}
			out = append(out, get(m, tev{raw: sc.Text()}))
		}
	default:
		t.Fatalf("profile format %q", p.Format)
	}
	return out
}

func night(t *testing.T, sc *Scenario, site string, d int) ([]byte, Stats) {
	t.Helper()
	var b bytes.Buffer
	st, err := sc.Night(site, d, &b)
	if err != nil {
		t.Fatalf("Night(%s, %d): %v", site, d, err)
	}
	return b.Bytes(), st
}

func TestNightDeterministic(t *testing.T) {
	for _, site := range sites {
		t.Run(site, func(t *testing.T) {
			a, sa := night(t, QuillonBay(42, firstDay, 3), site, 2)
			b, sb := night(t, QuillonBay(42, firstDay, 3), site, 2)
			if !bytes.Equal(a, b) || sa.Events != sb.Events {
				t.Fatal("same seed gave different exports")
			}
			c, _ := night(t, QuillonBay(43, firstDay, 3), site, 2)
			if bytes.Equal(a, c) {
				t.Fatal("different seeds gave the same export")
			}
			d, _ := night(t, QuillonBay(42, firstDay, 3), site, 1)
			if bytes.Equal(a, d) {
				t.Fatal("different days gave the same export")
			}
		})
	}
}

// countDefects counts the planted defects of an export independently, from
// the rows read back.
func countDefects(evs []tev) map[string]int {
	n := map[string]int{}
	seen := map[string]bool{}
	arrival := map[string]time.Time{}
	for _, e := range evs {
		if seen[e.raw] {
			n[DefectDuplicate]++
		}
		seen[e.raw] = true
		if e.typ == "" {
			n[DefectUnknownCode]++
		}
		if e.caseID == "" {
			n[DefectEmptyCaseID]++
		}
		if !e.ok {
			n[DefectBadTimestamp]++
		}
		if e.typ == "arrival" && e.ok && e.caseID != "" {
			arrival[e.caseID] = e.at
		}
	}
	for _, e := range evs {
		if a, ok := arrival[e.caseID]; ok && e.typ == "start" && e.ok && e.at.Before(a) {
			n[DefectClockSkew]++
		}
	}
	return n
}

func TestNightParsesAndCounts(t *testing.T) {
	for _, site := range sites {
		for _, defects := range []bool{true, false} {
			t.Run(fmt.Sprintf("%s/defects=%v", site, defects), func(t *testing.T) {
				sc := QuillonBay(7, firstDay, 7)
				sc.Defects = defects
				for d := range sc.Days {
					data, st := night(t, sc, site, d)
					evs := readBack(t, sc, site, data)
					if len(evs) != st.Events {
						t.Errorf("day %d: %d rows read, Stats.Events %d", d, len(evs), st.Events)
					}
					cases := map[string]bool{}
					abandoned := 0
					for _, e := range evs {
						if e.caseID != "" {
							cases[e.caseID] = true
						}
						if e.typ == "abandon" {
							abandoned++
						}
					}
					if len(cases) != st.Cases || abandoned != st.Abandoned {
						t.Errorf("day %d: %d cases / %d abandoned read, Stats %d / %d", d, len(cases), abandoned, st.Cases, st.Abandoned)
					}
					got := countDefects(evs)
					total := 0
					for _, k := range DefectKinds {
						want, ok := st.Defects[k]
						if !ok {
							t.Errorf("day %d: Stats.Defects lacks %s", d, k)
						}
						if got[k] != want {
							t.Errorf("day %d: %s: counted %d, Stats says %d", d, k, got[k], want)
						}
						if defects && (want < 1 || want > 2) {
							t.Errorf("day %d: %s: %d planted, want 1 or 2", d, k, want)
						}
						total += want
					}
					if !defects && total != 0 {
						t.Errorf("day %d: defects off but %v", d, st.Defects)
					}
				}
			})
		}
	}
}

func TestNightErrors(t *testing.T) {
	sc := QuillonBay(1, firstDay, 2)
	var b bytes.Buffer
	for _, tc := range []struct {
		site string
		day  int
		want error
	}{
		{"qb-nowhere", 0, ErrUnknownSite},
		{"qb-walkin", 2, ErrDayRange},
		{"qb-walkin", -1, ErrDayRange},
	} {
		if _, err := sc.Night(tc.site, tc.day, &b); !errors.Is(err, tc.want) {
			t.Errorf("Night(%q, %d) = %v, want %v", tc.site, tc.day, err, tc.want)
		}
	}
	if b.Len() != 0 {
		t.Error("a failed Night wrote bytes")
	}
	if sc.Profile("qb-nowhere") != nil {
		t.Error("Profile of an unknown site is not nil")
	}
	sc.Sites[0].Layout = "%d.%m.%Y %I"
	if _, err := sc.Night("qb-walkin", 0, &b); !errors.Is(err, ErrFormat) {
		t.Errorf("unsupported layout: %v, want ErrFormat", err)
	}
}

func TestProfileMatchesExport(t *testing.T) {
	sc := QuillonBay(3, firstDay, 1)
	for _, site := range sites {
		t.Run(site, func(t *testing.T) {
			s, _, _ := sc.Site(site)
			p := loadProfile(t, sc, site)
			if p.Format != s.Format || p.Timezone != s.Zone || p.attr("site", "value") != site {
				t.Fatalf("profile head %+v", p)
			}
			data, _ := night(t, sc, site, 0)
			var keys []string
			if p.Format == "csv" {
				if p.Delimiter != ";" {
					t.Errorf("delimiter %q", p.Delimiter)
				}
				keys = strings.Split(strings.SplitN(string(data), "\n", 2)[0], ";")
				// The free-text note must not be mapped.
				for f := range p.Fields {
					if p.column(f) == "Note" {
						t.Errorf("field %s maps the free-text Note column", f)
					}
				}
			} else {
				ks := map[string]bool{}
				for line := range strings.Lines(string(data)) {
					var m map[string]any
					if err := json.Unmarshal([]byte(line), &m); err != nil {
						t.Fatal(err)
					}
					for k := range m {
						ks[k] = true
					}
				}
				for k := range ks {
					keys = append(keys, k)
				}
			}
			for f := range p.Fields {
				if c := p.column(f); c != "" && !slices.Contains(keys, c) {
					t.Errorf("field %s names column %q, not in the export (%v)", f, c, keys)
				}
			}
			for _, f := range []string{"site", "case_id", "event_type", "occurred_at"} {
				if p.Fields[f] == nil {
					t.Errorf("required field %s not mapped", f)
				}
			}
			// Every code in the export is mapped, except the planted unknown one.
			codes := p.codes()
			for _, e := range readBack(t, sc, site, data) {
				if _, ok := codes[e.code]; !ok && e.code != s.UnknownCode {
					t.Errorf("code %q not in the profile", e.code)
				}
			}
		})
	}
}

// hourProfile counts arrivals by local clock hour over a run.
func hourProfile(t *testing.T, sc *Scenario, site string) [24]int {
	t.Helper()
	s, _, _ := sc.Site(site)
	loc, _ := time.LoadLocation(s.Zone)
	var h [24]int
	for d := range sc.Days {
		data, _ := night(t, sc, site, d)
		for _, e := range readBack(t, sc, site, data) {
			if e.typ == "arrival" && e.ok {
				h[e.at.In(loc).Hour()]++
			}
		}
	}
	return h
}

func TestArrivalsTwoPeaks(t *testing.T) {
	for _, site := range sites {
		for _, seed := range []uint64{1, 2, 3} {
			t.Run(fmt.Sprintf("%s/seed=%d", site, seed), func(t *testing.T) {
				sc := QuillonBay(seed, firstDay, 7)
				s, _, _ := sc.Site(site)
				h := hourProfile(t, sc, site)
				if len(s.Peaks) != 2 {
					t.Fatalf("%d peaks configured", len(s.Peaks))
				}
				// Search the morning (08-14) and the evening (15-23) for the
				// busiest hour; it must fall in the peak's window (centre
				// +- width), and stand well above the midday trough.
				trough := min(h[13], h[14], h[15])
				for i, search := range [][2]int{{8, 14}, {15, 23}} {
					pk := s.Peaks[i]
					best := search[0]
					for hr := search[0]; hr <= search[1]; hr++ {
						if h[hr] > h[best] {
							best = hr
						}
					}
					if float64(best+1) <= pk.Hour-pk.Width || float64(best) >= pk.Hour+pk.Width {
						t.Errorf("peak %d: busiest hour %02d:00 outside %.1f+-%.1f; profile %v", i, best, pk.Hour, pk.Width, h)
					}
					if float64(h[best]) < 1.5*float64(trough) {
						t.Errorf("peak %d: %d arrivals at %02d:00, trough %d: no peak; profile %v", i, h[best], best, trough, h)
					}
				}
				if s.CloseHour <= 20 {
					for hr := 0; hr < 24; hr++ {
						if (float64(hr) < s.OpenHour || float64(hr) >= s.CloseHour) && h[hr] != 0 {
							t.Errorf("%d arrivals at %02d:00 while closed", h[hr], hr)
						}
					}
				}
			})
		}
	}
}

func TestWeekendDiffers(t *testing.T) {
	// Weekday vs weekend totals over four weeks follow the weekend factor
	// within 4 standard errors of a Poisson count ratio.
	for _, site := range sites {
		t.Run(site, func(t *testing.T) {
			sc := QuillonBay(11, firstDay, 28)
			s, _, _ := sc.Site(site)
			var wd, we float64
			for d := range sc.Days {
				_, st := night(t, sc, site, d)
				if d%7 >= 5 { // firstDay is a Monday
					we += float64(st.Cases)
				} else {
					wd += float64(st.Cases)
				}
			}
			ratio := (we / 8) / (wd / 20)
			// sd of a ratio of Poisson means, by the delta method: ratio*sqrt(1/we+1/wd)
			se := ratio * math.Sqrt(1/we+1/wd)
			if math.Abs(ratio-s.WeekendFactor) > 4*se {
				t.Errorf("weekend/weekday ratio %.3f, configured %.2f (se %.3f)", ratio, s.WeekendFactor, se)
			}
		})
	}
}

func TestServiceLognormal(t *testing.T) {
	for _, site := range sites {
		t.Run(site, func(t *testing.T) {
			sc := QuillonBay(5, firstDay, 28)
			sc.Defects = false
			s, _, _ := sc.Site(site)
			logs := map[string][]float64{}
			for d := range sc.Days {
				data, _ := night(t, sc, site, d)
				begun := map[string]time.Time{}
				for _, e := range readBack(t, sc, site, data) {
					key := e.caseID + "/" + e.step
					switch e.typ {
					case "start":
						begun[key] = e.at
					case "complete":
						step := e.step
						if step == "" { // the phone line writes no step; its one activity
							step = s.Steps[0].Name
						}
						logs[step] = append(logs[step], math.Log(e.at.Sub(begun[key]).Minutes()))
					}
				}
			}
			for _, act := range s.Steps {
				x := logs[act.Name]
				n := float64(len(x))
				if n < 1000 {
					t.Fatalf("%s: only %d services", act.Name, len(x))
				}
				mean, sd := meanSD(x)
				// Standard errors under normality (from memory): mean sd/sqrt(n),
				// sample sd sd/sqrt(2(n-1)). Tolerance: 4 standard errors.
				seMean := act.SDLog / math.Sqrt(n)
				seSD := act.SDLog / math.Sqrt(2*(n-1))
				if math.Abs(mean-act.MeanLog) > 4*seMean {
					t.Errorf("%s: mean log minutes %.4f, configured %.4f (4 se = %.4f, n %d)", act.Name, mean, act.MeanLog, 4*seMean, len(x))
				}
				if math.Abs(sd-act.SDLog) > 4*seSD {
					t.Errorf("%s: sd log minutes %.4f, configured %.4f (4 se = %.4f, n %d)", act.Name, sd, act.SDLog, 4*seSD, len(x))
				}
			}
		})
	}
}

func meanSD(x []float64) (mean, sd float64) {
	for _, v := range x {
		mean += v
	}
	mean /= float64(len(x))
	for _, v := range x {
		sd += (v - mean) * (v - mean)
	}
	return mean, math.Sqrt(sd / float64(len(x)-1))
}

// TestQueueing checks the simulation through the export: services of one
// staff ref never overlap, each step serves first come first served (start
// order follows queue-join order), cases wait and some abandon, and some
// subjects return.
func TestQueueing(t *testing.T) {
	for _, site := range sites {
		t.Run(site, func(t *testing.T) {
			sc := QuillonBay(9, firstDay, 7)
			sc.Defects = false
			subjectCases := map[string]map[string]bool{}
			var cases, abandoned, waited int
			for d := range sc.Days {
				data, st := night(t, sc, site, d)
				cases += st.Cases
				abandoned += st.Abandoned
				evs := readBack(t, sc, site, data)
				type svc struct{ enq, start, end time.Time }
				joined := map[string]time.Time{}
				byStep := map[string][]svc{}
				open := map[string]*svc{}
				busy := map[string][][2]time.Time{}
				for _, e := range evs {
					key := e.caseID + "/" + e.step
					if subjectCases[e.subject] == nil {
						subjectCases[e.subject] = map[string]bool{}
					}
					subjectCases[e.subject][e.caseID] = true
					switch e.typ {
					case "arrival":
						if _, ok := joined[e.caseID+"/"]; !ok {
							joined[e.caseID+"/"] = e.at // a site without enqueue rows queues on arrival
						}
					case "enqueue":
						joined[key] = e.at
					case "start":
						enq, ok := joined[key]
						if !ok {
							enq = joined[e.caseID+"/"]
						}
						open[key] = &svc{enq: enq, start: e.at}
						if e.at.Sub(enq) > 10*time.Minute {
							waited++
						}
					case "complete":
						s := open[key]
						s.end = e.at
						byStep[e.step] = append(byStep[e.step], *s)
						busy[e.staff] = append(busy[e.staff], [2]time.Time{s.start, s.end})
					}
				}
				for step, ss := range byStep {
					slices.SortFunc(ss, func(a, b svc) int {
						if c := a.enq.Compare(b.enq); c != 0 {
							return c
						}
						return a.start.Compare(b.start)
					})
					for i := 1; i < len(ss); i++ {
						if ss[i].start.Before(ss[i-1].start) {
							t.Fatalf("day %d %s: not FCFS: joined %v started %v, earlier joiner %v started %v",
								d, step, ss[i].enq, ss[i].start, ss[i-1].enq, ss[i-1].start)
						}
					}
				}
				for _, iv := range busy {
					slices.SortFunc(iv, func(a, b [2]time.Time) int { return a[0].Compare(b[0]) })
					for i := 1; i < len(iv); i++ {
						if iv[i][0].Before(iv[i-1][1]) {
							t.Fatalf("day %d: a staff ref serves two cases at once", d)
						}
					}
				}
			}
			share := float64(abandoned) / float64(cases)
			if share < 0.01 || share > 0.25 {
				t.Errorf("abandonment %.3f of %d cases, want a realistic 1-25%%", share, cases)
			}
			if waited == 0 {
				t.Error("no case waited over 10 minutes")
			}
			returning := 0
			for _, cs := range subjectCases {
				if len(cs) > 1 {
					returning++
				}
			}
			if returning == 0 {
				t.Error("no subject has more than one case")
			}
			t.Logf("%d cases, %.1f%% abandoned, %d waited >10 min, %d returning subjects", cases, 100*share, waited, returning)
		})
	}
}

func TestStrftimeToGo(t *testing.T) {
	for _, tc := range []struct{ in, want string }{
		{"%d.%m.%Y %H:%M:%S", "02.01.2006 15:04:05"},
		{"%y%m%d-%H%M 100%%", "060102-1504 100%"},
	} {
		got, err := strftimeToGo(tc.in)
		if err != nil || got != tc.want {
			t.Errorf("strftimeToGo(%q) = %q, %v; want %q", tc.in, got, err, tc.want)
		}
	}
	for _, bad := range []string{"%Q", "%"} {
		if _, err := strftimeToGo(bad); !errors.Is(err, ErrFormat) {
			t.Errorf("strftimeToGo(%q) err = %v", bad, err)
		}
	}
}

func BenchmarkNight(b *testing.B) {
	sc := QuillonBay(1, firstDay, 7)
	var buf bytes.Buffer
	for i := 0; b.Loop(); i++ {
		buf.Reset()
		if _, err := sc.Night(sites[i%2], i%7, &buf); err != nil {
			b.Fatal(err)
		}
	}
}

func ExampleScenario_Profile() {
	sc := QuillonBay(1, time.Date(2026, 3, 2, 0, 0, 0, 0, time.UTC), 7)
	fmt.Print(string(sc.Profile("qb-walkin")))
	// Output:
	// # Mapping profile of the Quillon Bay Walk-in Clinic export (synthetic).
	// format: csv
	// delimiter: ";"
	// timezone: America/Halifax
	// fields:
	//   site: {value: "qb-walkin"}
	//   case_id: "VisitRef"
	//   subject_id: "PatientRef"
	//   resource_id: "StaffRef"
	//   event_type: {column: "EvCode", codes: {REG: arrival, QIN: enqueue, BEG: start, END: complete, LWBS: abandon, OUT: departure}}
	//   activity: {column: "Step"}
	//   queue: {column: "Area"}
	//   priority: {column: "Triage"}
	//   occurred_at: {column: "Stamp", layout: "%d.%m.%Y %H:%M:%S"}
}
