package schema

import (
	"bufio"
	"bytes"
	"encoding/csv"
	"errors"
	"io"
	"strings"
	"testing"
	"time"
)

// Fuzz targets of the reader, the profile parser and the time parser.
// Seeds live in testdata/fuzz/<target>; `go test ./schema` runs them as
// ordinary tests, and `.ci/run` fuzzes each for a while:
//
//	go test ./schema -run '^$' -fuzz '^FuzzCSVReader$' -fuzztime 20s

// fuzzLimits keep one fuzz input cheap.
var fuzzLimits = Limits{MaxLineBytes: 4096, MaxColumns: 64, MaxBytes: 1 << 20, MaxRows: 10000}

// readAllChecked reads every row of data through p and checks what holds
// for any input: the reader ends with io.EOF or a *FileError, every line
// it names lies inside the input, lines of rows never go backwards, and
// accepted events carry the required fields and an instant of the years
// 0001-9999.
func readAllChecked(t *testing.T, data []byte, p *Profile) {
	lines := int64(bytes.Count(data, []byte("\n")) + bytes.Count(data, []byte("\r")) + 1)
	rd, err := NewReader(bytes.NewReader(data), p, ReaderOptions{Limits: fuzzLimits})
	if err != nil {
		if _, ok := AsFileError(err); !ok {
			t.Fatalf("NewReader: %T %v is not a *FileError", err, err)
		}
		return
	}
	last := int64(0)
	for {
		var e Event
		rej, err := rd.Next(&e)
		if err == io.EOF {
			return
		}
		if err != nil {
			fe, ok := AsFileError(err)
			if !ok {
				t.Fatalf("Next: %T %v is not a *FileError", err, err)
			}
			if fe.Line < 0 || (fe.Line > lines && p.Format != FormatJSONL) {
				t.Fatalf("file error at line %d of %d: %v", fe.Line, lines, fe)
			}
			// The error is sticky.
			if _, again := rd.Next(&e); again != err {
				t.Fatalf("a second Next returned %v after %v", again, err)
			}
			return
		}
		line := e.Line
		if rej != nil {
			line = rej.Line
			if rej.Reason == "" || rej.Message == "" {
				t.Fatalf("rejection without reason or message: %+v", rej)
			}
		} else {
			if e.Site == "" || e.CaseID == "" || !e.Type.Valid() {
				t.Fatalf("accepted event misses a required field: %+v", e)
			}
			if e.OccurredAt.Before(minInstant) || e.OccurredAt.After(maxInstant) {
				t.Fatalf("accepted instant %v outside the years 0001-9999", e.OccurredAt)
			}
		}
		// XES events may share a line (a log written without line
		// breaks); other formats give each row lines of its own.
		if line < 1 || line > lines || line < last || line == last && p.Format != FormatXES {
			t.Fatalf("row at line %d after line %d, input has %d lines", line, last, lines)
		}
		last = line
	}
}

func FuzzCSVReader(f *testing.F) {
	f.Add([]byte(testHeader + "V1,ARR,2021-06-01T08:00:00Z,a,D1,1\n"))
	f.Add([]byte(testHeader + "V1,ARR,2021-06-01T08:00:00Z,\"a\nb\",D1,1\r\nV2,TRI,2021-06-01 09:00,\"x\"\"y\",D2,2\r"))
	f.Add([]byte(testHeader + "V1,ARR,2021-06-01T08:00:00Z,\"open,D1,1\nV2,END,2021-06-01T09:00:00Z,b,D1,1\n"))
	f.Add([]byte("site,case_id,event_type,occurred_at\ns,c,arrival,0001-01-01T00:00:00Z\ns,c,departure,9999-12-31T23:59:59.999999Z\n"))
	plain := mustProfile(f, testProfileYAML)
	multi := mustProfile(f, "multiline: {max_lines: 4, max_bytes: 200}\n"+testProfileYAML)
	def := DefaultProfile()
	f.Fuzz(func(t *testing.T, data []byte) {
		for _, p := range []*Profile{plain, multi, def} {
			readAllChecked(t, data, p)
		}
	})
}

func FuzzJSONLReader(f *testing.F) {
	f.Add([]byte(`{"Visit":"V1","Code":"ARR","When":"2021-06-01T08:00:00Z","Step":"a"}` + "\n"))
	f.Add([]byte(`{"Visit":17,"Code":"TRI","When":"2021-06-01T08:00:00+02:00","Desk":3.5}` + "\r\n\n" + `{"Visit":"V2","Visit":"V3"}`))
	f.Add([]byte(`{"Visit":"\ud800","Code":"END","When":"2021-06-01"}` + "\n" + `["x"]` + "\n" + `{"Step":{"a":1}}`))
	p := mustProfile(f, "format: jsonl\n"+testProfileYAML)
	f.Fuzz(func(t *testing.T, data []byte) {
		readAllChecked(t, data, p)
	})
}

