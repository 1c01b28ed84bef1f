package schema

import (
	"bufio"
	"bytes"
	"compress/gzip"
	"crypto/sha256"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"slices"
	"strconv"
	"strings"
	"unicode/utf8"
)

// internCap bounds each field's intern table, so a high-cardinality column
// costs no more than a fixed amount of memory.
const internCap = 4096

// internMaxLen is the longest value interned: long values (free text in a
// mapped column) would pin too much memory for too little sharing.
const internMaxLen = 64

// maxUnmappedKeys caps the JSON Lines keys Unmapped reports.
const maxUnmappedKeys = 100

var errTooManyBytes = errors.New("too many bytes")

// ReaderOptions are the settings of NewReader; the zero value is usable.
type ReaderOptions struct {
	Name   string // file name, for messages
	Limits Limits // zero fields take the defaults
}

// Reader streams typed events out of one source file through a profile.
// It holds one record at a time; memory does not grow with the file.
// A Reader is not safe for concurrent use.
type Reader struct {
	p    *Profile
	name string
	lim  Limits
	tp   timeParser
	cols [len(fieldsArray)]column

	src   *sourceReader
	gz    bool
	guard *guardReader

	// CSV/TSV
	csv      *csvSplitter
	header   []string
	trusted  bool // the first row is evidently a header (headerTrusted)
	hdrLine  int64
	unmapped []string

	// JSON Lines
	br       *bufio.Reader
	lineNo   int64
	lineBuf  []byte
	obj      map[string]json.RawMessage
	seenKeys map[string]bool // JSON Lines keys, XES attribute paths

	// XES
	xes *xesState

	vals [len(fieldsArray)]string
	rows int64
	err  error // sticky end: io.EOF or a *FileError

	attrs attrState // the profile's attributes (reader_attrs.go)

	// The current row's source text, for a rejection's RowDigest: its
	// fields (CSV) or its line (JSON Lines, a CSV line that does not
	// parse); an XES event's are its attributes (xesRowDigest). Valid
	// until the next row is read.
	curRec  []string
	curLine []byte
}

// rowDigest is the RowDigest of the current row.
func (rd *Reader) rowDigest() RowDigest {
	if rd.curRec != nil {
		return digestFields(rd.curRec)
	}
	if rd.curLine != nil {
		return sha256.Sum256(rd.curLine)
	}
	if rd.xes != nil {
		return rd.xesRowDigest()
	}
	return RowDigest{}
}

// fieldsArray fixes the number of schema fields at compile time.
var fieldsArray = func() (a [len(fieldTable)]Field) {
	copy(a[:], fieldNames())
	return a
}()

type columnKind uint8

const (
	kindNone columnKind = iota
	kindColumn
	kindConstant
)

// column is one schema field's compiled mapping.
type column struct {
	kind   columnKind
	name   string // source column / key
	idx    int    // CSV index in the header
	value  string // constant
	codes  map[string]string
	def    string
	intern map[string]string
}

