package export

import (
	"bufio"
	"context"
	"fmt"
	"io"
	"strings"

	"github.com/flowcat-catalog/flowcat/catalog"
	"github.com/flowcat-catalog/flowcat/schema"
)

// WriteCSV writes the events of files that pass f, in the order of Events,
// to w as RFC 4180 CSV: a header row of f's column names, CRLF after every
// record, and a field enclosed in double quotes (inner quotes doubled) when
// it holds a comma, double quote, CR or LF; line breaks inside a field are
// written as they are. occurred_at is RFC 3339 in UTC with microseconds.
// Event attributes follow the schema's columns (exportAttributes), as
// stored: dates YYYY-MM-DD, integers in decimal, null as an empty field.
//
// A value a spreadsheet would take for a formula is neutralised: one that
// begins with =, +, -, @, a tab, a carriage return or a NUL gets a single
// quote in front (OWASP's CSV-injection rule, as OWASP ASVS 5.0
// requirement 1.2.10 states it), so =HYPERLINK(...) reads as text. A
// value that is a plain decimal number, sign included (-2, +0.5, -1e-3),
// is written as it is: a spreadsheet reads it as that number, and it can
// call nothing (common practice), where a quote in front would turn a
// negative reading into text. Readers that want every stored value as it
// is take the Parquet export.
func WriteCSV(ctx context.Context, w io.Writer, src Source, files []catalog.FileEntry, f Filter) (Stats, error) {
	if err := f.Validate(); err != nil {
		return Stats{}, err
	}
	cols := f.columns()
	attrs, err := exportAttributes(files, f)
	if err != nil {
		return Stats{}, err
	}
	bw := bufio.NewWriterSize(w, 64<<10)
	rec := make([]string, len(cols)+len(attrs))
	for i, c := range cols {
		rec[i] = string(c)
	}
	copy(rec[len(cols):], attrNames(attrs))
	writeRecord(bw, rec)
	st, err := Events(ctx, src, files, f, func(e *schema.Event) error {
		for i, c := range cols {
			rec[i] = NeutraliseFormula(e.Value(c))
		}
		for i := range attrs {
			rec[len(cols)+i] = NeutraliseFormula(e.AttrValue(i))
		}
		writeRecord(bw, rec)
		return nil
	})
	if err != nil {
		return st, err
	}
	if err := bw.Flush(); err != nil {
		return st, fmt.Errorf("export: csv: %w", err)
	}
	return st, nil
}

// NeutraliseFormula returns v with a single quote in front when its first
// byte would make a spreadsheet read it as a formula (see WriteCSV).
func NeutraliseFormula(v string) string {
	if v != "" && strings.IndexByte("=+-@\t\r\x00", v[0]) >= 0 && !plainNumber(v) {
		return "'" + v
	}
	return v
}

// plainNumber reports whether v is a decimal number and nothing else: an
// optional sign, digits with an optional fraction (or a fraction alone),
// and an optional exponent; ASCII only, no spaces.
func plainNumber(v string) bool {
	i := 0
	digits := func() int {
		n := 0
		for i < len(v) && v[i] >= '0' && v[i] <= '9' {
			i++
			n++
		}
		return n
	}
	if i < len(v) && (v[i] == '+' || v[i] == '-') {
		i++
	}
	n := digits()
	if i < len(v) && v[i] == '.' {
		i++
		n += digits()
	}
	if n == 0 {
		return false
	}
	if i < len(v) && (v[i] == 'e' || v[i] == 'E') {
		i++
		if i < len(v) && (v[i] == '+' || v[i] == '-') {
			i++
		}
		if digits() == 0 {
			return false
		}
	}
	return i == len(v)
}

// writeRecord writes one RFC 4180 record; bufio.Writer keeps the first
// write error for Flush.
func writeRecord(w *bufio.Writer, rec []string) {
	for i, v := range rec {
		if i > 0 {
			w.WriteByte(',')
		}
		if !strings.ContainsAny(v, ",\"\r\n") {
			w.WriteString(v)
			continue
		}
		w.WriteByte('"')
		for {
			j := strings.IndexByte(v, '"')
			if j < 0 {
				break
			}
			w.WriteString(v[:j+1])
			w.WriteByte('"')
			v = v[j+1:]
		}
		w.WriteString(v)
		w.WriteByte('"')
	}
	w.WriteString("\r\n")
}
