package schema

import (
	"bytes"
	"compress/gzip"
	"errors"
	"fmt"
	"io"
	"os"
	"strings"
	"testing"
	"time"
)

func readAllXES(t *testing.T, data []byte, p *Profile, lim Limits) ([]Event, []*Rejection, *Reader, error) {
	t.Helper()
	rd, err := NewReader(bytes.NewReader(data), p, ReaderOptions{Name: "t.xes", Limits: lim})
	if err != nil {
		return nil, nil, nil, err
	}
	var evs []Event
	var rejs []*Rejection
	for {
		var e Event
		rej, err := rd.Next(&e)
		if err == io.EOF {
			return evs, rejs, rd, nil
		}
		if err != nil {
			return evs, rejs, rd, err
		}
		if rej != nil {
			rejs = append(rejs, rej)
			continue
		}
		evs = append(evs, e)
	}
}

// TestXESHandWritten reads an XES file written by hand, with trace and
// event globals, a container, an attribute nested in an attribute, a list
// in IEEE 1849-2016's <values> form and lifecycle transitions, as README.md
// (XES) documents.
func TestXESHandWritten(t *testing.T) {
	data, err := os.ReadFile("testdata/xes/clinic.xes")
	if err != nil {
		t.Fatal(err)
	}
	ptext, err := os.ReadFile("testdata/xes/clinic.yaml")
	if err != nil {
		t.Fatal(err)
	}
	p, err := ParseProfile(ptext)
	if err != nil {
		t.Fatal(err)
	}
	at := func(s string) time.Time {
		v, err := time.Parse(time.RFC3339Nano, s)
		if err != nil {
			t.Fatal(err)
		}
		return v
	}
	want := []Event{
		{Site: "harbour-walkin", CaseID: "visit-001", SubjectID: "person-17", Type: Enqueue, Activity: "registration", Queue: "front-desk", OccurredAt: at("2026-03-02T07:00:00Z"), Priority: "3", Outcome: "true", Line: 25},
		{Site: "harbour-walkin", CaseID: "visit-001", SubjectID: "person-17", ResourceID: "dr-x", Type: Start, Activity: "consult", Queue: "room-2", OccurredAt: at("2026-03-02T07:20:00Z"), Priority: "3", Channel: "R50.9", Outcome: "true", Line: 30},
		{Site: "harbour-walkin", CaseID: "visit-001", SubjectID: "person-17", ResourceID: "dr-x", Type: Complete, Activity: "consult", Queue: "front-desk", OccurredAt: at("2026-03-02T07:35:30.25Z"), Priority: "3", Outcome: "true", Line: 43},
		{Site: "harbour-walkin", CaseID: "visit-001", SubjectID: "person-17", Type: Complete, Activity: "discharge", Queue: "front-desk", OccurredAt: at("2026-03-02T07:40:00Z"), Priority: "3", Outcome: "true", Line: 49},
		{Site: "harbour-phone", CaseID: "visit-002", Type: Enqueue, Activity: "registration", Queue: "front-desk", OccurredAt: at("2026-03-02T08:00:00Z"), Line: 57},
		{Site: "harbour-phone", CaseID: "visit-002", Type: Abandon, Activity: "registration", Queue: "front-desk", OccurredAt: at("2026-03-02T09:45:00Z"), Line: 62},
	}
	for _, gz := range []bool{false, true} {
		in := data
		if gz {
			var b bytes.Buffer
			w := gzip.NewWriter(&b)
			w.Write(data)
			w.Close()
			in = b.Bytes()
		}
		evs, rejs, rd, err := readAllXES(t, in, p, Limits{})
		if err != nil {
			t.Fatalf("gzip %v: %v", gz, err)
		}
		if len(rejs) != 0 {
			t.Errorf("rejections: %+v", rejs)
		}
		if len(evs) != len(want) {
			t.Fatalf("gzip %v: %d events, want %d: %+v", gz, len(evs), len(want), evs)
		}
		for i := range want {
			g, w := evs[i], want[i]
			if !g.OccurredAt.Equal(w.OccurredAt) {
				t.Errorf("event %d at %s, want %s", i, g.OccurredAt, w.OccurredAt)
			}
			g.OccurredAt, w.OccurredAt = time.Time{}, time.Time{}
			if g != w {
				t.Errorf("event %d:\n got %+v\nwant %+v", i, g, w)
			}
		}
		if u := fmt.Sprint(rd.Unmapped()); u != "[codes/0 trace/triage/nurse]" {
			t.Errorf("unmapped %s", u)
		}
		if rd.Rows() != 6 {
			t.Errorf("rows %d", rd.Rows())
		}
	}
}