// NewReader prepares to read r through profile p (nil means
// DefaultProfile). It detects gzip by its magic bytes and reads through it,
// and for CSV/TSV reads the header and checks that every mapped column is
// present. Problems come back as a *FileError: RuleEmptyFile,
// RuleMissingColumn, RuleDuplicateColumn, RuleEncoding, RuleCompression,
// RuleRead, RuleLineTooLong, RuleTooManyColumns, RuleTooManyBytes, or
// RuleProfile for an invalid hand-built profile.
func NewReader(r io.Reader, p *Profile, opt ReaderOptions) (*Reader, error) {
	if p == nil {
		p = DefaultProfile()
	}
	// Validate a copy: one Profile may serve many concurrent readers.
	p = p.clone()
	if err := p.validate(nil); err != nil {
		return nil, &FileError{Rule: RuleProfile, Msg: err.Error(), Err: err}
	}
	rd := &Reader{p: p, name: opt.Name, lim: opt.Limits.withDefaults(), attrs: newAttrState(p)}
	rd.tp = timeParser{loc: p.Location(), policy: p.LocalTime.normalized()}
	if m, ok := p.Fields[FieldOccurredAt]; ok && m.Layout != "" {
		hasOff, err := layoutInfo(m.Layout)
		if err != nil {
			return nil, &FileError{Rule: RuleProfile, Msg: "occurred_at layout: " + err.Error(), Err: err}
		}
		rd.tp.layout, rd.tp.layoutOffset = m.Layout, hasOff
	}
	for i, f := range fieldsArray {
		m, ok := p.Fields[f]
		c := &rd.cols[i]
		c.idx = -1
		switch {
		case !ok:
			continue
		case m.Value != "":
			c.kind, c.value = kindConstant, m.Value
		default:
			c.kind, c.name, c.codes, c.def = kindColumn, m.Column, m.Codes, m.Default
			switch f {
			case FieldResourceID, FieldActivity, FieldQueue, FieldPriority, FieldChannel, FieldOutcome, FieldSite:
				c.intern = make(map[string]string)
			}
		}
	}

	rd.src = &sourceReader{r: r}
	br := bufio.NewReaderSize(rd.src, 64<<10)
	var in io.Reader = br
	if magic, err := br.Peek(2); err == nil && magic[0] == 0x1f && magic[1] == 0x8b {
		rd.gz = true
		zr, err := gzip.NewReader(br)
		if err != nil {
			return nil, rd.fatal(err, 0)
		}
		in = zr
	} else if err != nil && err != io.EOF {
		return nil, rd.fatal(err, 0)
	}
	// A UTF-8 byte-order mark (spreadsheet exports) is not data.
	bomr := bufio.NewReaderSize(in, 64<<10)
	if b, err := bomr.Peek(3); err == nil && b[0] == 0xEF && b[1] == 0xBB && b[2] == 0xBF {
		bomr.Discard(3)
	}
	in = bomr
	rd.guard = &guardReader{r: in, limit: rd.lim.MaxBytes}

	if p.Format == FormatXES {
		if err := rd.openXES(); err != nil {
			return nil, err
		}
		return rd, nil
	}
	if p.Format == FormatJSONL {
		rd.br = bufio.NewReaderSize(rd.guard, 64<<10)
		if _, err := rd.br.Peek(1); err == io.EOF {
			return nil, rd.fileErr(RuleEmptyFile, 0, "", "the file is empty", nil)
		} else if err != nil {
			return nil, rd.fatal(err, 0)
		}
		rd.obj = make(map[string]json.RawMessage)
		rd.seenKeys = make(map[string]bool)
		return rd, nil
	}
	if err := rd.readHeader(); err != nil {
		return nil, err
	}
	return rd, nil
}

func (rd *Reader) readHeader() error {
	sp := &csvSplitter{
		lr:       &lineReader{br: bufio.NewReaderSize(rd.guard, 64<<10), max: rd.lim.MaxLineBytes},
		commaStr: []byte(rd.p.Delimiter),
	}
	if len(sp.commaStr) == 1 {
		sp.comma = sp.commaStr[0]
	}
	if ml := rd.p.Multiline; ml != nil {
		sp.maxLines, sp.maxBytes = ml.MaxLines, ml.MaxBytes
	}
	rd.csv = sp

	rec, headerLine, err := sp.read()
	if err == io.EOF {
		return rd.fileErr(RuleEmptyFile, 0, "", "the file is empty (no header row)", nil)
	}
	if err != nil {
		var ce *csvError
		if errors.As(err, &ce) {
			return rd.fileErr(RuleSyntax, ce.line, "", "the header row has bad quoting: "+ce.msg, nil)
		}
		return rd.fatal(err, headerLine)
	}
	rd.hdrLine = headerLine
	if len(rec) > rd.lim.MaxColumns {
		return rd.fileErr(RuleTooManyColumns, headerLine, "", fmt.Sprintf("the header has %d fields, over the limit of %d columns per file (max columns)", len(rec), rd.lim.MaxColumns), nil)
	}
	rd.header = make([]string, len(rec))
	for i, h := range rec {
		if !utf8.ValidString(h) {
			return rd.fileErr(RuleEncoding, headerLine, fmt.Sprintf("field %d", i+1), "the header is not valid UTF-8", nil)
		}
		if strings.IndexByte(h, 0) >= 0 {
			return rd.fileErr(RuleEncoding, headerLine, fmt.Sprintf("field %d", i+1), "the header holds a NUL byte; is the file UTF-16, or binary?", nil)
		}
		if i == 0 {
			h = strings.TrimPrefix(h, "\uFEFF") // byte-order mark of spreadsheet exports
		}
		rd.header[i] = strings.TrimSpace(h)
	}
	index := make(map[string]int, len(rd.header))
	for i, h := range rd.header {
		if _, ok := index[h]; !ok {
			index[h] = i
		}
	}
	// Only a first row that holds at least one of the profile's columns,
	// and no cell that reads as data, is trusted to be a header whose cells
	// may be quoted; any other first row may be data holding identifiers.
	rd.trusted = rd.headerTrusted(index)
	seen := make(map[string]int, len(rd.header))
	for i, h := range rd.header {
		if j, dup := seen[h]; dup && h != "" {
			if !rd.trusted {
				return rd.fileErr(RuleDuplicateColumn, int64(headerLine), "", fmt.Sprintf("the first row repeats a cell (fields %d and %d) and holds none of the profile's columns: is the header row missing?", j+1, i+1), nil)
			}
			return rd.fileErr(RuleDuplicateColumn, int64(headerLine), h, fmt.Sprintf("the header names column %q twice (fields %d and %d)", clip(h), j+1, i+1), nil)
		}
		seen[h] = i
	}
	mapped := map[string]bool{}
	for i, f := range fieldsArray {
		c := &rd.cols[i]
		if c.kind != kindColumn {
			continue
		}
		idx, ok := index[c.name]
		if !ok {
			if rd.p.Fields[f].Optional {
				c.kind = kindNone
				continue
			}
			return rd.fileErr(RuleMissingColumn, int64(headerLine), c.name, rd.missingColumnMsg(f, c.name), nil)
		}
		c.idx = idx
		mapped[c.name] = true
	}
	if err := rd.resolveAttributes(index, mapped); err != nil {
		return err
	}
	for _, h := range rd.header {
		if !mapped[h] && h != "" {
			rd.unmapped = append(rd.unmapped, h)
		}
	}
	return nil
}

