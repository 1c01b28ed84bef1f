package schema

import (
	"bytes"
	"compress/gzip"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"os"
	"slices"
	"strings"
	"testing"
	"testing/iotest"
	"time"
)

// testProfileYAML maps a small comma-separated clinic export.
const testProfileYAML = `
timezone: Europe/Amsterdam
fields:
  site: {value: north}
  case_id: Visit
  event_type: {column: Code, codes: {ARR: arrival, TRI: start, END: departure}}
  occurred_at: When
  activity: Step
  resource_id: Desk
`

const testHeader = "Visit,Code,When,Step,Desk,Age\n"

func mustProfile(t testing.TB, y string) *Profile {
	t.Helper()
	p, err := ParseProfile([]byte(y))
	if err != nil {
		t.Fatalf("profile: %v", err)
	}
	return p
}

// readResult is everything a Reader produced for one input.
type readResult struct {
	events []Event
	rejs   []Rejection
	ferr   *FileError // from NewReader or Next
	rows   int64
	r      *Reader
}

func readAll(t testing.TB, in io.Reader, p *Profile) readResult {
	t.Helper()
	var res readResult
	r, err := NewReader(in, p, ReaderOptions{})
	if err != nil {
		fe, ok := AsFileError(err)
		if !ok {
			t.Fatalf("NewReader error %T is not a *FileError: %v", err, err)
		}
		res.ferr = fe
		return res
	}
	res.r = r
	for {
		var e Event
		rej, err := r.Next(&e)
		if err == io.EOF {
			break
		}
		if err != nil {
			fe, ok := AsFileError(err)
			if !ok {
				t.Fatalf("Next error %T is not a *FileError: %v", err, err)
			}
			res.ferr = fe
			break
		}
		if rej != nil {
			res.rejs = append(res.rejs, *rej)
			continue
		}
		res.events = append(res.events, e)
	}
	res.rows = r.Rows()
	return res
}

func gzipBytes(t testing.TB, b []byte) []byte {
	t.Helper()
	var buf bytes.Buffer
	zw := gzip.NewWriter(&buf)
	if _, err := zw.Write(b); err != nil {
		t.Fatal(err)
	}
	if err := zw.Close(); err != nil {
		t.Fatal(err)
	}
	return buf.Bytes()
}

func TestReaderAccepts(t *testing.T) {
	p := mustProfile(t, testProfileYAML)
	data := testHeader +
		"V1,ARR,2021-06-01T08:00:00,registration,D1,80\n" +
		" V1 , TRI ,2021-06-01T08:05:30.250+02:00, triage ,,\n" +
		"V2,END,2021-01-15 10:00,,D2,\n"
	res := readAll(t, strings.NewReader(data), p)
	if res.ferr != nil || len(res.rejs) != 0 {
		t.Fatalf("ferr %v rejs %v", res.ferr, res.rejs)
	}
	want := []Event{
		{Site: "north", CaseID: "V1", ResourceID: "D1", Type: Arrival, Activity: "registration", OccurredAt: mustInstant(t, "2021-06-01T08:00:00+02:00"), Line: 2},
		{Site: "north", CaseID: "V1", Type: Start, Activity: "triage", OccurredAt: mustInstant(t, "2021-06-01T08:05:30.25+02:00"), Line: 3},
		{Site: "north", CaseID: "V2", ResourceID: "D2", Type: Departure, OccurredAt: mustInstant(t, "2021-01-15T10:00:00+01:00"), Line: 4},
	}
	if len(res.events) != len(want) {
		t.Fatalf("got %d events: %+v", len(res.events), res.events)
	}
	for i := range want {
		g, w := res.events[i], want[i]
		if !g.OccurredAt.Equal(w.OccurredAt) {
			t.Errorf("event %d time %v, want %v", i, g.OccurredAt, w.OccurredAt)
		}
		g.OccurredAt, w.OccurredAt = time.Time{}, time.Time{}
		if g != w {
			t.Errorf("event %d = %+v, want %+v", i, g, w)
		}
	}
	if res.rows != 3 {
		t.Errorf("Rows = %d", res.rows)
	}
	if got := res.r.Unmapped(); !slices.Equal(got, []string{"Age"}) {
		t.Errorf("Unmapped = %v", got)
	}
}

func TestReaderFormats(t *testing.T) {
	p := mustProfile(t, testProfileYAML)
	csvData := testHeader + "V1,ARR,2021-06-01T08:00:00Z,a,D1,1\n"
	tsv := mustProfile(t, "format: tsv\n"+testProfileYAML)
	tsvData := strings.ReplaceAll(csvData, ",", "\t")
	tests := []struct {
		name string
		p    *Profile
		data []byte
	}{
		{"csv", p, []byte(csvData)},
		{"csv gzip", p, gzipBytes(t, []byte(csvData))},
		{"csv crlf", p, []byte(strings.ReplaceAll(csvData, "\n", "\r\n"))},
		{"csv bom", p, []byte("\uFEFF" + csvData)},
		{"csv no final newline", p, []byte(strings.TrimSuffix(csvData, "\n"))},
		{"csv two gzip members", p, append(gzipBytes(t, []byte(testHeader)), gzipBytes(t, []byte("V1,ARR,2021-06-01T08:00:00Z,a,D1,1\n"))...)},
		{"tsv", tsv, []byte(tsvData)},
	}
	for _, tc := range tests {
		res := readAll(t, bytes.NewReader(tc.data), tc.p)
		if res.ferr != nil || len(res.rejs) != 0 || len(res.events) != 1 {
			t.Errorf("%s: ferr %v rejs %v events %d", tc.name, res.ferr, res.rejs, len(res.events))
			continue
		}
		e := res.events[0]
		if e.CaseID != "V1" || e.Type != Arrival || !e.OccurredAt.Equal(mustInstant(t, "2021-06-01T08:00:00Z")) || e.Line != 2 {
			t.Errorf("%s: %+v", tc.name, e)
		}
	}
}

func TestReaderDefaultProfile(t *testing.T) {
	data := "site,case_id,event_type,occurred_at,queue,extra\n" +
		"s1,c1,enqueue,2021-06-01T08:00:00Z,q1,x\n"
	res := readAll(t, strings.NewReader(data), nil)
	if res.ferr != nil || len(res.rejs) != 0 || len(res.events) != 1 {
		t.Fatalf("ferr %v rejs %v events %v", res.ferr, res.rejs, res.events)
	}
	e := res.events[0]
	if e.Site != "s1" || e.CaseID != "c1" || e.Type != Enqueue || e.Queue != "q1" || e.OccurredAt.Hour() != 8 {
		t.Errorf("%+v", e)
	}
	if u := res.r.Unmapped(); !slices.Equal(u, []string{"extra"}) {
		t.Errorf("Unmapped %v", u)
	}
	// Required schema columns must be there even under the default profile.
	res = readAll(t, strings.NewReader("site,case_id,occurred_at\ns,c,2021-06-01T08:00:00Z\n"), nil)
	if res.ferr == nil || res.ferr.Rule != RuleMissingColumn || res.ferr.Column != "event_type" {
		t.Errorf("default profile without event_type: %v", res.ferr)
	}
}

