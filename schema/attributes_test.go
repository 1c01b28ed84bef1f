package schema

import (
	"errors"
	"strings"
	"testing"
	"time"
)

// HIPAA Safe Harbor, 45 CFR 164.514(b)(2)(i)(C): "all ages over 89 and
// all elements of dates (including year) indicative of such age, except
// that such ages and elements may be aggregated into a single category of
// age 90 or older". Ages 0-89 may stay; 90 and over are one group.
func TestAgeSafeHarbor(t *testing.T) {
	a := Attribute{Name: "age", Type: TypeAge, Role: RoleQuasi, Band: 5}
	for _, c := range []struct{ in, want string }{
		{"0", "00-04"}, {"4", "00-04"}, {"37", "35-39"}, {"85", "85-89"},
		{"89", "85-89"}, {"89.9", "85-89"}, // not yet over 89 in whole years
		{"90", "90+"}, {"91", "90+"}, {"104", "90+"}, {"150", "90+"},
		{" 42 ", "40-44"}, {"", ""},
	} {
		got, err := a.Generalize(c.in, 0)
		if err != nil || got != c.want {
			t.Errorf("age %q: %q, %v; want %q", c.in, got, err, c.want)
		}
	}
	// Bands that do not divide 90 stop at 89 (the band of 84-95 would
	// otherwise hold ages over 89 apart from 90+).
	a.Band = 12
	for in, want := range map[string]string{"83": "72-83", "84": "84-89", "89": "84-89", "95": "90+"} {
		if got, _ := a.Generalize(in, 0); got != want {
			t.Errorf("band 12, age %s: %q, want %q", in, got, want)
		}
	}
	a.Band = 1
	if got, _ := a.Generalize("7", 0); got != "07" {
		t.Errorf("band 1, age 7: %q", got)
	}
	for _, bad := range []string{"-1", "151", "old", "NaN", "1e400"} {
		_, err := a.Generalize(bad, 0)
		if err == nil {
			t.Errorf("age %q accepted", bad)
		} else if strings.Contains(err.Error(), bad) {
			t.Errorf("the message quotes the raw value: %v", err)
		}
	}
}

// Safe Harbor, 45 CFR 164.514(b)(2)(i)(C): "All elements of dates (except
// year) for dates directly related to an individual": period year keeps
// the year only. Month and week are the coarser-than-day generalizations a
// project may choose under expert determination (164.514(b)(1)).
func TestDatePeriods(t *testing.T) {
	for _, c := range []struct {
		in, period, want string
		shift            time.Duration
	}{
		{"2023-07-19", PeriodYear, "2023-01-01", 0},
		{"2023-12-31", PeriodYear, "2023-01-01", 0},
		{"2023-07-19", PeriodMonth, "2023-07-01", 0},
		{"2023-07-19", PeriodWeek, "2023-07-17", 0}, // a Wednesday; its ISO week starts Monday the 17th
		{"2023-07-17", PeriodWeek, "2023-07-17", 0},
		{"2023-07-23", PeriodWeek, "2023-07-17", 0}, // Sunday ends the ISO week
		{"2021-01-03", PeriodWeek, "2020-12-28", 0}, // ISO week 2020-W53
		{"2023-07-19T23:30:00+02:00", PeriodDay, "2023-07-19", 0},
		{"2023-07-19", PeriodMonth, "2023-08-01", 14 * 24 * time.Hour}, // shifted first, then truncated
	} {
		a := Attribute{Name: "d", Type: TypeDate, Role: RoleQuasi, Period: c.period}
		got, err := a.Generalize(c.in, c.shift)
		if err != nil || got != c.want {
			t.Errorf("%s to %s: %q, %v; want %q", c.in, c.period, got, err, c.want)
		}
	}
	a := Attribute{Name: "d", Type: TypeDate, Period: PeriodYear}
	if got, _ := a.Generalize("1931-05-02", 0); strings.Contains(got, "05") && got != "1931-01-01" {
		t.Errorf("year period kept a month: %q", got)
	}
}