// missingColumnMsg explains a missing column. It lists the header's column
// names only when the first row is trusted to be a header (see
// headerTrusted): otherwise its cells may be identifier values and only
// the profile's own column names are repeated.
func (rd *Reader) missingColumnMsg(f Field, col string) string {
	if !rd.trusted {
		msg := fmt.Sprintf("field %s needs column %q, which is not in the first row; that row has %d cells and none of the profile's columns", f, clip(col), len(rd.header))
		if len(rd.header) == 1 {
			for _, d := range []string{";", ",", "\t", "|"} {
				if d == rd.p.Delimiter || !strings.Contains(rd.header[0], d) {
					continue
				}
				var found []string
				for part := range strings.SplitSeq(rd.header[0], d) {
					if rd.profileColumn(strings.TrimSpace(part)) {
						found = append(found, fmt.Sprintf("%q", clip(strings.TrimSpace(part))))
					}
				}
				if len(found) > 0 {
					return msg + fmt.Sprintf("; split at %q it would hold the profile's columns %s: is the delimiter right? profile says %q", d, strings.Join(found, ", "), rd.p.Delimiter)
				}
			}
		}
		return msg + fmt.Sprintf(": is the header row missing, or the delimiter wrong? profile says %q", rd.p.Delimiter)
	}
	names := make([]string, 0, min(len(rd.header), 50))
	for i, h := range rd.header {
		if i == 50 {
			names = append(names, fmt.Sprintf("... (%d more)", len(rd.header)-50))
			break
		}
		names = append(names, fmt.Sprintf("%q", clip(h)))
	}
	return fmt.Sprintf("field %s needs column %q, which is not in the header; the header has %d columns: %s", f, clip(col), len(rd.header), strings.Join(names, ", "))
}

// headerTrusted reports whether the first row is evidently a header: it
// holds at least one column the profile names and no cell reads as data.
func (rd *Reader) headerTrusted(index map[string]int) bool {
	if rd.headerLooksLikeData() {
		return false
	}
	for h := range index {
		if rd.profileColumn(h) {
			return true
		}
	}
	return false
}

// profileColumn reports whether the profile maps some field to column h.
func (rd *Reader) profileColumn(h string) bool {
	for i := range rd.cols {
		if rd.cols[i].kind == kindColumn && rd.cols[i].name == h {
			return true
		}
	}
	return false
}

func (rd *Reader) headerLooksLikeData() bool {
	for _, h := range rd.header {
		if cellLooksLikeData(h, &rd.tp) {
			return true
		}
		// A wrong delimiter leaves a whole row in one cell.
		for _, d := range []string{";", ",", "\t", "|"} {
			if strings.Contains(h, d) {
				for part := range strings.SplitSeq(h, d) {
					if cellLooksLikeData(strings.TrimSpace(part), &rd.tp) {
						return true
					}
				}
			}
		}
	}
	return false
}