func TestReaderCodes(t *testing.T) {
	withDefault := mustProfile(t, strings.Replace(testProfileYAML, "END: departure}", "END: departure}, default: transfer", 1))
	data := testHeader + "V1,XYZ,2021-06-01T08:00:00Z,,,\n"
	res := readAll(t, strings.NewReader(data), withDefault)
	if len(res.rejs) != 0 || len(res.events) != 1 || res.events[0].Type != Transfer {
		t.Errorf("with default: rejs %v events %+v", res.rejs, res.events)
	}
	// Codes on a plain string field; an unmapped value rejects without a default.
	p := mustProfile(t, strings.Replace(testProfileYAML, "activity: Step", "activity: {column: Step, codes: {T: triage}}", 1))
	res = readAll(t, strings.NewReader(testHeader+"V1,ARR,2021-06-01T08:00:00Z,T,,\nV1,ARR,2021-06-01T08:00:00Z,Q,,\n"), p)
	if len(res.events) != 1 || res.events[0].Activity != "triage" {
		t.Errorf("activity codes: %+v", res.events)
	}
	if len(res.rejs) != 1 || res.rejs[0].Reason != ReasonUnknownCode || res.rejs[0].Column != "Step" || res.rejs[0].Line != 3 || !strings.Contains(res.rejs[0].Message, `"Q"`) {
		t.Errorf("activity unknown code: %+v", res.rejs)
	}
	// Codes match the trimmed value, case-sensitively.
	res = readAll(t, strings.NewReader(testHeader+"V1,arr,2021-06-01T08:00:00Z,,,\n"), mustProfile(t, testProfileYAML))
	if len(res.rejs) != 1 || res.rejs[0].Reason != ReasonUnknownCode {
		t.Errorf("case-sensitive codes: %+v %+v", res.rejs, res.events)
	}
	// Without codes the value must be an event type already.
	plain := mustProfile(t, strings.Replace(testProfileYAML, "{column: Code, codes: {ARR: arrival, TRI: start, END: departure}}", "Code", 1))
	res = readAll(t, strings.NewReader(testHeader+"V1,abandon,2021-06-01T08:00:00Z,,,\nV1,ARR,2021-06-01T08:00:00Z,,,\n"), plain)
	if len(res.events) != 1 || res.events[0].Type != Abandon || len(res.rejs) != 1 || res.rejs[0].Reason != ReasonUnknownCode || res.rejs[0].Line != 3 {
		t.Errorf("plain event type: %+v %+v", res.events, res.rejs)
	}
}

