package schema

import (
	"bufio"
	"bytes"
	"errors"
	"io"
	"strings"
)

// errLineTooLong stops a physical line longer than the reader's limit.
var errLineTooLong = errors.New("line too long")

// lineReader yields the physical lines of a text stream. A line ends at
// LF, CRLF or a lone CR (classic Mac exports), so no ending merges two
// lines; the last line may lack an ending. Lines longer than max bytes are
// an error, so memory stays bounded whatever the input.
type lineReader struct {
	br   *bufio.Reader
	max  int
	line int64 // number of the last line returned
	buf  []byte

	// pushed back lines (see unread), oldest first
	back []pendingLine
}

type pendingLine struct {
	no   int64
	text []byte
}

// next returns the next line without its ending and its 1-based number.
// The slice is valid until the next call.
func (lr *lineReader) next() ([]byte, int64, error) {
	if len(lr.back) > 0 {
		p := lr.back[0]
		lr.back = lr.back[1:]
		return p.text, p.no, nil
	}
	lr.buf = lr.buf[:0]
	for {
		if lr.br.Buffered() == 0 {
			if _, err := lr.br.Peek(1); err != nil {
				if err == io.EOF && len(lr.buf) > 0 {
					lr.line++
					return lr.buf, lr.line, nil
				}
				return nil, lr.line + 1, err
			}
		}
		b, _ := lr.br.Peek(lr.br.Buffered())
		lf := bytes.IndexByte(b, '\n')
		seg := b
		if lf >= 0 {
			seg = b[:lf]
		}
		end, skip := lf, 1
		if cr := bytes.IndexByte(seg, '\r'); cr >= 0 {
			// A CR ends the line; a CRLF counts once.
			end = cr
			if cr+1 < len(b) && b[cr+1] == '\n' {
				skip = 2
			}
		}
		if end < 0 {
			lr.buf = append(lr.buf, b...)
			lr.br.Discard(len(b))
			if len(lr.buf) > lr.max {
				return nil, lr.line + 1, errLineTooLong
			}
			continue
		}
		lr.buf = append(lr.buf, b[:end]...)
		lr.br.Discard(end + skip)
		if skip == 1 && b[end] == '\r' {
			// The LF of a CRLF may not be buffered yet.
			if nb, err := lr.br.Peek(1); err == nil && nb[0] == '\n' {
				lr.br.Discard(1)
			}
		}
		if len(lr.buf) > lr.max {
			return nil, lr.line + 1, errLineTooLong
		}
		lr.line++
		return lr.buf, lr.line, nil
	}
}

// unread gives lines back to be read again, in order, before any new one.
func (lr *lineReader) unread(ls []pendingLine) {
	lr.back = append(ls, lr.back...)
}

// csvSplitter reads RFC 4180 records (section 2: fields separated by the
// delimiter, a field enclosed in double quotes may hold the delimiter, line
// breaks and doubled double quotes) line by line. A quoted field spans
// lines only when multi-line fields are allowed, and then within a line
// and a byte bound; a record that is malformed, or that does not close
// within the bounds, is rejected at its first line alone and reading
// resumes at the line after it, so one bad quote never swallows other
// lines. Blank lines are skipped, as encoding/csv does.
type csvSplitter struct {
	lr       *lineReader
	comma    byte // ASCII delimiter, or 0 for a multi-byte one
	commaStr []byte
	maxLines int // 0: a record is one line
	maxBytes int

	rec    []byte // field bytes of the current record, unquoted
	ends   []int  // end offset of each field in rec
	held   []pendingLine
	fields []string
	first  []byte // a copy of a record's first line once it reads on
}

// csvError is a record that does not parse: its line and why.
type csvError struct {
	line int64
	msg  string
	text []byte // the line's text, for its RowDigest; valid until the next read
}

func (e *csvError) Error() string { return e.msg }

// read returns the next record's fields and the line it starts on; a
// *csvError for a malformed record (its first line is consumed); io.EOF at
// the end; or the stream's error. The fields are valid until the next call.
func (s *csvSplitter) read() ([]string, int64, error) {
	for {
		line, no, err := s.lr.next()
		if err != nil {
			return nil, no, err
		}
		if len(line) == 0 {
			continue
		}
		fields, perr := s.parse(line, no)
		if perr != nil {
			if _, ok := perr.(*csvError); !ok {
				// The stream failed on a later line of the record.
				return nil, s.lr.line + 1, perr
			}
			return nil, no, perr
		}
		return fields, no, nil
	}
}