// cellLooksLikeData reports whether a header cell reads as a timestamp or
// a number, which column names seldom do.
func cellLooksLikeData(h string, tp *timeParser) bool {
	if h == "" {
		return false
	}
	if _, err := tp.parse(h); err != ErrBadTimestamp {
		return true
	}
	if _, _, _, ok := parseAuto(h); ok {
		return true
	}
	numeric, digit := true, false
	for _, c := range h {
		if c >= '0' && c <= '9' {
			digit = true
		} else if c != '.' && c != ',' && c != '-' && c != '+' {
			numeric = false
			break
		}
	}
	return numeric && digit
}

// Next reads the next row. It fills *e and returns (nil, nil) for an
// accepted event; returns (rej, nil) for a rejected row (*e is then
// undefined); (nil, io.EOF) at the end; or (nil, *FileError) when the file
// cannot be read on (RuleNoRows for a header without data rows,
// RuleEncoding, RuleCompression, RuleRead, or a limit of opt.Limits:
// RuleLineTooLong, RuleTooManyBytes, RuleTooManyRows). After io.EOF or a
// *FileError every call returns the same error.
func (rd *Reader) Next(e *Event) (*Rejection, error) {
	if rd.err != nil {
		return nil, rd.err
	}
	var rej *Rejection
	var err error
	switch {
	case rd.csv != nil:
		rej, err = rd.nextCSV(e)
	case rd.xes != nil:
		rej, err = rd.nextXES(e)
	default:
		rej, err = rd.nextJSON(e)
	}
	if err != nil {
		rd.err = err
	}
	if rej != nil {
		rej.Row = rd.rowDigest()
	}
	return rej, err
}

func (rd *Reader) nextCSV(e *Event) (*Rejection, error) {
	rec, line, err := rd.csv.read()
	rd.curRec, rd.curLine = rec, nil
	if err != nil {
		var ce *csvError
		if errors.As(err, &ce) {
			rd.curLine = ce.text
			if ferr := rd.countRow(ce.line); ferr != nil {
				return nil, ferr
			}
			return &Rejection{Line: ce.line, Reason: ReasonMalformedRow, Message: "bad quoting: " + ce.msg}, nil
		}
		if err == io.EOF {
			if rd.rows == 0 {
				return nil, rd.fileErr(RuleNoRows, 0, "", fmt.Sprintf("the file has a header (line %d) but no data rows", rd.hdrLine), nil)
			}
			return nil, io.EOF
		}
		return nil, rd.fatal(err, line)
	}
	if ferr := rd.countRow(line); ferr != nil {
		return nil, ferr
	}
	nul := -1
	for i, v := range rec {
		if !utf8.ValidString(v) {
			return nil, rd.fileErr(RuleEncoding, line, rd.columnName(i), "the value is not valid UTF-8; is the file in another encoding (Latin-1, Windows-1252)?", nil)
		}
		if nul < 0 && strings.IndexByte(v, 0) >= 0 {
			nul = i
		}
	}
	if nul >= 0 {
		return rd.nulRejection(line, rd.columnName(nul), ""), nil
	}
	if len(rec) != len(rd.header) {
		if rd.csv.dropRecord() {
			return &Rejection{Line: line, Reason: ReasonMalformedRow,
				Message: fmt.Sprintf("bad quoting: a quoted field spans lines and the record has %d fields, the header %d (a stray '\"'?); the following lines are read on their own", len(rec), len(rd.header))}, nil
		}
		return &Rejection{Line: line, Reason: ReasonFieldCount,
			Message: fmt.Sprintf("the row has %d fields, the header %d; a stray %q or a missing quote?", len(rec), len(rd.header), rd.p.Delimiter)}, nil
	}
	if f, h := rec[0], rd.header[0]; len(f) >= len(h) && len(f) <= len(h)+8 && rd.repeatsHeader(rec) {
		return &Rejection{Line: line, Reason: ReasonMalformedRow,
			Message: fmt.Sprintf("the row repeats the header (line %d): two exports joined into one file? It holds no event", rd.hdrLine)}, nil
	}
	for i := range rd.cols {
		c := &rd.cols[i]
		if c.kind == kindColumn {
			rd.vals[i] = rec[c.idx]
		}
	}
	rd.attrs.rec, rd.attrs.line = rec, line
	if ferr := rd.undeclaredFreeText(line); ferr != nil {
		return nil, ferr
	}
	return rd.build(e, line)
}