// TestReaderBadInput checks the exact rule or reason, line and column of
// each kind of bad input.
func TestReaderBadInput(t *testing.T) {
	p := mustProfile(t, testProfileYAML)
	jsonl := mustProfile(t, "format: jsonl\n"+testProfileYAML)
	optionalMissing := mustProfile(t, strings.Replace(testProfileYAML, "activity: Step", "activity: Stepp", 1))
	badLayout := mustProfile(t, testProfileYAML)
	m := badLayout.Fields[FieldOccurredAt]
	m.Layout = "%Y-%m-%d %Q"
	badLayout.Fields[FieldOccurredAt] = m

	manyRows := testHeader + strings.Repeat("V1,ARR,2021-06-01T08:00:00Z,registration,D1,80\n", 5000)
	gz := gzipBytes(t, []byte(manyRows))
	badCRC := slices.Clone(gz)
	badCRC[len(badCRC)-8] ^= 0xff // the CRC-32 of the gzip trailer (RFC 1952 section 2.3)

	tests := []struct {
		name   string
		p      *Profile
		data   []byte
		in     io.Reader // instead of data
		rule   string    // file error expected, or
		reason Reason    // one rejection expected
		line   int64
		column string
		field  Field
		msg    string // a piece of the message
	}{
		{name: "empty file", p: p, data: nil, rule: RuleEmptyFile},
		{name: "blank lines only", p: p, data: []byte("\n\n"), rule: RuleEmptyFile},
		{name: "empty gzip", p: p, data: gzipBytes(t, nil), rule: RuleEmptyFile},
		{name: "header only", p: p, data: []byte(testHeader), rule: RuleNoRows},
		{name: "wrong delimiter", p: p, data: []byte("Visit;Code;When;Step;Desk;Age\nV1;ARR;2021-06-01T08:00:00Z;a;D1;1\n"), rule: RuleMissingColumn, line: 1, column: "Visit", msg: `is the delimiter right? profile says ","`},
		{name: "missing required column", p: p, data: []byte("Visit,Code,Step,Desk,Age\nV1,ARR,a,D1,1\n"), rule: RuleMissingColumn, line: 1, column: "When", msg: `"Visit", "Code", "Step", "Desk", "Age"`},
		{name: "profile names absent column", p: optionalMissing, data: []byte(testHeader + "V1,ARR,2021-06-01T08:00:00Z,a,D1,1\n"), rule: RuleMissingColumn, line: 1, column: "Stepp"},
		{name: "duplicate column", p: p, data: []byte("Visit,Code,When,Step,Desk,Code\nV1,ARR,2021-06-01T08:00:00Z,a,D1,1\n"), rule: RuleDuplicateColumn, line: 1, column: "Code"},
		{name: "bad utf-8 in data row", p: p, data: []byte(testHeader + "V1,ARR,2021-06-01T08:00:00Z,a,D1,1\nV2,ARR,2021-06-01T08:00:00Z,caf\xe9,D1,1\n"), rule: RuleEncoding, line: 3, column: "Step"},
		{name: "bad utf-8 in header", p: p, data: []byte("Visit,Code,When,St\xe9p,Desk\n"), rule: RuleEncoding, line: 1, column: "field 4"},
		{name: "bad layout in hand-built profile", p: badLayout, data: []byte(testHeader), rule: RuleProfile, msg: "%Q"},
		{name: "unknown event code", p: p, data: []byte(testHeader + "V1,XYZ,2021-06-01T08:00:00Z,a,D1,1\n"), reason: ReasonUnknownCode, line: 2, column: "Code", field: FieldEventType, msg: `"XYZ"`},
		{name: "bad timestamp", p: p, data: []byte(testHeader + "V1,ARR,2021-06-01T08:00:00Z,a,D1,1\nV1,ARR,01/06/2021 08:00,a,D1,1\n"), reason: ReasonBadTimestamp, line: 3, column: "When", field: FieldOccurredAt},
		{name: "nonexistent local time", p: p, data: []byte(testHeader + "V1,ARR,2021-03-28 02:30,a,D1,1\n"), reason: ReasonNonexistentLocal, line: 2, column: "When", field: FieldOccurredAt},
		{name: "ambiguous local time", p: p, data: []byte(testHeader + "V1,ARR,2021-10-31 02:30,a,D1,1\n"), reason: ReasonAmbiguousLocal, line: 2, column: "When", field: FieldOccurredAt},
		{name: "missing required value", p: p, data: []byte(testHeader + "  ,ARR,2021-06-01T08:00:00Z,a,D1,1\n"), reason: ReasonMissingRequired, line: 2, column: "Visit", field: FieldCaseID},
		{name: "field count", p: p, data: []byte(testHeader + "V1,ARR,2021-06-01T08:00:00Z,a,D1,1,extra\n"), reason: ReasonFieldCount, line: 2},
		{name: "bare quote", p: p, data: []byte(testHeader + "V1,ARR,2021-06-01T08:00:00Z,a \"b\",D1,1\n"), reason: ReasonMalformedRow, line: 2},
		{name: "unclosed quote at end", p: p, data: []byte(testHeader + "V1,ARR,2021-06-01T08:00:00Z,\"a,D1,1\n"), reason: ReasonMalformedRow, line: 2},
		{name: "truncated gzip", p: p, data: gz[:len(gz)/2], rule: RuleCompression, line: 2193},
		{name: "gzip cut in its header", p: p, data: gz[:5], rule: RuleCompression},
		{name: "gzip bad checksum", p: p, data: badCRC, rule: RuleCompression, line: 5002},
		{name: "read error", p: p, in: io.MultiReader(strings.NewReader(testHeader+"V1,ARR,2021-06-01T08:00:00Z,a,D1,1\n"), iotest.ErrReader(errors.New("connection reset"))), rule: RuleRead, line: 3},
		{name: "jsonl object value", p: jsonl, data: []byte(`{"Visit":"V1","Code":"ARR","When":"2021-06-01T08:00:00Z"}` + "\n" + `{"Visit":"V1","Code":"ARR","When":"2021-06-01T08:00:00Z","Step":{"a":1}}` + "\n"), reason: ReasonBadValue, line: 2, column: "Step", field: FieldActivity},
		{name: "jsonl array value", p: jsonl, data: []byte(`{"Visit":["V1"],"Code":"ARR","When":"2021-06-01T08:00:00Z"}` + "\n"), reason: ReasonBadValue, line: 1, column: "Visit", field: FieldCaseID},
		{name: "jsonl null required", p: jsonl, data: []byte("\n" + `{"Visit":null,"Code":"ARR","When":"2021-06-01T08:00:00Z"}` + "\n"), reason: ReasonMissingRequired, line: 2, column: "Visit", field: FieldCaseID},
		{name: "jsonl bad json", p: jsonl, data: []byte(`{"Visit":"V1",` + "\n"), reason: ReasonMalformedRow, line: 1},
		{name: "jsonl not an object", p: jsonl, data: []byte(`["V1"]` + "\n"), reason: ReasonMalformedRow, line: 1},
		{name: "jsonl bad utf-8", p: jsonl, data: []byte(`{"Visit":"V1","Code":"ARR","When":"2021-06-01T08:00:00Z"}` + "\n" + "{\"Visit\":\"V\xff\"}\n"), rule: RuleEncoding, line: 2},
		{name: "jsonl empty", p: jsonl, data: nil, rule: RuleEmptyFile},
		{name: "jsonl CR-only line ends", p: jsonl, data: []byte(`{"Visit":"V1","Code":"ARR","When":"2021-06-01T08:00:00Z"}` + "\r" + `{"Visit":"V2","Code":"ARR","When":"2021-06-01T08:00:00Z"}` + "\r"), reason: ReasonMalformedRow, line: 1, msg: "lone CR"},
		{name: "NUL in a header name", p: p, data: []byte("Visit,Code,When,Step\x00,Desk,Age\nV1,ARR,2021-06-01T08:00:00Z,a,D1,1\n"), rule: RuleEncoding, line: 1, column: "field 4", msg: "NUL"},
		{name: "UTF-16 file", p: p, data: []byte("V\x00i\x00s\x00i\x00t\x00,\x00C\x00o\x00d\x00e\x00\n\x00"), rule: RuleEncoding, line: 1, column: "field 1", msg: "UTF-16"},
		{name: "NUL in a mapped value", p: p, data: []byte(testHeader + "V1,ARR,2021-06-01T08:00:00Z,a\x00b,D1,1\n"), reason: ReasonBadValue, line: 2, column: "Step", msg: "NUL"},
		{name: "NUL in an unmapped value", p: p, data: []byte(testHeader + "V1,ARR,2021-06-01T08:00:00Z,a,D1,\x00\n"), reason: ReasonBadValue, line: 2, column: "Age", msg: "NUL"},
		{name: "jsonl escaped NUL", p: jsonl, data: []byte(`{"Visit":"V1","Code":"ARR","When":"2021-06-01T08:00:00Z","Step":"a\u0000"}` + "\n"), reason: ReasonBadValue, line: 1, column: "Step", field: FieldActivity, msg: "NUL"},
		{name: "too many columns", p: p, data: []byte(testHeader[:len(testHeader)-1] + strings.Repeat(",x", DefaultMaxColumns) + "\n"), rule: RuleTooManyColumns, line: 1, msg: "4096 columns"},
		{name: "csv line too long", p: p, data: []byte(testHeader + "V1,ARR,2021-06-01T08:00:00Z,a,D1,1\nV1,ARR,2021-06-01T08:00:00Z," + strings.Repeat("a", DefaultMaxLineBytes) + ",D1,1\n"), rule: RuleLineTooLong, line: 3, msg: "1 MiB"},
		{name: "jsonl line too long", p: jsonl, data: []byte(`{"Visit":"V1","Code":"ARR","When":"2021-06-01T08:00:00Z"}` + "\n" + `{"Visit":"` + strings.Repeat("a", DefaultMaxLineBytes) + `"}` + "\n"), rule: RuleLineTooLong, line: 2, msg: "1 MiB"},
		{name: "jsonl blank", p: jsonl, data: []byte("\n \n"), rule: RuleEmptyFile},
	}
	for _, tc := range tests {
		in := tc.in
		if in == nil {
			in = bytes.NewReader(tc.data)
		}
		res := readAll(t, in, tc.p)
		if tc.rule != "" {
			if res.ferr == nil {
				t.Errorf("%s: no file error (rejs %v, %d events)", tc.name, res.rejs, len(res.events))
				continue
			}
			fe := res.ferr
			if fe.Rule != tc.rule || fe.Line != tc.line || fe.Column != tc.column || !strings.Contains(fe.Msg, tc.msg) {
				t.Errorf("%s: got %s (line %d, column %q), want rule %s line %d column %q msg containing %q", tc.name, fe, fe.Line, fe.Column, tc.rule, tc.line, tc.column, tc.msg)
			}
			continue
		}
		if res.ferr != nil {
			t.Errorf("%s: file error %v", tc.name, res.ferr)
			continue
		}
		if len(res.rejs) != 1 {
			t.Errorf("%s: %d rejections %v, want 1", tc.name, len(res.rejs), res.rejs)
			continue
		}
		r := res.rejs[0]
		if r.Reason != tc.reason || r.Line != tc.line || r.Column != tc.column || r.Field != tc.field || !strings.Contains(r.Message, tc.msg) {
			t.Errorf("%s: got %s, want reason %s line %d column %q field %q msg containing %q", tc.name, r, tc.reason, tc.line, tc.column, tc.field, tc.msg)
		}
	}
}