// FuzzCSVSplitter compares the record splitter with encoding/csv, an
// independent RFC 4180 reader, on input both should read alike: with
// multi-line fields allowed and no CR (encoding/csv drops a CR before LF
// inside quoted fields; the splitter ends a line at a lone CR). Where
// encoding/csv reads every record without error, the splitter must give
// the same records; where the splitter reads every record, so must
// encoding/csv.
func FuzzCSVSplitter(f *testing.F) {
	f.Add([]byte("a,b,c\n1,\"2,3\",4\n\n\"x\ny\",\"\"\"\",\n"))
	f.Add([]byte("a,\"b\"c\n"))
	f.Add([]byte("\"unclosed\na,b\n"))
	f.Add([]byte(",,\n\"\"\n"))
	f.Fuzz(func(t *testing.T, data []byte) {
		if bytes.IndexByte(data, '\r') >= 0 || len(data) > 8192 {
			return
		}
		cr := csv.NewReader(bytes.NewReader(data))
		cr.FieldsPerRecord = -1
		want, werr := cr.ReadAll()

		sp := &csvSplitter{
			lr:       &lineReader{br: bufioReader(data), max: 1 << 20},
			comma:    ',',
			commaStr: []byte(","),
			maxLines: 1 << 20,
			maxBytes: 1 << 30,
		}
		var got [][]string
		var gerr error
		for {
			rec, _, err := sp.read()
			if err == io.EOF {
				break
			}
			if err != nil {
				var ce *csvError
				if !errors.As(err, &ce) {
					t.Fatalf("splitter: %v", err)
				}
				gerr = err
				break
			}
			got = append(got, append([]string(nil), rec...))
		}
		switch {
		case werr == nil && gerr != nil:
			t.Fatalf("encoding/csv reads %q, the splitter fails: %v", data, gerr)
		case werr != nil && gerr == nil:
			t.Fatalf("the splitter reads %q as %q, encoding/csv fails: %v", data, got, werr)
		case werr == nil:
			if len(got) != len(want) {
				t.Fatalf("%q: %d records, encoding/csv %d", data, len(got), len(want))
			}
			for i := range want {
				if strings.Join(got[i], "\x00") != strings.Join(want[i], "\x00") || len(got[i]) != len(want[i]) {
					t.Fatalf("%q: record %d is %q, encoding/csv %q", data, i, got[i], want[i])
				}
			}
		}
	})
}

func FuzzProfile(f *testing.F) {
	f.Add([]byte(testProfileYAML))
	f.Add([]byte(fullProfile))
	f.Add([]byte(exampleProfileFlow))
	f.Add([]byte("multiline: {max_lines: 3, max_bytes: 100}\n" + testProfileYAML))
	f.Add([]byte("fields: [[[[{a: - - x}]]]]"))
	f.Fuzz(func(t *testing.T, data []byte) {
		p, err := ParseProfile(data)
		if err != nil {
			if !errors.Is(err, ErrInvalidProfile) {
				t.Fatalf("error %v is not ErrInvalidProfile", err)
			}
			return
		}
		// A parsed profile is valid as it stands, hashes stably and
		// reads a file.
		h := p.Hash()
		q := p.clone()
		if err := q.validate(nil); err != nil {
			t.Fatalf("a parsed profile does not validate again: %v", err)
		}
		if q.Hash() != h {
			t.Fatalf("hash changes on validation")
		}
		readAllChecked(t, []byte(testHeader+"V1,ARR,2021-06-01T08:00:00Z,a,D1,1\n"), p)
	})
}

func FuzzParseTime(f *testing.F) {
	for _, s := range []string{"2021-06-01T08:00:00Z", "2021-06-01 08:00:00.123456789+02:00", "0001-01-01T00:00:00Z",
		"9999-12-31T23:59:59.999999Z", "2021-03-28T02:30:00", "2021-10-31 02:30", "2021-06-01", "2021-06-01T08:00:60Z"} {
		f.Add(s, "")
	}
	f.Add("01.06.2021 08:00:00", "%d.%m.%Y %H:%M:%S")
	f.Add("1622534400", "%s")
	f.Add("2021-06-01 08:00:00 +0200", "%Y-%m-%d %H:%M:%S %z")
	ams, err := time.LoadLocation("Europe/Amsterdam")
	if err != nil {
		f.Fatal(err)
	}
	f.Fuzz(func(t *testing.T, s, layout string) {
		if len(layout) > 64 {
			return
		}
		for _, loc := range []*time.Location{time.UTC, ams} {
			for _, pol := range []LocalTimePolicy{{}, {Ambiguous: AmbiguousLater, Nonexistent: NonexistentLater}} {
				at, err := ParseTime(s, layout, loc, pol)
				if err != nil {
					continue
				}
				if at.Location() != time.UTC && at.Location().String() != "UTC" {
					t.Fatalf("%q: %v is not in UTC", s, at)
				}
				if at.Before(minInstant) || at.After(maxInstant) {
					t.Fatalf("%q (%q): %v outside the years 0001-9999", s, layout, at)
				}
				// An accepted instant written as RFC 3339 reads back as itself.
				back, err := ParseTime(at.Format(time.RFC3339Nano), "", nil, LocalTimePolicy{})
				if err != nil || !back.Equal(at) {
					t.Fatalf("%q: %v written as %s reads back as %v, %v", s, at, at.Format(time.RFC3339Nano), back, err)
				}
			}
		}
	})
}

// bufioReader buffers data in small pieces, so lines and CRLFs cross
// buffer boundaries.
func bufioReader(data []byte) *bufio.Reader {
	return bufio.NewReaderSize(bytes.NewReader(data), 16)
}