// repeatsHeader reports whether rec holds the header's names again (as
// the header is read: trimmed, a byte-order mark before the first).
func (rd *Reader) repeatsHeader(rec []string) bool {
	for i, f := range rec {
		if i == 0 {
			f = strings.TrimPrefix(f, "\uFEFF")
		}
		if strings.TrimSpace(f) != rd.header[i] {
			return false
		}
	}
	return true
}

// countRow counts one data row and stops the file past Limits.MaxRows.
func (rd *Reader) countRow(line int64) *FileError {
	rd.rows++
	if rd.rows > rd.lim.MaxRows {
		return rd.fileErr(RuleTooManyRows, line, "", fmt.Sprintf("the file has more than %d data rows, the limit per upload (max rows)", rd.lim.MaxRows), nil)
	}
	return nil
}

func (rd *Reader) columnName(i int) string {
	if i < len(rd.header) && rd.header[i] != "" {
		return rd.header[i]
	}
	return fmt.Sprintf("field %d", i+1)
}

// replacementInText reports whether a JSON string literal spells U+FFFD
// itself (as the character or as \ufffd), rather than getting it from a
// lone surrogate escape.
func replacementInText(raw []byte) bool {
	return bytes.ContainsRune(raw, utf8.RuneError) || bytes.Contains(bytes.ToLower(raw), []byte(`\ufffd`))
}

// duplicateMappedKey reports a top-level key of the JSON object b that a
// profile maps and that appears more than once.
func duplicateMappedKey(b []byte, mapped func(string) bool) (string, bool) {
	dec := json.NewDecoder(bytes.NewReader(b))
	if _, err := dec.Token(); err != nil { // the opening brace
		return "", false
	}
	var seen []string
	var skip json.RawMessage
	for dec.More() {
		t, err := dec.Token()
		if err != nil {
			return "", false
		}
		k, _ := t.(string)
		if mapped(k) {
			if slices.Contains(seen, k) {
				return k, true
			}
			seen = append(seen, k)
		}
		if err := dec.Decode(&skip); err != nil {
			return "", false
		}
	}
	return "", false
}

func (rd *Reader) nextJSON(e *Event) (*Rejection, error) {
	for {
		b, err := rd.readLine()
		if err == io.EOF {
			if rd.rows == 0 {
				return nil, rd.fileErr(RuleEmptyFile, 0, "", "the file holds no JSON lines", nil)
			}
			return nil, io.EOF
		}
		if err != nil {
			return nil, err
		}
		rd.lineNo++
		b = bytes.TrimSpace(b)
		if len(b) == 0 {
			continue
		}
		rd.curRec, rd.curLine = nil, b
		line := rd.lineNo
		if ferr := rd.countRow(line); ferr != nil {
			return nil, ferr
		}
		if !utf8.Valid(b) {
			return nil, rd.fileErr(RuleEncoding, line, "", "the line is not valid UTF-8; is the file in another encoding (Latin-1, Windows-1252)?", nil)
		}
		if bytes.IndexByte(b, '\r') >= 0 {
			// JSON Lines separates lines with LF or CRLF (jsonlines.org);
			// a lone CR would hide the lines it joins inside one.
			return &Rejection{Line: line, Reason: ReasonMalformedRow, Message: "the line holds a lone CR; JSON Lines lines end with LF or CRLF"}, nil
		}
		if b[0] != '{' {
			return &Rejection{Line: line, Reason: ReasonMalformedRow, Message: "the line is not a JSON object"}, nil
		}
		clear(rd.obj)
		if err := json.Unmarshal(b, &rd.obj); err != nil {
			msg := "the line is not valid JSON"
			var se *json.SyntaxError
			if errors.As(err, &se) {
				msg += fmt.Sprintf(" (byte %d)", se.Offset)
			}
			return &Rejection{Line: line, Reason: ReasonMalformedRow, Message: msg}, nil
		}
		if k, dup := duplicateMappedKey(b, rd.mappedKey); dup {
			// encoding/json keeps the last of two equal keys silently.
			return &Rejection{Line: line, Column: k, Reason: ReasonMalformedRow, Message: fmt.Sprintf("key %q appears twice in the object", clip(k))}, nil
		}
		if len(rd.seenKeys) < maxUnmappedKeys {
			for k := range rd.obj {
				if len(rd.seenKeys) >= maxUnmappedKeys {
					break
				}
				if !rd.seenKeys[k] && !rd.mappedKey(k) {
					rd.seenKeys[k] = true
				}
			}
		}
		for i := range rd.cols {
			c := &rd.cols[i]
			if c.kind != kindColumn {
				continue
			}
			raw, ok := rd.obj[c.name]
			v := ""
			if ok && len(raw) > 0 {
				switch raw[0] {
				case '"':
					if err := json.Unmarshal(raw, &v); err != nil {
						return &Rejection{Line: line, Column: c.name, Field: fieldsArray[i], Reason: ReasonMalformedRow, Message: "the string does not decode"}, nil
					}
					if strings.ContainsRune(v, utf8.RuneError) && !replacementInText(raw) {
						// encoding/json turns a lone surrogate escape into
						// U+FFFD, so distinct identifiers would collapse.
						return rd.withText(&Rejection{Line: line, Column: c.name, Field: fieldsArray[i], Reason: ReasonBadValue,
							Message: "the string holds an invalid \\u escape (a lone UTF-16 surrogate)"}, string(raw)), nil
					}
				case 'n':
				case '{', '[':
					kind := "an object"
					if raw[0] == '[' {
						kind = "an array"
					}
					return rd.withText(&Rejection{Line: line, Column: c.name, Field: fieldsArray[i], Reason: ReasonBadValue,
						Message: "the value is " + kind + "; want a string, number or boolean"}, string(raw)), nil
				default: // number or boolean: keep its JSON text
					v = string(raw)
				}
			}
			rd.vals[i] = v
		}
		if ferr := rd.undeclaredFreeText(line); ferr != nil {
			return nil, ferr
		}
		return rd.build(e, line)
	}
}