// TestReaderRecovers checks that a bad row costs only itself.
func TestReaderRecovers(t *testing.T) {
	p := mustProfile(t, testProfileYAML)
	data := testHeader +
		"V1,ARR,2021-06-01T08:00:00Z,a \"b\",D1,1\n" + // 2: bare quote
		"V1,ARR,2021-06-01T08:00:00Z,a,D1\n" + // 3: too few fields
		"V1,ARR,2021-06-01T08:00:00Z,\"a\"x,D1,1\n" + // 4: junk after a closing quote
		"V2,TRI,2021-06-01T09:00:00Z,b,D2,2\n" // 5: fine
	res := readAll(t, strings.NewReader(data), p)
	if res.ferr != nil {
		t.Fatal(res.ferr)
	}
	var got []string
	for _, r := range res.rejs {
		got = append(got, fmt.Sprintf("%d:%s", r.Line, r.Reason))
	}
	want := []string{"2:malformed_row", "3:field_count", "4:malformed_row"}
	if !slices.Equal(got, want) {
		t.Errorf("rejections %v, want %v", got, want)
	}
	if len(res.events) != 1 || res.events[0].CaseID != "V2" || res.events[0].Line != 5 || res.rows != 4 {
		t.Errorf("events %+v rows %d", res.events, res.rows)
	}
}

// TestReaderQuotedMultiline checks that quoted fields may hold the
// delimiter and, when the profile allows multi-line fields, line breaks;
// Line is where the record starts.
func TestReaderQuotedMultiline(t *testing.T) {
	p := mustProfile(t, "multiline: {max_lines: 3}\n"+testProfileYAML)
	data := testHeader +
		"V1,ARR,2021-06-01T08:00:00Z,\"triage, then\nlab\r\nwork\",D1,1\n" + // lines 2-4
		"\"V,2\",TRI,2021-06-01T09:00:00Z,\"say \"\"hi\"\"\",D2,2\n" + // line 5
		"V3,ARR,bad,x,D3,3\n" // line 6
	res := readAll(t, strings.NewReader(data), p)
	if res.ferr != nil || len(res.events) != 2 || len(res.rejs) != 1 {
		t.Fatalf("ferr %v events %+v rejs %v", res.ferr, res.events, res.rejs)
	}
	if e := res.events[0]; e.Activity != "triage, then\nlab\nwork" || e.Line != 2 {
		t.Errorf("multiline: %+v", e)
	}
	if e := res.events[1]; e.CaseID != "V,2" || e.Activity != `say "hi"` || e.Line != 5 {
		t.Errorf("quoted delimiter: %+v", e)
	}
	if r := res.rejs[0]; r.Line != 6 || r.Reason != ReasonBadTimestamp {
		t.Errorf("line after multiline record: %v", r)
	}
}

// TestReaderStrayQuote: one stray '"' costs its own line only, with or
// without multi-line fields, and every other line is read. Without them
// a quoted field may not span lines at all; with them, a record that does
// not close within its bounds is rejected at its first line and reading
// resumes at the next.
func TestReaderStrayQuote(t *testing.T) {
	row := func(i int) string { return fmt.Sprintf("V%d,ARR,2021-06-01T08:00:00Z,a,D1,%d\n", i, i) }
	var b strings.Builder
	b.WriteString(testHeader) // line 1
	for i := 2; i <= 2000; i++ {
		if i == 1001 {
			b.WriteString("V1001,ARR,2021-06-01T08:00:00Z,\"a,D1,1\n") // the stray quote
			continue
		}
		if i == 1005 {
			// A quoted field that would close the stray one.
			b.WriteString("V1005,ARR,2021-06-01T08:00:00Z,\"b\",D1,1005\n")
			continue
		}
		b.WriteString(row(i))
	}
	data := b.String()
	for _, tc := range []struct{ name, prefix string }{
		{"one line per record", ""},
		{"multi-line, bound by lines", "multiline: {max_lines: 20}\n"},
		{"multi-line, bound by bytes", "multiline: {max_lines: 10000, max_bytes: 2000}\n"},
		{"multi-line, quote left open to the end", "multiline: {max_lines: 10000, max_bytes: 16777216}\n"},
	} {
		res := readAll(t, strings.NewReader(data), mustProfile(t, tc.prefix+testProfileYAML))
		if res.ferr != nil {
			t.Fatalf("%s: %v", tc.name, res.ferr)
		}
		if len(res.rejs) != 1 || res.rejs[0].Line != 1001 || res.rejs[0].Reason != ReasonMalformedRow || len(res.events) != 1998 || res.rows != 1999 {
			t.Errorf("%s: %d events, %d rows, rejections %v; want 1998, 1999 and line 1001 malformed_row", tc.name, len(res.events), res.rows, res.rejs)
		}
		for i, e := range res.events {
			want := int64(i + 2)
			if want >= 1001 {
				want++
			}
			if e.Line != want || e.CaseID != fmt.Sprint("V", want) {
				t.Fatalf("%s: event %d is line %d case %s, want line %d", tc.name, i, e.Line, e.CaseID, want)
			}
		}
	}
}

// TestReaderLineEndings: LF, CRLF and lone CR each end a line, mixed in
// one file too; no ending merges two rows.
func TestReaderLineEndings(t *testing.T) {
	p := mustProfile(t, testProfileYAML)
	rows := []string{"Visit,Code,When,Step,Desk,Age", "V1,ARR,2021-06-01T08:00:00Z,a,D1,1", "V2,ARR,2021-06-01T08:00:00Z,a,D1,1", "V3,ARR,2021-06-01T08:00:00Z,a,D1,1"}
	for name, ends := range map[string][]string{
		"LF": {"\n", "\n", "\n", "\n"}, "CRLF": {"\r\n", "\r\n", "\r\n", ""}, "CR": {"\r", "\r", "\r", "\r"},
		"mixed": {"\r\n", "\r", "\n", "\r\n"}, "CR then LF": {"\r", "\n", "\r", ""},
	} {
		var b strings.Builder
		for i, r := range rows {
			b.WriteString(r + ends[i])
		}
		// A reader that hands out one byte at a time splits every CRLF
		// across reads.
		for _, in := range []io.Reader{strings.NewReader(b.String()), iotest.OneByteReader(strings.NewReader(b.String()))} {
			res := readAll(t, in, p)
			if res.ferr != nil || len(res.rejs) != 0 || len(res.events) != 3 {
				t.Fatalf("%s: ferr %v rejs %v events %d", name, res.ferr, res.rejs, len(res.events))
			}
			for i, e := range res.events {
				if e.Line != int64(i+2) || e.CaseID != fmt.Sprint("V", i+1) || e.Activity != "a" {
					t.Errorf("%s: event %d: %+v", name, i, e)
				}
			}
		}
	}
}