// parse splits the record that starts with line (number no), reading on
// through further lines when a quoted field holds a line break and that is
// allowed.
func (s *csvSplitter) parse(line []byte, no int64) ([]string, error) {
	s.rec, s.ends, s.held = s.rec[:0], s.ends[:0], s.held[:0]
	if s.comma != 0 && bytes.IndexByte(line, '"') < 0 {
		// No quote on the line (most lines): the fields are what lies
		// between delimiters, cut from one string without a copy each.
		str := string(line)
		s.fields = s.fields[:0]
		for {
			i := strings.IndexByte(str, s.comma)
			if i < 0 {
				s.fields = append(s.fields, str)
				return s.fields, nil
			}
			s.fields = append(s.fields, str[:i])
			str = str[i+1:]
		}
	}
	size := len(line)
	first := line // valid until the next line is read (see below)
	// fail rejects the first line alone: lines read past it go back.
	fail := func(msg string) error {
		if len(s.held) > 0 {
			s.lr.unread(s.held)
			s.held = nil
		}
		return &csvError{line: no, msg: msg, text: first}
	}
	pos := 0
	for {
		// One field starts at line[pos].
		if pos < len(line) && line[pos] == '"' {
			pos++
			for {
				i := bytes.IndexByte(line[pos:], '"')
				if i < 0 {
					// The quoted field runs past the end of the line.
					s.rec = append(s.rec, line[pos:]...)
					if s.maxLines == 0 {
						return nil, fail(`a quoted field is not closed on its line (a stray '"'? the profile does not allow line breaks in fields: multiline)`)
					}
					if len(s.held)+2 > s.maxLines {
						return nil, fail(`a quoted field is not closed within multiline.max_lines lines (a stray '"'?)`)
					}
					if len(s.held) == 0 {
						// Reading on reuses the line's buffer.
						s.first = append(s.first[:0], first...)
						first = s.first
					}
					next, nno, err := s.lr.next()
					if err != nil {
						if err == io.EOF {
							return nil, fail(`a quoted field is not closed before the end of the file (a stray '"'?)`)
						}
						return nil, err
					}
					size += len(next) + 1
					if size > s.maxBytes {
						s.held = append(s.held, pendingLine{no: nno, text: bytes.Clone(next)})
						return nil, fail(`a quoted field is not closed within multiline.max_bytes bytes (a stray '"'?)`)
					}
					// Lines read past the first are kept, to be read
					// again should the record fail.
					s.held = append(s.held, pendingLine{no: nno, text: bytes.Clone(next)})
					line, pos = s.held[len(s.held)-1].text, 0
					s.rec = append(s.rec, '\n')
					continue
				}
				s.rec = append(s.rec, line[pos:pos+i]...)
				pos += i + 1
				if pos < len(line) && line[pos] == '"' {
					s.rec = append(s.rec, '"') // a doubled quote
					pos++
					continue
				}
				break
			}
			// After the closing quote: the delimiter or the end of line.
			s.ends = append(s.ends, len(s.rec))
			if pos == len(line) {
				break
			}
			if !s.isComma(line[pos:]) {
				return nil, fail(`text follows a closing '"' in the same field (a '"' inside a field must be doubled)`)
			}
			pos += len(s.commaStr)
			if pos == len(line) {
				s.ends = append(s.ends, len(s.rec)) // a last, empty field
				break
			}
			continue
		}
		// An unquoted field runs to the next delimiter.
		end := s.indexComma(line[pos:])
		var field []byte
		if end < 0 {
			field = line[pos:]
		} else {
			field = line[pos : pos+end]
		}
		if bytes.IndexByte(field, '"') >= 0 {
			return nil, fail(`a '"' inside an unquoted field (quote the field and double the '"')`)
		}
		s.rec = append(s.rec, field...)
		s.ends = append(s.ends, len(s.rec))
		if end < 0 {
			break
		}
		pos += end + len(s.commaStr)
		if pos == len(line) {
			s.ends = append(s.ends, len(s.rec))
			break
		}
	}
	str := string(s.rec)
	s.fields = s.fields[:0]
	start := 0
	for _, e := range s.ends {
		s.fields = append(s.fields, str[start:e])
		start = e
	}
	return s.fields, nil
}

// dropRecord gives back the lines of the last record past its first, to
// be read again: a record spanning lines that turns out malformed (its
// field count is wrong) costs its first line only.
func (s *csvSplitter) dropRecord() bool {
	if len(s.held) == 0 {
		return false
	}
	s.lr.unread(s.held)
	s.held = nil
	return true
}

func (s *csvSplitter) isComma(b []byte) bool {
	if s.comma != 0 {
		return b[0] == s.comma
	}
	return bytes.HasPrefix(b, s.commaStr)
}

func (s *csvSplitter) indexComma(b []byte) int {
	if s.comma != 0 {
		return bytes.IndexByte(b, s.comma)
	}
	return bytes.Index(b, s.commaStr)
}