func (rd *Reader) mappedKey(k string) bool {
	for i := range rd.cols {
		if rd.cols[i].kind == kindColumn && rd.cols[i].name == k {
			return true
		}
	}
	return rd.attrs.has(k)
}

// readLine returns the next line without its newline; the slice is valid
// until the next call.
func (rd *Reader) readLine() ([]byte, error) {
	b, err := rd.br.ReadSlice('\n')
	if err == bufio.ErrBufferFull {
		rd.lineBuf = append(rd.lineBuf[:0], b...)
		for err == bufio.ErrBufferFull {
			if len(rd.lineBuf) > rd.lim.MaxLineBytes+1 {
				return nil, rd.lineTooLong(rd.lineNo + 1)
			}
			b, err = rd.br.ReadSlice('\n')
			rd.lineBuf = append(rd.lineBuf, b...)
		}
		b = rd.lineBuf
	}
	if n := len(bytes.TrimRight(b, "\r\n")); n > rd.lim.MaxLineBytes {
		return nil, rd.lineTooLong(rd.lineNo + 1)
	}
	if err == io.EOF && len(b) > 0 {
		err = nil
	}
	if err != nil {
		if err == io.EOF {
			return nil, io.EOF
		}
		return nil, rd.fatal(err, rd.lineNo+1)
	}
	return b, nil
}

// build maps the row's raw values (rd.vals) into *e.
func (rd *Reader) build(e *Event, line int64) (*Rejection, error) {
	*e = Event{Line: line}
	for i := range rd.cols {
		c := &rd.cols[i]
		f := fieldsArray[i]
		var v string
		switch c.kind {
		case kindNone:
			continue
		case kindConstant:
			v = c.value
		case kindColumn:
			v = strings.TrimSpace(rd.vals[i])
			if strings.IndexByte(v, 0) >= 0 {
				return rd.nulRejection(line, c.name, f), nil
			}
			if len(v) > MaxFieldBytes {
				return rd.withText(&Rejection{Line: line, Column: c.name, Field: f, Reason: ReasonBadValue,
					Message: fmt.Sprintf("the value is %d bytes, more than the %d a field may hold (free text mapped to %s?)", len(v), MaxFieldBytes, f)}, v), nil
			}
			if v != "" && c.codes != nil {
				if to, ok := c.codes[v]; ok {
					v = to
				} else if c.def != "" {
					v = c.def
				} else {
					return rd.unknownCode(line, c, f, v, true), nil
				}
			}
		}
		if v == "" {
			if f.Required() {
				return &Rejection{Line: line, Column: c.name, Field: f, Reason: ReasonMissingRequired,
					Message: fmt.Sprintf("required field %s is empty", f)}, nil
			}
			continue
		}
		switch f {
		case FieldOccurredAt:
			t, err := rd.tp.parse(v)
			if err != nil {
				return rd.timeRejection(line, c, v, err), nil
			}
			e.OccurredAt = t
		case FieldEventType:
			t, ok := canonicalEventType(v)
			if !ok {
				return rd.unknownCode(line, c, f, v, false), nil
			}
			e.Type = t
		default:
			if c.intern != nil {
				if s, ok := c.intern[v]; ok {
					v = s
				} else if len(c.intern) < internCap && len(v) <= internMaxLen {
					// Cloned so the table does not pin the whole record.
					v = strings.Clone(v)
					c.intern[v] = v
				}
			}
			e.SetValue(f, v)
		}
	}
	return nil, nil
}