func TestReaderJSONL(t *testing.T) {
	p := mustProfile(t, "format: jsonl\n"+strings.Replace(testProfileYAML, "{column: Code, codes: {ARR: arrival, TRI: start, END: departure}}", "{column: Code, codes: {\"1\": arrival, \"true\": start}}", 1))
	data := `{"Visit": 17, "Code": 1, "When": "2021-06-01T08:00:00Z", "Step": "triage", "zeta": 1, "alpha": {"x": 1}}` + "\n" +
		"\n" +
		`{"Visit": "V2", "Code": true, "When": "2021-06-01T09:00:00+02:00", "Desk": 3.5, "Step": null}` + "\n"
	res := readAll(t, strings.NewReader(data), p)
	if res.ferr != nil || len(res.rejs) != 0 || len(res.events) != 2 {
		t.Fatalf("ferr %v rejs %v events %+v", res.ferr, res.rejs, res.events)
	}
	if e := res.events[0]; e.CaseID != "17" || e.Type != Arrival || e.Activity != "triage" || e.Line != 1 {
		t.Errorf("%+v", e)
	}
	if e := res.events[1]; e.CaseID != "V2" || e.Type != Start || e.ResourceID != "3.5" || e.Activity != "" || e.Line != 3 || !e.OccurredAt.Equal(mustInstant(t, "2021-06-01T07:00:00Z")) {
		t.Errorf("%+v", e)
	}
	if u := res.r.Unmapped(); !slices.Equal(u, []string{"alpha", "zeta"}) {
		t.Errorf("Unmapped %v", u)
	}
	if res.rows != 2 {
		t.Errorf("Rows %d", res.rows)
	}
}

// TestReaderRunawayRecord checks that a line without end (an unclosed
// quote in a multi-line profile, or no line breaks at all) does not make
// the reader hold the rest of a huge file in memory: it stops at the line
// length limit.
func TestReaderRunawayRecord(t *testing.T) {
	for _, y := range []string{testProfileYAML, "multiline: true\n" + testProfileYAML} {
		p := mustProfile(t, y)
		body := io.LimitReader(repeatReader('x'), DefaultMaxLineBytes+(1<<20))
		in := io.MultiReader(strings.NewReader(testHeader+"V1,ARR,2021-06-01T08:00:00Z,\"open\n"), body)
		res := readAll(t, in, p)
		if res.ferr == nil || res.ferr.Rule != RuleLineTooLong || res.ferr.Line != 3 || !strings.Contains(res.ferr.Msg, "1 MiB") {
			t.Fatalf("got %v (rejections %v), want line_too_long at line 3", res.ferr, res.rejs)
		}
	}
}

type repeatReader byte

func (b repeatReader) Read(p []byte) (int, error) {
	for i := range p {
		p[i] = byte(b)
	}
	return len(p), nil
}

// TestReaderPrivacy feeds rows whose case id is a distinctive string and
// that trigger every rejection reason and every file error the reader can
// give, and checks that the raw id never appears in a message.
func TestReaderPrivacy(t *testing.T) {
	const secret = "ZQX-PRIVATE-4242"
	p := mustProfile(t, testProfileYAML)
	// resource_id is an identifier too: its unknown codes must not be quoted.
	coded := mustProfile(t, strings.Replace(testProfileYAML, "resource_id: Desk", "resource_id: {column: Desk, codes: {D1: desk-1}}", 1))
	jsonl := mustProfile(t, "format: jsonl\n"+testProfileYAML)
	row := func(code, when, step, desk string) string {
		return secret + "," + code + "," + when + "," + step + "," + desk + ",1\n"
	}
	csvRows := testHeader +
		row("XYZ", "2021-06-01T08:00:00Z", "a", "D1") + // unknown_code
		row("ARR", "not a time", "a", "D1") + // bad_timestamp
		row("ARR", "2021-03-28 02:30", "a", "D1") + // nonexistent_local
		row("ARR", "2021-10-31 02:30", "a", "D1") + // ambiguous_local
		row("ARR", "", "a", "D1") + // missing_required
		secret + ",ARR,2021-06-01T08:00:00Z,a,D1,1,extra\n" + // field_count
		secret + ",ARR,2021-06-01T08:00:00Z,a \"b\",D1,1\n" + // malformed_row (bare quote)
		"\"" + secret + "\"x,ARR,2021-06-01T08:00:00Z,a,D1,1\n" + // malformed_row (bad quote)
		row("ARR", "2021-06-01T08:00:00Z", "a", secret) // unknown code of an identifier field (coded profile)
	inputs := []struct {
		name string
		p    *Profile
		data []byte
	}{
		{"rejections", p, []byte(csvRows)},
		{"identifier codes", coded, []byte(csvRows)},
		{"jsonl rejections", jsonl, []byte(
			`{"Visit":"` + secret + `","Code":"XYZ","When":"2021-06-01T08:00:00Z"}` + "\n" +
				`{"Visit":"` + secret + `","Code":"ARR","When":"2021-06-01T08:00:00Z","Step":{"id":"` + secret + `"}}` + "\n" +
				`{"Visit":"` + secret + `","Code":"ARR","When":` + "\n" +
				`["` + secret + `"]` + "\n" +
				`{"Visit":{"v":"` + secret + `"}}` + "\n" +
				`{"Visit":"` + secret + "\xff\"}\n")},
		{"headerless file", p, []byte(row("ARR", "2021-06-01T08:00:00Z", "a", "D1"))},
		{"headerless file, other delimiter", p, []byte(strings.ReplaceAll(row("ARR", "2021-06-01T08:00:00Z", "a", "D1"), ",", ";"))},
		{"bad utf-8 in id", p, []byte(testHeader + secret + "\xff,ARR,2021-06-01T08:00:00Z,a,D1,1\n")},
		{"bad utf-8 in headerless id", p, []byte(secret + "\xff,ARR,2021-06-01T08:00:00Z,a,D1,1\n")},
		{"bad quote in headerless id", p, []byte("\"" + secret + "\"x,ARR\n")},
		{"truncated gzip", p, gzipBytes(t, []byte(csvRows))[:60]},
		{"duplicate in headerless", p, []byte(secret + "," + secret + ",2021-06-01T08:00:00Z\n")},
	}
	kinds := map[string]bool{}
	for _, in := range inputs {
		res := readAll(t, bytes.NewReader(in.data), in.p)
		for _, r := range res.rejs {
			kinds[string(r.Reason)] = true
			if strings.Contains(r.Message, secret) || strings.Contains(r.String(), secret) || strings.Contains(r.Text, secret) {
				t.Errorf("%s: rejection leaks the case id: %s", in.name, r)
			}
		}
		if fe := res.ferr; fe != nil {
			kinds[fe.Rule] = true
			if strings.Contains(fe.Error(), secret) || (fe.Err != nil && strings.Contains(fe.Err.Error(), secret)) {
				t.Errorf("%s: file error leaks the case id: %v", in.name, fe)
			}
		}
	}
	for _, k := range []string{
		string(ReasonUnknownCode), string(ReasonBadTimestamp), string(ReasonNonexistentLocal), string(ReasonAmbiguousLocal),
		string(ReasonMissingRequired), string(ReasonFieldCount), string(ReasonMalformedRow), string(ReasonBadValue),
		RuleMissingColumn, RuleEncoding, RuleCompression, RuleSyntax,
	} {
		if !kinds[k] {
			t.Errorf("privacy inputs never triggered %s", k)
		}
	}
}