// xesDoc wraps body in a minimal log with one trace around events.
func xesDoc(body string) string {
	return `<?xml version="1.0" encoding="UTF-8"?>
<log xes.version="1849-2016">
` + body + `
</log>
`
}

const goodEvent = `<event><string key="concept:name" value="a"/><date key="time:timestamp" value="2026-01-01T00:00:00Z"/></event>`

func xesProfile(t testing.TB) *Profile {
	t.Helper()
	p, err := ParseProfile([]byte(`format: xes
fields:
  site: {value: "s"}
  case_id: "trace/concept:name"
  activity: "concept:name"
  event_type: {column: "lifecycle:transition", codes: {complete: complete, start: start}}
  occurred_at: "time:timestamp"
`))
	if err != nil {
		t.Fatal(err)
	}
	return p
}

// TestXESMalformed: each kind of bad XES stops the file with a FileError
// naming its rule and line; nothing of the file is taken as good.
func TestXESMalformed(t *testing.T) {
	p := xesProfile(t)
	trace := func(events string) string {
		return xesDoc(`<trace><string key="concept:name" value="c1"/>` + events + `</trace>`)
	}
	laughs := `<?xml version="1.0"?>
<!DOCTYPE log [
 <!ENTITY a "aaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaa">
 <!ENTITY b "&a;&a;&a;&a;&a;&a;&a;&a;&a;&a;&a;&a;&a;&a;&a;&a;">
 <!ENTITY c "&b;&b;&b;&b;&b;&b;&b;&b;&b;&b;&b;&b;&b;&b;&b;&b;">
]>
<log><trace><string key="concept:name" value="&c;"/>` + goodEvent + `</trace></log>`
	external := `<?xml version="1.0"?>
<!DOCTYPE log SYSTEM "file:///etc/passwd">
<log/>`
	var big strings.Builder
	for i := range 20 { // 20 values of 900 KB: each token under 1 MiB, the event over 16 MiB
		fmt.Fprintf(&big, `<string key="k%d" value="%s"/>`, i, strings.Repeat("x", 900_000))
	}
	cases := []struct {
		name, doc string
		rule      string
		line      int64
		lim       Limits
	}{
		{"entity expansion (billion laughs)", laughs, RuleXMLDoctype, 6, Limits{}},
		{"external DTD", external, RuleXMLDoctype, 2, Limits{}},
		{"undeclared entity", xesDoc("<trace>\n<string key=\"concept:name\" value=\"&xxe;\"/>" + goodEvent + "</trace>"), RuleXMLEntity, 4, Limits{}},
		{"not closed", xesDoc("<trace>\n" + goodEvent + "\n<event>")[:len(xesDoc(""))+30], RuleSyntax, 0, Limits{}},
		{"mismatched end tag", xesDoc("<trace>\n" + goodEvent + "\n</event></trace>"), RuleSyntax, 5, Limits{}},
		{"wrong root", `<events><event/></events>`, RuleXESStructure, 1, Limits{}},
		{"event outside a trace", xesDoc(goodEvent), RuleXESStructure, 3, Limits{}},
		{"unknown attribute type", trace("\n<event><decimal key=\"x\" value=\"1\"/></event>"), RuleXESStructure, 4, Limits{}},
		{"attribute without a key", trace("\n<event><string value=\"1\"/></event>"), RuleXESStructure, 4, Limits{}},
		{"int that is not", trace("\n<event><int key=\"n\" value=\"1.5\"/></event>"), RuleXESValue, 4, Limits{}},
		{"date that is not", trace("\n<event><date key=\"time:timestamp\" value=\"yesterday\"/></event>"), RuleXESValue, 4, Limits{}},
		{"boolean that is not", trace("\n<event><boolean key=\"b\" value=\"yes\"/></event>"), RuleXESValue, 4, Limits{}},
		{"trace attribute after an event", trace(goodEvent + "\n<string key=\"late\" value=\"x\"/>"), RuleXESStructure, 4, Limits{}},
		{"key twice", trace("\n<event><string key=\"k\" value=\"1\"/><string key=\"k\" value=\"2\"/></event>"), RuleXESStructure, 4, Limits{}},
		{"trace in a trace", trace("\n<trace/>"), RuleXESStructure, 4, Limits{}},
		{"text in an event", trace("\n<event>hello</event>"), RuleXESStructure, 4, Limits{}},
		{"other encoding", `<?xml version="1.0" encoding="ISO-8859-1"?><log/>`, RuleEncoding, 1, Limits{}},
		{"no events", xesDoc(`<trace><string key="concept:name" value="c1"/></trace>`), RuleNoRows, 0, Limits{}},
		{"empty", ``, RuleEmptyFile, 0, Limits{}},
		{"no log", `<?xml version="1.0"?>`, RuleEmptyFile, 0, Limits{}},
		{"content after the log", xesDoc(`<trace><string key="concept:name" value="c1"/>`+goodEvent+`</trace>`) + "<log/>", RuleXESStructure, 0, Limits{}},
		{"token over the limit", trace("\n<event><string key=\"k\" value=\"" + strings.Repeat("x", 300) + "\"/></event>"), RuleLineTooLong, 0, Limits{MaxLineBytes: 200}},
		{"too many attributes", trace("\n<event>" + `<string key="k1" value="v"/><string key="k2" value="v"/><string key="k3" value="v"/><string key="k4" value="v"/><string key="k5" value="v"/>` + "</event>"), RuleTooManyColumns, 4, Limits{MaxColumns: 4}},
		{"attributes over the byte bound", trace("\n<event>" + big.String() + "</event>"), RuleTooManyBytes, 4, Limits{}},
		{"nested too deep", trace("\n<event>" + strings.Repeat(`<container key="k">`, MaxXESDepth+1) + strings.Repeat(`</container>`, MaxXESDepth+1) + "</event>"), RuleXESStructure, 4, Limits{}},
		{"too many events", trace(goodEvent + goodEvent + goodEvent), RuleTooManyRows, 0, Limits{MaxRows: 2}},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			_, _, _, err := readAllXES(t, []byte(c.doc), p, c.lim)
			fe, ok := AsFileError(err)
			if !ok {
				t.Fatalf("got %v, want a FileError %s", err, c.rule)
			}
			if fe.Rule != c.rule {
				t.Fatalf("rule %s (%v), want %s", fe.Rule, fe, c.rule)
			}
			if c.line != 0 && fe.Line != c.line {
				t.Errorf("line %d (%v), want %d", fe.Line, fe, c.line)
			}
			if strings.Contains(fe.Error(), "c1") {
				t.Errorf("the message quotes a case id: %v", fe)
			}
			t.Logf("%v", fe)
		})
	}
}