// MaxFieldBytes bounds the value of a schema field: site, queue,
// activity, codes and identifiers are short names, and the catalog keeps
// tables of them by name; a longer value is free text in the wrong column.
const MaxFieldBytes = 4096

// nulRejection refuses a row holding a NUL byte: no field of the schema
// has a use for one, and C-string tools downstream would cut the value.
func (rd *Reader) nulRejection(line int64, col string, f Field) *Rejection {
	return &Rejection{Line: line, Column: col, Field: f, Reason: ReasonBadValue, Message: "the value holds a NUL byte (0x00)"}
}

// canonicalEventType returns the package constant for s, so an event does
// not keep the source record alive through its type.
func canonicalEventType(s string) (EventType, bool) {
	for _, t := range EventTypes {
		if string(t) == s {
			return t, true
		}
	}
	return "", false
}

// shown returns v, clipped, as a rejection may quote it: never for an
// identifier field, nor when v holds a value of one of the row's mapped
// identifier columns (a row whose columns slipped would otherwise show
// its case id in the timestamp's place). Identifier values shorter than
// 4 bytes are matched only whole: "1" in "2026-13-01" says nothing.
func (rd *Reader) shown(f Field, v string) (string, bool) {
	if f == "" || f.Identifier() {
		return "", false
	}
	for i, g := range fieldsArray {
		if !g.Identifier() || rd.cols[i].kind != kindColumn {
			continue
		}
		id := rd.vals[i]
		if rd.csv == nil {
			// A JSON line fills vals in field order and may stop at the
			// value at fault: read the identifiers from the object.
			id = ""
			if raw := rd.obj[rd.cols[i].name]; len(raw) > 0 {
				if json.Unmarshal(raw, &id) != nil {
					id = string(raw)
				}
			}
		}
		id = strings.TrimSpace(id)
		if id != "" && (strings.TrimSpace(v) == id || len(id) >= 4 && strings.Contains(v, id)) {
			return "", false
		}
	}
	return clip(strings.TrimSpace(v)), true
}

// withText sets r.Text to v where it may be shown (see shown).
func (rd *Reader) withText(r *Rejection, v string) *Rejection {
	r.Text, _ = rd.shown(r.Field, v)
	return r
}

// hidden is what a message says in place of a value it may not quote.
const hidden = "the value (not shown: it holds an identifier of the row)"

func (rd *Reader) unknownCode(line int64, c *column, f Field, v string, coded bool) *Rejection {
	r := &Rejection{Line: line, Column: c.name, Field: f, Reason: ReasonUnknownCode}
	what := "the value"
	if txt, ok := rd.shown(f, v); ok {
		what = fmt.Sprintf("code %q", txt)
		r.Text = txt
	} else if !f.Identifier() {
		what = hidden
	}
	switch {
	case coded:
		r.Message = what + " is not listed under codes and the profile gives no default"
	default:
		r.Message = what + " is not an event type (want one of " + eventTypeList() + "); map it under codes"
	}
	return r
}