func TestSepsisLog(t *testing.T) {
	const dir = "../testdata/sepsis/"
	p := mustProfile(t, string(must(os.ReadFile(dir+"profile.yaml"))))
	f, err := os.Open(dir + "sepsis-cases.csv.gz")
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	r, err := NewReader(f, p, ReaderOptions{Name: "sepsis-cases.csv.gz"})
	if err != nil {
		t.Fatal(err)
	}
	var n, rejected int
	var first, last time.Time
	type span struct {
		first, last time.Time
		events      int
	}
	cases := map[string]*span{}
	activities, groups := map[string]bool{}, map[string]bool{}
	for {
		var e Event
		rej, err := r.Next(&e)
		if err == io.EOF {
			break
		}
		if err != nil {
			t.Fatal(err)
		}
		if rej != nil {
			rejected++
			if rejected < 5 {
				t.Errorf("rejection: %s", rej)
			}
			continue
		}
		n++
		if first.IsZero() || e.OccurredAt.Before(first) {
			first = e.OccurredAt
		}
		if e.OccurredAt.After(last) {
			last = e.OccurredAt
		}
		s := cases[e.CaseID]
		if s == nil {
			s = &span{first: e.OccurredAt, last: e.OccurredAt}
			cases[e.CaseID] = s
		}
		s.events++
		if e.OccurredAt.Before(s.first) {
			s.first = e.OccurredAt
		}
		if e.OccurredAt.After(s.last) {
			s.last = e.OccurredAt
		}
		activities[e.Activity] = true
		groups[e.ResourceID] = true
		if e.Site != "sepsis" || e.Type != Complete {
			t.Fatalf("line %d: %+v", e.Line, e)
		}
	}
	// Published figures of the log (its metadata record; testdata/sepsis/README.md).
	if n != 15214 || rejected != 0 {
		t.Errorf("events %d rejected %d, want 15214 and 0 (published: 15214 events)", n, rejected)
	}
	if r.Rows() != 15214 {
		t.Errorf("Rows %d", r.Rows())
	}
	if want := mustInstant(t, "2013-11-07T08:18:29+01:00"); !first.Equal(want) { // published first event
		t.Errorf("first event %v, want %v", first, want)
	}
	if want := mustInstant(t, "2015-06-05T12:25:11+02:00"); !last.Equal(want) { // published last event
		t.Errorf("last event %v, want %v", last, want)
	}
	if len(cases) != 1050 || len(activities) != 16 || len(groups) != 26 { // published: 1050 traces, 16 activities, 26 org:group values
		t.Errorf("cases %d activities %d groups %d, want 1050, 16, 26 (published)", len(cases), len(activities), len(groups))
	}
	minEv, maxEv := 1<<30, 0
	var total time.Duration
	for _, s := range cases {
		minEv, maxEv = min(minEv, s.events), max(maxEv, s.events)
		total += s.last.Sub(s.first)
	}
	if minEv != 3 || maxEv != 185 { // published: events per case min 3, max 185
		t.Errorf("events per case %d..%d, want 3..185 (published)", minEv, maxEv)
	}
	// Published: case durations total 2.582720637E9 s; it holds only when
	// the wall-clock times are read in Europe/Amsterdam with its changes.
	if total != 2582720637*time.Second {
		t.Errorf("total case duration %v s, want 2582720637 s (published)", total.Seconds())
	}
	// The header has 34 columns; the profile maps 5 of them.
	wantUnmapped := []string{"Variant", "Variant index", "Age", "CRP", "Diagnose", "DiagnosticArtAstrup",
		"DiagnosticBlood", "DiagnosticECG", "DiagnosticIC", "DiagnosticLacticAcid", "DiagnosticLiquor",
		"DiagnosticOther", "DiagnosticSputum", "DiagnosticUrinaryCulture", "DiagnosticUrinarySediment",
		"DiagnosticXthorax", "DisfuncOrg", "Hypotensie", "Hypoxie", "InfectionSuspected", "Infusion",
		"LacticAcid", "Leucocytes", "Oligurie", "SIRSCritHeartRate", "SIRSCritLeucos", "SIRSCritTachypnea",
		"SIRSCritTemperature", "SIRSCriteria2OrMore"}
	if got := r.Unmapped(); !slices.Equal(got, wantUnmapped) || len(r.Header()) != 34 {
		t.Errorf("Unmapped (%d) = %v, header %d columns", len(got), got, len(r.Header()))
	}
}

func must[T any](v T, err error) T {
	if err != nil {
		panic(err)
	}
	return v
}

// benchCSV is a generated clinic export of n rows.
func benchCSV(n int) []byte {
	var b bytes.Buffer
	b.WriteString("Visit;Code;When;Step;Desk;Age;Note\n")
	codes := []string{"ARR", "TRI", "END"}
	steps := []string{"registration", "triage", "lab", "imaging", "discharge"}
	t0 := time.Date(2021, 1, 1, 8, 0, 0, 0, time.UTC)
	for i := range n {
		ts := t0.Add(time.Duration(i) * 37 * time.Second)
		fmt.Fprintf(&b, "V%07d;%s;%s;%s;D%02d;%d;some free text\n", i/7, codes[i%3], ts.Format("2006/01/02 15:04:05.000"), steps[i%5], i%26, i%90)
	}
	return b.Bytes()
}

func BenchmarkReaderCSV(b *testing.B) {
	const rows = 200_000
	data := benchCSV(rows)
	p := mustProfile(b, `
delimiter: ";"
timezone: Europe/Amsterdam
local_time: {ambiguous: earlier, nonexistent: later}
fields:
  site: {value: north}
  case_id: Visit
  event_type: {column: Code, codes: {ARR: arrival, TRI: start, END: departure}}
  occurred_at: {column: When, layout: "%Y/%m/%d %H:%M:%S.%f"}
  activity: Step
  resource_id: Desk
`)
	b.SetBytes(int64(len(data)))
	b.ReportAllocs()
	for b.Loop() {
		r, err := NewReader(bytes.NewReader(data), p, ReaderOptions{})
		if err != nil {
			b.Fatal(err)
		}
		var e Event
		n := 0
		for {
			rej, err := r.Next(&e)
			if err == io.EOF {
				break
			}
			if err != nil || rej != nil {
				b.Fatal(err, rej)
			}
			n++
		}
		if n != rows {
			b.Fatalf("%d rows", n)
		}
	}
	b.ReportMetric(float64(b.Elapsed().Nanoseconds())/float64(b.N)/rows, "ns/row")
}

// TestReaderSharedProfile runs readers on one profile at once (run with
// -race): NewReader must not write to the caller's profile.
func TestReaderSharedProfile(t *testing.T) {
	p := mustProfile(t, testProfileYAML)
	hash := p.Hash()
	data := testHeader + "V1,ARR,2021-06-01T08:00:00Z,a,D1,1\n"
	done := make(chan int)
	for range 4 {
		go func() {
			r, err := NewReader(strings.NewReader(data), p, ReaderOptions{})
			n := 0
			if err == nil {
				var e Event
				for {
					rej, err := r.Next(&e)
					if err != nil {
						break
					}
					if rej == nil {
						n++
					}
				}
			}
			done <- n
		}()
	}
	for range 4 {
		if n := <-done; n != 1 {
			t.Errorf("reader got %d events", n)
		}
	}
	if p.Hash() != hash {
		t.Error("NewReader changed the profile")
	}
}

