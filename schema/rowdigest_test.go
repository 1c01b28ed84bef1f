package schema

import (
	"crypto/sha256"
	"fmt"
	"strings"
	"testing"
)

// TestRowDigest: a rejected row's digest is the same wherever the row
// stands in a file and whichever file it is in, and differs for rows
// that differ in any column, a column the profile does not map among
// them. A line that does not parse as CSV is identified by its text.
func TestRowDigest(t *testing.T) {
	p := mustProfile(t, "multiline: {max_lines: 3}\n"+testProfileYAML)
	bad := "V9,ARR,not a time,x,D9,40\n"            // bad_timestamp
	badAge := "V9,ARR,not a time,x,D9,41\n"         // the same but for Age (unmapped)
	quoted := "\"V9\",ARR,not a time,\"x\",D9,40\n" // bad's fields, quoted
	short := "V8,ARR,2021-06-01T08:00:00Z,x\n"      // field_count
	stray := "V7,ARR,2021-06-01T08:00:00Z,x\"y,D7,1\n"
	ok := "V1,ARR,2021-06-01T08:00:00Z,a,D1,1\n"
	digests := func(data string) map[int64]RowDigest {
		t.Helper()
		res := readAll(t, strings.NewReader(data), p)
		if res.ferr != nil {
			t.Fatal(res.ferr)
		}
		out := map[int64]RowDigest{}
		for _, r := range res.rejs {
			if r.Row.IsZero() {
				t.Errorf("line %d (%s): no digest", r.Line, r.Reason)
			}
			out[r.Line] = r.Row
		}
		return out
	}
	a := digests(testHeader + bad + ok + short + stray)
	b := digests(testHeader + ok + ok + stray + short + bad + badAge + quoted)
	if len(a) != 3 || len(b) != 5 {
		t.Fatalf("rejections: %d and %d, want 3 and 5", len(a), len(b))
	}
	// The same row in another place of another file: the same digest.
	for _, c := range []struct {
		name   string
		la, lb int64
	}{{"bad_timestamp", 2, 6}, {"field_count", 4, 5}, {"malformed_row", 5, 4}, {"quoted alike", 2, 8}} {
		if a[c.la] != b[c.lb] {
			t.Errorf("%s: line %d of the first file and line %d of the second differ", c.name, c.la, c.lb)
		}
	}
	if b[6] == b[7] {
		t.Error("rows that differ only in an unmapped column have one digest")
	}
	// Independent computation (standard library): a line that does not
	// parse is the SHA-256 of its text.
	if want := RowDigest(sha256.Sum256([]byte(strings.TrimSuffix(stray, "\n")))); a[5] != want {
		t.Error("a malformed line's digest is not the SHA-256 of its text")
	}
	// A quoted field left open reads on (the line's buffer is reused)
	// before the line is rejected alone.
	open := "V6,ARR,2021-06-01T08:00:00Z,\"open,D6,1\n"
	c := digests(testHeader + open + ok + ok + ok)
	if want := RowDigest(sha256.Sum256([]byte(strings.TrimSuffix(open, "\n")))); len(c) != 1 || c[2] != want {
		t.Errorf("a line left open: digests %x, want line 2's text", c)
	}

	// JSON Lines: the line's text.
	pj := mustProfile(t, "format: jsonl\n"+testProfileYAML)
	line := `{"Visit":"V9","Code":"ARR","When":"not a time"}`
	res := readAll(t, strings.NewReader(`{"Visit":"V1","Code":"ARR","When":"2021-06-01T08:00:00Z"}`+"\n"+line+"\n"), pj)
	if res.ferr != nil || len(res.rejs) != 1 {
		t.Fatalf("jsonl: %v %v", res.ferr, res.rejs)
	}
	if res.rejs[0].Row != RowDigest(sha256.Sum256([]byte(line))) {
		t.Error("a JSON line's digest is not the SHA-256 of its text")
	}
}

// TestRowDigestXES: an XES event's digest is its mapped values and its
// own attributes: the same broken event in another file (another line,
// other events around it) has the same digest; one that differs in an
// attribute the profile does not map has another.
func TestRowDigestXES(t *testing.T) {
	p := xesProfile(t)
	bad := `<event><string key="concept:name" value="a"/><string key="note" value="%s"/></event>` // no time: missing_required
	digests := func(doc string) []RowDigest {
		t.Helper()
		_, rejs, _, err := readAllXES(t, []byte(xesDoc(doc)), p, Limits{})
		if err != nil {
			t.Fatal(err)
		}
		var out []RowDigest
		for _, r := range rejs {
			if r.Row.IsZero() {
				t.Errorf("line %d: no digest", r.Line)
			}
			out = append(out, r.Row)
		}
		return out
	}
	a := digests(`<trace><string key="concept:name" value="c1"/>` + fmt.Sprintf(bad, "x") + goodEvent + `</trace>`)
	b := digests(`<trace><string key="concept:name" value="c1"/>` + goodEvent + goodEvent + "\n" + fmt.Sprintf(bad, "x") + fmt.Sprintf(bad, "y") + `</trace>`)
	if len(a) != 1 || len(b) != 2 {
		t.Fatalf("rejections %d and %d, want 1 and 2", len(a), len(b))
	}
	if a[0] != b[0] {
		t.Error("the same event in another file has another digest")
	}
	if b[0] == b[1] {
		t.Error("events that differ in an unmapped attribute have one digest")
	}
}