func TestCodeRules(t *testing.T) {
	zip := Attribute{Name: "postcode", Type: TypeCode, Role: RoleQuasi, Keep: 3}
	if got, _ := zip.Generalize("02139", 0); got != "021" {
		t.Errorf("postal code: %q, want 021", got)
	}
	if got, _ := zip.Generalize("12", 0); got != "12" {
		t.Errorf("short code: %q", got)
	}
	// Safe Harbor, 45 CFR 164.514(b)(2)(i)(B): the initial three digits of
	// a ZIP code may stay only where the area they name holds more than
	// 20,000 people; otherwise they become 000. Which prefixes those are
	// comes from the census (the profile lists them); "036" here is only
	// an example value.
	zip.SmallAreas = []string{"036"}
	for in, want := range map[string]string{"03601": "000", "036": "000", "02139": "021", "0360": "000"} {
		if got, _ := zip.Generalize(in, 0); got != want {
			t.Errorf("small areas: %s gave %q, want %q", in, got, want)
		}
	}
	code := Attribute{Name: "diagnosis", Type: TypeCode, Role: RoleSensitive}
	for _, free := range []string{"patient said the pain began after lunch", strings.Repeat("x", 65), "two\nlines"} {
		if _, err := code.Generalize(free, 0); err == nil || strings.Contains(err.Error(), free) {
			t.Errorf("free text %q: %v", free, err)
		}
	}
	if got, err := code.Generalize("J18.9", 0); got != "J18.9" || err != nil {
		t.Errorf("a code: %q %v", got, err)
	}
}

func TestProfileAttributes(t *testing.T) {
	base := "fields:\n  site: {value: A}\n  case_id: id\n  event_type: {value: arrival}\n  occurred_at: ts\n"
	p, err := ParseProfile([]byte(base + `attributes:
  zip: {column: ZIP, role: quasi, type: code, keep: 3}
  age: {column: AGE, role: quasi, type: age}
  admitted: {column: ADM, role: quasi, type: date}
  diagnosis: {column: DX, role: sensitive, type: code}
drop: [NOTES]
time_shift_days: 30
`))
	if err != nil {
		t.Fatal(err)
	}
	var names []string
	for _, a := range p.Attributes {
		names = append(names, a.Name)
	}
	if strings.Join(names, ",") != "admitted,age,diagnosis,zip" {
		t.Errorf("attributes %v, want sorted by name", names)
	}
	if p.Attributes[1].Band != 5 || p.Attributes[0].Period != PeriodMonth {
		t.Errorf("defaults: band %d, period %q", p.Attributes[1].Band, p.Attributes[0].Period)
	}
	if p.TimeShiftDays != 30 || len(p.Drop) != 1 || !p.HasQuasi() {
		t.Errorf("shift %d, drop %v", p.TimeShiftDays, p.Drop)
	}
	for _, c := range []struct{ yaml, key, msg string }{
		{"attributes:\n  notes: {column: N, role: plain, type: text}\n", "attributes.notes.type", "list the column under drop"},
		{"attributes:\n  age: {column: AGE, role: quasi, type: integer}\n", "attributes.age.type", "needs a generalization"},
		{"attributes:\n  d: {column: D, role: quasi, type: date, period: day}\n", "attributes.d.period", "must be generalized"},
		{"attributes:\n  a: {column: id, role: plain, type: code}\n", "attributes.a.column", "already feeds field case_id"},
		{"attributes:\n  a: {column: X, role: secret, type: code}\n", "attributes.a.role", "unknown role"},
		{"attributes:\n  Case: {column: X, role: plain, type: code}\n", "attributes.Case", "attribute name"},
		{"attributes:\n  site: {column: X, role: plain, type: code}\n", "attributes.site", "taken"},
		{"attributes:\n  a: {column: X, role: plain, type: code}\ndrop: [X]\n", "drop", "dropped but feeds attribute a"},
		{"time_shift_days: 0\n", "time_shift_days", "from 1 to 3660"},
		{"attributes:\n  z: {column: Z, role: quasi, type: code, small_areas: [036]}\n", "attributes.z.small_areas", "needs keep"},
		{"attributes:\n  z: {column: Z, role: quasi, type: code, keep: 3, small_areas: [0361]}\n", "attributes.z.small_areas", "prefix of 3"},
	} {
		_, err := ParseProfile([]byte(base + c.yaml))
		var pe *ProfileError
		if !errors.As(err, &pe) || pe.Key != c.key || !strings.Contains(pe.Msg, c.msg) {
			t.Errorf("%q: %v; want %s: ...%s", c.yaml, err, c.key, c.msg)
		}
	}
}