func (rd *Reader) timeRejection(line int64, c *column, v string, err error) *Rejection {
	r := &Rejection{Line: line, Column: c.name, Field: FieldOccurredAt}
	q := hidden
	if txt, ok := rd.shown(FieldOccurredAt, v); ok {
		r.Text, q = txt, strconv.Quote(txt)
	}
	switch err {
	case ErrNonexistentLocal:
		r.Reason = ReasonNonexistentLocal
		r.Message = fmt.Sprintf("%s does not exist in %s (clocks were set forward); local_time.nonexistent: later would shift it forward", q, rd.p.Timezone)
	case ErrAmbiguousLocal:
		r.Reason = ReasonAmbiguousLocal
		r.Message = fmt.Sprintf("%s occurs twice in %s (clocks were set back); set local_time.ambiguous to earlier or later", q, rd.p.Timezone)
	case ErrTimestampRange:
		r.Reason = ReasonBadTimestamp
		r.Message = fmt.Sprintf("%s lies outside the years 0001-9999", q)
	default:
		r.Reason = ReasonBadTimestamp
		if rd.tp.layout != "" {
			r.Message = fmt.Sprintf("%s does not match layout %q", q, rd.tp.layout)
		} else {
			r.Message = fmt.Sprintf("%s is not an RFC 3339 / ISO 8601 timestamp", q)
		}
	}
	return r
}

// Unmapped returns the source columns present in the file that the profile
// does not map: for CSV/TSV the header's, in header order; for JSON Lines
// the keys seen so far, sorted, at most 100; for XES the attribute paths
// seen so far, likewise.
func (rd *Reader) Unmapped() []string {
	if rd.csv != nil {
		return slices.Clone(rd.unmapped)
	}
	if rd.xes != nil {
		return rd.xesUnmapped()
	}
	out := make([]string, 0, len(rd.seenKeys))
	for k := range rd.seenKeys {
		out = append(out, k)
	}
	slices.Sort(out)
	return out
}

// Rows returns the number of data rows read so far, accepted or rejected.
func (rd *Reader) Rows() int64 { return rd.rows }

// Header returns the CSV/TSV header's column names (trimmed), or nil for
// JSON Lines.
func (rd *Reader) Header() []string { return slices.Clone(rd.header) }

// fileErr builds a FileError; callers that show it prefix the file name.
func (rd *Reader) fileErr(rule string, line int64, col, msg string, err error) *FileError {
	return &FileError{Line: line, Column: col, Rule: rule, Msg: msg, Err: err}
}

func (rd *Reader) lineTooLong(line int64) *FileError {
	return rd.fileErr(RuleLineTooLong, line, "", fmt.Sprintf("the line is longer than %s, the limit per line (max line bytes); is this the right format?", sizeText(int64(rd.lim.MaxLineBytes))), nil)
}

// fatal classifies an error of the byte stream.
func (rd *Reader) fatal(err error, line int64) *FileError {
	switch {
	case errors.Is(err, errLineTooLong):
		return rd.lineTooLong(line)
	case errors.Is(err, errTooManyBytes):
		return rd.fileErr(RuleTooManyBytes, line, "", fmt.Sprintf("the file holds more than %s after decompression, the limit per upload (max bytes)", sizeText(rd.lim.MaxBytes)), err)
	case rd.src.err != nil:
		return rd.fileErr(RuleRead, line, "", "reading the file failed", rd.src.err)
	case rd.gz || errors.Is(err, gzip.ErrHeader) || errors.Is(err, gzip.ErrChecksum):
		return rd.fileErr(RuleCompression, line, "", "the gzip stream is corrupt or truncated", err)
	}
	return rd.fileErr(RuleRead, line, "", "reading the file failed", err)
}

// sourceReader remembers an error of the caller's reader, so that it can be
// told from a decompression error.
type sourceReader struct {
	r   io.Reader
	err error
}

func (s *sourceReader) Read(p []byte) (int, error) {
	n, err := s.r.Read(p)
	if err != nil && err != io.EOF && s.err == nil {
		s.err = err
	}
	return n, err
}

// guardReader stops the stream after limit bytes (decompressed) and makes
// stream errors sticky.
type guardReader struct {
	r     io.Reader
	n     int64
	limit int64
	err   error
}

func (g *guardReader) Read(p []byte) (int, error) {
	if g.err != nil {
		return 0, g.err
	}
	if g.n >= g.limit {
		// At the limit: only the end of the stream may follow.
		var one [1]byte
		n, err := io.ReadFull(g.r, one[:])
		if n == 0 && (err == io.EOF || err == io.ErrUnexpectedEOF) {
			return 0, io.EOF
		}
		if err != nil && n == 0 {
			g.err = err
			return 0, err
		}
		g.err = errTooManyBytes
		return 0, g.err
	}
	if rest := g.limit - g.n; int64(len(p)) > rest {
		p = p[:rest]
	}
	n, err := g.r.Read(p)
	g.n += int64(n)
	if err != nil && err != io.EOF {
		g.err = err
	}
	return n, err
}