// TestXESRowRejections: an event the profile cannot map is rejected alone,
// with its line, and reading goes on.
func TestXESRowRejections(t *testing.T) {
	p := xesProfile(t)
	doc := xesDoc(`<trace><string key="concept:name" value="c1"/>
<event><string key="concept:name" value="a"/><date key="time:timestamp" value="2026-01-01T00:00:00Z"/><string key="lifecycle:transition" value="suspend"/></event>
<event><string key="concept:name" value="a"/></event>
` + goodEvent + `</trace>`)
	evs, rejs, _, err := readAllXES(t, []byte(doc), p, Limits{})
	if err != nil {
		t.Fatal(err)
	}
	if len(evs) != 1 || evs[0].Type != Complete || evs[0].CaseID != "c1" {
		t.Errorf("events %+v", evs)
	}
	if len(rejs) != 2 || rejs[0].Reason != ReasonUnknownCode || rejs[0].Line != 4 || rejs[1].Reason != ReasonMissingRequired || rejs[1].Line != 5 {
		t.Errorf("rejections %+v", rejs)
	}
}

// TestXESProfile: format xes takes no CSV settings.
func TestXESProfileSettings(t *testing.T) {
	_, err := ParseProfile([]byte("format: xes\ndelimiter: \";\"\nfields: {site: {value: s}, case_id: a, event_type: {value: complete}, occurred_at: t}\n"))
	if !errors.Is(err, ErrInvalidProfile) || !strings.Contains(err.Error(), "only for csv and tsv") {
		t.Errorf("got %v", err)
	}
}