func TestReaderAttributes(t *testing.T) {
	p, err := ParseProfile([]byte(`fields:
  site: {value: A}
  case_id: id
  event_type: {value: arrival}
  occurred_at: ts
attributes:
  age: {column: AGE, role: quasi, type: age, band: 10}
  zip: {column: ZIP, role: quasi, type: code, keep: 3}
drop: [NOTES]
`))
	if err != nil {
		t.Fatal(err)
	}
	src := "id,ts,AGE,ZIP,NOTES\nc1,2024-01-01T10:00:00Z,93,02139,said hello\nc2,2024-01-01T11:00:00Z,,,\nc3,2024-01-01T12:00:00Z,abc,1,\n"
	rd, err := NewReader(strings.NewReader(src), p, ReaderOptions{})
	if err != nil {
		t.Fatal(err)
	}
	if u := rd.Unmapped(); len(u) != 1 || u[0] != "NOTES" {
		t.Errorf("unmapped %v, want NOTES only", u)
	}
	var e Event
	var got []string
	for i := 0; ; i++ {
		rej, err := rd.Next(&e)
		if err != nil {
			break
		}
		if rej != nil {
			t.Fatal(rej)
		}
		vals, rej := rd.Attributes(nil, 0)
		if rej != nil {
			got = append(got, string(rej.Reason)+"@"+rej.Column)
			if strings.Contains(rej.Message, "abc") {
				t.Errorf("the rejection quotes the value: %s", rej.Message)
			}
			continue
		}
		got = append(got, strings.Join(vals, "|"))
	}
	if want := "90+|021,|,bad_value@AGE"; strings.Join(got, ",") != want {
		t.Errorf("got %q, want %q", strings.Join(got, ","), want)
	}
	// JSON Lines: numbers and strings alike.
	p.Format = FormatJSONL
	p.Delimiter, p.Quote, p.Multiline = "", "", nil
	rd, err = NewReader(strings.NewReader(`{"id":"c1","ts":"2024-01-01T10:00:00Z","AGE":47,"ZIP":"10115"}`+"\n"), p, ReaderOptions{})
	if err != nil {
		t.Fatal(err)
	}
	if rej, err := rd.Next(&e); err != nil || rej != nil {
		t.Fatal(rej, err)
	}
	if vals, rej := rd.Attributes(nil, 0); rej != nil || strings.Join(vals, "|") != "40-49|101" {
		t.Errorf("jsonl attributes %v %v", vals, rej)
	}
	// A missing attribute column stops the file by name.
	_, err = NewReader(strings.NewReader("id,ts,AGE\nc1,2024-01-01T10:00:00Z,3\n"), mustCSV(t, p), ReaderOptions{})
	if fe, ok := AsFileError(err); !ok || fe.Rule != RuleMissingColumn || fe.Column != "ZIP" {
		t.Errorf("missing attribute column: %v", err)
	}
}

func mustCSV(t *testing.T, p *Profile) *Profile {
	q := p.clone()
	q.Format, q.Delimiter, q.Quote = FormatCSV, "", ""
	return q
}

// With attributes declared, a column neither mapped nor dropped that
// holds free text refuses the file, naming the column and the line but
// not the text; short codes in such a column pass (and are not kept).
func TestUndeclaredFreeText(t *testing.T) {
	p, err := ParseProfile([]byte("fields:\n  site: {value: A}\n  case_id: id\n  event_type: {value: arrival}\n  occurred_at: ts\nattributes:\n  age: {column: AGE, role: quasi, type: age}\ndrop: [NOTES]\n"))
	if err != nil {
		t.Fatal(err)
	}
	const secret = "she told the nurse about her neighbour"
	for _, c := range []struct {
		src  string
		line int64
		col  string
	}{
		{"id,ts,AGE,NOTES,WARD\nc1,2024-01-01T10:00:00Z,40," + secret + ",W1\nc2,2024-01-01T10:00:00Z,40,x,W2 east wing by the stairs\n", 3, "WARD"},
		{"id,ts,AGE,COMMENT\nc1,2024-01-01T10:00:00Z,40,ok\nc2,2024-01-01T10:00:00Z,40," + secret + "\n", 3, "COMMENT"},
	} {
		rd, err := NewReader(strings.NewReader(c.src), p, ReaderOptions{})
		if err != nil {
			t.Fatal(err)
		}
		var e Event
		for err == nil {
			_, err = rd.Next(&e)
		}
		fe, ok := AsFileError(err)
		if !ok || fe.Rule != RuleFreeText || fe.Line != c.line || fe.Column != c.col || strings.Contains(fe.Error(), "neighbour") || strings.Contains(fe.Error(), "stairs") {
			t.Errorf("%v; want free_text at line %d, column %s, no value quoted", err, c.line, c.col)
		}
	}
	// JSON Lines too.
	q := p.clone()
	q.Format, q.Delimiter, q.Quote, q.Multiline = FormatJSONL, "", "", nil
	rd, err := NewReader(strings.NewReader(`{"id":"c1","ts":"2024-01-01T10:00:00Z","AGE":3,"NOTES":"`+secret+`","memo":"`+secret+`"}`+"\n"), q, ReaderOptions{})
	if err != nil {
		t.Fatal(err)
	}
	var e Event
	_, err = rd.Next(&e)
	if fe, ok := AsFileError(err); !ok || fe.Rule != RuleFreeText || fe.Column != "memo" {
		t.Errorf("jsonl: %v", err)
	}
}