// TestByteOrderMark: a UTF-8 BOM before a quoted CSV header or a JSON
// Lines file is skipped, not read as data.
func TestByteOrderMark(t *testing.T) {
	bom := "\uFEFF"
	csvData := bom + "\"site\",\"case_id\",\"event_type\",\"occurred_at\"\r\n\"s\",\"c1\",\"arrival\",\"2021-01-01T00:00:00Z\"\r\n"
	jsonl := bom + `{"site":"s","case_id":"c1","event_type":"arrival","occurred_at":"2021-01-01T00:00:00Z"}` + "\n"
	jp := DefaultProfile()
	jp.Format = FormatJSONL
	jp.Delimiter, jp.Quote, jp.Multiline = "", "", nil
	for name, c := range map[string]struct {
		data string
		p    *Profile
	}{"quoted csv": {csvData, DefaultProfile()}, "jsonl": {jsonl, jp}} {
		rd, err := NewReader(strings.NewReader(c.data), c.p, ReaderOptions{})
		if err != nil {
			t.Fatalf("%s: %v", name, err)
		}
		var e Event
		rej, err := rd.Next(&e)
		if err != nil || rej != nil || e.CaseID != "c1" || e.Line != 2-map[string]int64{"quoted csv": 0, "jsonl": 1}[name] {
			t.Errorf("%s: rej %v, err %v, event %+v", name, rej, err, e)
		}
	}
}

// TestJSONLDuplicateKey: an object naming a mapped key twice is rejected,
// not read with whichever value came last.
func TestJSONLDuplicateKey(t *testing.T) {
	p := DefaultProfile()
	p.Format = FormatJSONL
	p.Delimiter, p.Quote, p.Multiline = "", "", nil
	data := `{"site":"s","case_id":"a","event_type":"arrival","occurred_at":"2021-01-01T00:00:00Z","case_id":"b"}
{"site":"s","case_id":"c","event_type":"arrival","occurred_at":"2021-01-01T00:00:00Z","note":1,"note":2}
`
	rd, err := NewReader(strings.NewReader(data), p, ReaderOptions{})
	if err != nil {
		t.Fatal(err)
	}
	var e Event
	rej, err := rd.Next(&e)
	if err != nil || rej == nil || rej.Reason != ReasonMalformedRow || rej.Column != "case_id" || rej.Line != 1 {
		t.Errorf("line 1: rej %+v, err %v; want malformed_row at case_id", rej, err)
	}
	// A repeated key that is not mapped does not matter.
	if rej, err := rd.Next(&e); err != nil || rej != nil || e.CaseID != "c" {
		t.Errorf("line 2: rej %+v, err %v, event %+v", rej, err, e)
	}
}

// TestJSONLLoneSurrogate: a lone surrogate escape would decode to U+FFFD
// and collapse distinct identifiers; the row is rejected. A U+FFFD that
// the text spells itself is kept.
func TestJSONLLoneSurrogate(t *testing.T) {
	p := DefaultProfile()
	p.Format = FormatJSONL
	p.Delimiter, p.Quote, p.Multiline = "", "", nil
	data := `{"site":"s","case_id":"A\udc00X","event_type":"arrival","occurred_at":"2021-01-01T00:00:00Z"}
{"site":"s","case_id":"A\ufffdX","event_type":"arrival","occurred_at":"2021-01-01T00:00:00Z"}
`
	rd, err := NewReader(strings.NewReader(data), p, ReaderOptions{})
	if err != nil {
		t.Fatal(err)
	}
	var e Event
	if rej, err := rd.Next(&e); err != nil || rej == nil || rej.Reason != ReasonBadValue || rej.Column != "case_id" {
		t.Errorf("lone surrogate: rej %+v, err %v", rej, err)
	}
	if rej, err := rd.Next(&e); err != nil || rej != nil || e.CaseID != "A\uFFFDX" {
		t.Errorf("spelled U+FFFD: rej %+v, err %v, case %q", rej, err, e.CaseID)
	}
}

// TestReaderUploadLimits: the decompressed size and the row count of a
// file are checked while streaming, with the limit named; a file exactly
// at a limit passes.
func TestReaderUploadLimits(t *testing.T) {
	p := mustProfile(t, testProfileYAML)
	row := "V1,ARR,2021-06-01T08:00:00Z,registration,D1,80\n"
	plain := testHeader + strings.Repeat(row, 10000)
	bomb := gzipBytes(t, []byte(plain)) // about 1% of its plain size
	for _, tc := range []struct {
		name string
		data []byte
		lim  Limits
		rule string
		msg  string
	}{
		{"gzip over max bytes", bomb, Limits{MaxBytes: 64 << 10}, RuleTooManyBytes, "64 KiB after decompression"},
		{"plain over max bytes", []byte(plain), Limits{MaxBytes: 100000}, RuleTooManyBytes, "100000 bytes"},
		{"plain at max bytes", []byte(plain), Limits{MaxBytes: int64(len(plain))}, "", ""},
		{"gzip at max bytes", bomb, Limits{MaxBytes: int64(len(plain))}, "", ""},
		{"over max rows", bomb, Limits{MaxRows: 9999}, RuleTooManyRows, "more than 9999 data rows"},
		{"at max rows", bomb, Limits{MaxRows: 10000}, "", ""},
	} {
		rd, err := NewReader(bytes.NewReader(tc.data), p, ReaderOptions{Limits: tc.lim})
		if err != nil {
			t.Fatal(err)
		}
		var e Event
		var n int
		for {
			_, err = rd.Next(&e)
			if err != nil {
				break
			}
			n++
		}
		if tc.rule == "" {
			if err != io.EOF || n != 10000 {
				t.Errorf("%s: %d rows, then %v", tc.name, n, err)
			}
			continue
		}
		fe, ok := AsFileError(err)
		if !ok || fe.Rule != tc.rule || !strings.Contains(fe.Msg, tc.msg) {
			t.Errorf("%s: got %v, want %s naming %q", tc.name, err, tc.rule, tc.msg)
		}
		if tc.rule == RuleTooManyRows && fe.Line != 10001 {
			t.Errorf("%s: line %d, want 10001", tc.name, fe.Line)
		}
	}
}