// FuzzXESReader: whatever the bytes, the XES reader ends with io.EOF or a
// FileError, never a panic, and its messages quote no identifier.
func FuzzXESReader(f *testing.F) {
	if data, err := os.ReadFile("testdata/xes/clinic.xes"); err == nil {
		f.Add(data)
	}
	f.Add([]byte(xesDoc(`<trace><string key="concept:name" value="c1"/>` + goodEvent + `</trace>`)))
	f.Add([]byte(`<!DOCTYPE log [<!ENTITY a "x">]><log>&a;</log>`))
	f.Add([]byte(xesDoc(`<global scope="event"><list key="l"><values><int key="i" value="1"/></values></list></global>`)))
	p := xesProfile(f)
	f.Fuzz(func(t *testing.T, data []byte) {
		readAllChecked(t, data, p)
	})
}

// BenchmarkXESReader reads a generated log of 1,000 traces of 20 events
// (go test ./schema -run '^$' -bench XESReader).
func BenchmarkXESReader(b *testing.B) {
	var doc strings.Builder
	doc.WriteString(`<?xml version="1.0" encoding="UTF-8"?>` + "\n<log xes.version=\"1849-2016\">\n")
	t0 := time.Date(2026, 3, 2, 8, 0, 0, 0, time.UTC)
	for c := range 1000 {
		fmt.Fprintf(&doc, "  <trace>\n    <string key=\"concept:name\" value=\"case-%d\"/>\n", c)
		for i := range 20 {
			fmt.Fprintf(&doc, "    <event>\n      <string key=\"concept:name\" value=\"step-%d\"/>\n      <string key=\"lifecycle:transition\" value=\"complete\"/>\n      <date key=\"time:timestamp\" value=\"%s\"/>\n      <string key=\"org:resource\" value=\"r%d\"/>\n    </event>\n",
				i, t0.Add(time.Duration(c*20+i)*time.Minute).Format(time.RFC3339Nano), i%7)
		}
		doc.WriteString("  </trace>\n")
	}
	doc.WriteString("</log>\n")
	data := []byte(doc.String())
	p := xesProfile(b)
	b.SetBytes(int64(len(data)))
	b.ResetTimer()
	for range b.N {
		rd, err := NewReader(bytes.NewReader(data), p, ReaderOptions{})
		if err != nil {
			b.Fatal(err)
		}
		n := 0
		for {
			var e Event
			rej, err := rd.Next(&e)
			if err == io.EOF {
				break
			}
			if err != nil || rej != nil {
				b.Fatal(err, rej)
			}
			n++
		}
		if n != 20000 {
			b.Fatalf("%d events", n)
		}
	}
}

// TestXESOneLine: a log written without line breaks reads the same; its
// events share line numbers.
func TestXESOneLine(t *testing.T) {
	doc := strings.ReplaceAll(xesDoc(`<trace><string key="concept:name" value="c1"/>`+goodEvent+goodEvent+`</trace>`), "\n", "")
	evs, rejs, _, err := readAllXES(t, []byte(doc), xesProfile(t), Limits{})
	if err != nil || len(rejs) != 0 || len(evs) != 2 || evs[0].Line != 1 || evs[1].Line != 1 {
		t.Errorf("%v %v %+v", err, rejs, evs)
	}
}