// TestRejectionTexts: a rejected row names the offending text of a
// non-identifier field as read (the unknown code, the timestamp and the
// layout expected), never an identifier's value, and not a value that
// holds one of the row's own identifiers (a column slip).
func TestRejectionTexts(t *testing.T) {
	p := mustProfile(t, testProfileYAML)
	layout := mustProfile(t, strings.Replace(testProfileYAML, "occurred_at: When", "occurred_at: {column: When, layout: \"%d.%m.%Y %H:%M\"}", 1))
	coded := mustProfile(t, strings.Replace(testProfileYAML, "resource_id: Desk", "resource_id: {column: Desk, codes: {D1: desk-1}}", 1))
	jsonl := mustProfile(t, "format: jsonl\n"+testProfileYAML)
	jsonlInst := mustProfile(t, "format: jsonl\n"+testProfileYAML+"  instance_id: Inst\n")
	for _, tc := range []struct {
		name         string
		p            *Profile
		data         string
		field        Field
		text         string // "" = none shown
		inMessage    []string
		notInMessage string
	}{
		{"unknown code", p, testHeader + "V-100,XYZ,2021-06-01T08:00:00Z,a,D1,1\n", FieldEventType, "XYZ", []string{`code "XYZ"`}, ""},
		{"bad timestamp", p, testHeader + "V-100,ARR,2021-13-01 08:00,a,D1,1\n", FieldOccurredAt, "2021-13-01 08:00", []string{`"2021-13-01 08:00"`, "RFC 3339"}, ""},
		{"layout", layout, testHeader + "V-100,ARR,2021-06-01T08:00:00Z,a,D1,1\n", FieldOccurredAt, "2021-06-01T08:00:00Z", []string{`"2021-06-01T08:00:00Z" does not match layout "%d.%m.%Y %H:%M"`}, ""},
		{"nonexistent local", p, testHeader + "V-100,ARR,2021-03-28 02:30,a,D1,1\n", FieldOccurredAt, "2021-03-28 02:30", []string{`"2021-03-28 02:30" does not exist in Europe/Amsterdam`}, ""},
		{"row's case id in the time", p, testHeader + "V-100,ARR,V-100,a,D1,1\n", FieldOccurredAt, "", []string{"not shown"}, "V-100"},
		{"row's desk inside the time", p, testHeader + "V-100,ARR,at DESK-7,a,DESK-7,1\n", FieldOccurredAt, "", []string{"not shown"}, "DESK-7"},
		{"short id matched whole only", p, testHeader + "1,ARR,2021-13-01,a,D1,1\n", FieldOccurredAt, "2021-13-01", []string{`"2021-13-01"`}, ""},
		{"identifier code", coded, testHeader + "V-100,ARR,2021-06-01T08:00:00Z,a,D9,1\n", FieldResourceID, "", []string{"the value is not listed"}, "D9"},
		{"json object holding the row's case id", jsonl, `{"Visit":"V-100","Code":"ARR","When":"2021-06-01T08:00:00Z","Step":{"k":"V-100"},"Desk":"D1"}` + "\n", FieldActivity, "", []string{"an object"}, "V-100"},
		{"json object holding the row's instance id (a field read after it)", jsonlInst, `{"Step":{"k":"INST-77"},"Visit":"V-100","Code":"ARR","When":"2021-06-01T08:00:00Z","Inst":"INST-77"}` + "\n", FieldActivity, "", []string{"an object"}, "INST-77"},
		{"json object", jsonl, `{"Visit":"V-100","Code":"ARR","When":"2021-06-01T08:00:00Z","Step":{"k":1}}` + "\n", FieldActivity, `{"k":1}`, []string{"an object"}, ""},
	} {
		res := readAll(t, strings.NewReader(tc.data), tc.p)
		if len(res.rejs) != 1 {
			t.Errorf("%s: %d rejections %v, file error %v", tc.name, len(res.rejs), res.rejs, res.ferr)
			continue
		}
		r := res.rejs[0]
		if r.Field != tc.field || r.Text != tc.text || r.Line == 0 || r.Column == "" {
			t.Errorf("%s: %+v; want field %s, text %q, a line and a column", tc.name, r, tc.field, tc.text)
		}
		for _, w := range tc.inMessage {
			if !strings.Contains(r.Message, w) {
				t.Errorf("%s: message %q lacks %q", tc.name, r.Message, w)
			}
		}
		if tc.notInMessage != "" && (strings.Contains(r.Message, tc.notInMessage) || strings.Contains(r.String(), tc.notInMessage)) {
			t.Errorf("%s: message %q shows %q", tc.name, r.Message, tc.notInMessage)
		}
	}
}

// TestFieldBytesBound: a field's value longer than MaxFieldBytes is free
// text in the wrong column: its row is refused (bad_value) naming the
// length and the bound, quoting a code's text (clipped) but never an
// identifier's; a value of exactly the bound is kept. CSV and JSON Lines
// alike.
func TestFieldBytesBound(t *testing.T) {
	at := "2026-03-02T08:00:00Z"
	long := strings.Repeat("free text ", MaxFieldBytes/10+1)[:MaxFieldBytes+1]
	edge := long[:MaxFieldBytes]
	csvIn := "site,case_id,event_type,occurred_at,activity\n" +
		"north,c1,arrival," + at + "," + edge + "\n" +
		"north,c2,arrival," + at + "," + long + "\n" +
		"north," + long + ",arrival," + at + ",triage\n"
	js := func(caseID, act string) string {
		b, _ := json.Marshal(map[string]string{"site": "north", "case_id": caseID, "event_type": "arrival", "occurred_at": at, "activity": act})
		return string(b) + "\n"
	}
	jsonIn := js("c1", edge) + js("c2", long) + js(long, "triage")
	jsonl := DefaultProfile().clone()
	jsonl.Format, jsonl.Delimiter, jsonl.Quote, jsonl.Multiline = FormatJSONL, "", "", nil
	for _, tc := range []struct {
		name, in string
		p        *Profile
		line     int64 // of the long activity
	}{
		{"csv", csvIn, DefaultProfile(), 3}, // after the header
		{"jsonl", jsonIn, jsonl, 2},
	} {
		res := readAll(t, strings.NewReader(tc.in), tc.p)
		if res.ferr != nil || len(res.events) != 1 || len(res.events[0].Activity) != MaxFieldBytes || len(res.rejs) != 2 {
			t.Fatalf("%s: %d events, %d rejections, file error %v; want the value of %d bytes kept and two rows refused", tc.name, len(res.events), len(res.rejs), res.ferr, MaxFieldBytes)
		}
		act, id := res.rejs[0], res.rejs[1]
		want := fmt.Sprintf("the value is %d bytes, more than the %d a field may hold", MaxFieldBytes+1, MaxFieldBytes)
		if act.Reason != ReasonBadValue || act.Line != tc.line || act.Field != FieldActivity || !strings.Contains(act.Message, want) || act.Text == "" || len(act.Text) >= MaxFieldBytes {
			t.Errorf("%s: activity refusal %+v", tc.name, act)
		}
		if id.Reason != ReasonBadValue || id.Field != FieldCaseID || id.Text != "" || strings.Contains(id.Message, "free text free") {
			t.Errorf("%s: case_id refusal %+v; want no text of an identifier", tc.name, id)
		}
	}
}

// TestRepeatedHeader: two exports joined into one file (the second with
// its byte-order mark and padded names) give one rejected row naming the
// header's line, and every event of both.
func TestRepeatedHeader(t *testing.T) {
	p := mustProfile(t, testProfileYAML)
	row := "V1,ARR,2021-06-01T08:00:00Z,a,D1,1\n"
	data := testHeader + row + row + "\uFEFFVisit, Code ,When,Step,Desk,Age\n" + row
	res := readAll(t, strings.NewReader(data), p)
	if res.ferr != nil || len(res.events) != 3 || len(res.rejs) != 1 {
		t.Fatalf("ferr %v, %d events, rejections %v", res.ferr, len(res.events), res.rejs)
	}
	if r := res.rejs[0]; r.Line != 4 || r.Reason != ReasonMalformedRow || !strings.Contains(r.Message, "repeats the header (line 1)") {
		t.Errorf("rejection %v", r)
	}
	// A row that holds one header name in its first field is data.
	res = readAll(t, strings.NewReader(testHeader+"Visit,ARR,2021-06-01T08:00:00Z,a,D1,1\n"), p)
	if len(res.events) != 1 || len(res.rejs) != 0 {
		t.Errorf("a case named like the column: %d events, rejections %v", len(res.events), res.rejs)
	}
}
