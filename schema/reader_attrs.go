package schema

import (
	"encoding/json"
	"fmt"
	"strings"
	"time"
)

// attrState is a Reader's view of the profile's attributes: where each
// one's column is and the raw values of the row just read.
type attrState struct {
	attrs []Attribute
	drop  map[string]bool // the profile's dropped columns
	scan  bool            // refuse free text in columns neither mapped nor dropped
	free  []int           // CSV: header indexes of those columns
	idx   []int           // CSV: header index of each attribute's column
	rec   []string        // CSV: the row just read
	line  int64           // CSV: its line
}

func newAttrState(p *Profile) attrState {
	s := attrState{attrs: p.Attributes, idx: make([]int, len(p.Attributes)), drop: map[string]bool{}, scan: len(p.Attributes) > 0}
	for _, c := range p.Drop {
		s.drop[c] = true
	}
	return s
}

// RuleFreeText refuses a file in which a column the profile neither maps
// nor drops holds free text, when the profile declares attributes: such a
// column must be declared under drop.
const RuleFreeText = "free_text"

// undeclaredFreeText stops the file at the first value of an undeclared
// column that reads as free text (see Attribute.Generalize for the test),
// naming the column and the line, never the value.
func (rd *Reader) undeclaredFreeText(line int64) *FileError {
	if !rd.attrs.scan {
		return nil
	}
	bad := ""
	if rd.csv != nil {
		for _, i := range rd.attrs.free {
			if i < len(rd.attrs.rec) && freeText(rd.attrs.rec[i]) {
				bad = rd.header[i]
				break
			}
		}
	} else {
		for k, raw := range rd.obj {
			if rd.mappedKey(k) || rd.attrs.drop[k] || len(raw) == 0 || raw[0] != '"' {
				continue
			}
			var v string
			if json.Unmarshal(raw, &v) == nil && freeText(v) {
				bad = k
				break
			}
		}
	}
	if bad == "" {
		return nil
	}
	return rd.fileErr(RuleFreeText, line, bad, fmt.Sprintf("column %q holds free text, which is never kept; list it under drop in the profile (it is then dropped) or map it", clip(bad)), nil)
}

// freeText reports whether v reads as free text rather than a code.
func freeText(v string) bool {
	v = strings.TrimSpace(v)
	return len(v) > MaxCodeBytes || strings.ContainsAny(v, "\r\n") || words(v) > 3
}

// has reports whether some attribute reads column k.
func (s *attrState) has(k string) bool {
	for i := range s.attrs {
		if s.attrs[i].Column == k {
			return true
		}
	}
	return false
}

// resolveAttributes finds each attribute's column in the header; a
// missing one stops the file (RuleMissingColumn).
func (rd *Reader) resolveAttributes(index map[string]int, mapped map[string]bool) error {
	for i := range rd.attrs.attrs {
		a := &rd.attrs.attrs[i]
		idx, ok := index[a.Column]
		if !ok {
			return rd.fileErr(RuleMissingColumn, rd.hdrLine, a.Column, "attribute "+a.Name+" needs column \""+clip(a.Column)+"\", which is not in the header", nil)
		}
		rd.attrs.idx[i] = idx
		mapped[a.Column] = true
	}
	for i, h := range rd.header {
		if !mapped[h] && !rd.attrs.drop[h] && h != "" {
			rd.attrs.free = append(rd.attrs.free, i)
		}
	}
	return nil
}

// Attributes returns the generalized values of the profile's attributes
// (Profile.Attributes order; "" is NULL) for the row Next just accepted,
// appended to dst[:0]. Dates are moved by shift before they are
// truncated. A value that is not of its attribute's type gives a
// rejection (bad_value) that names the column but never quotes the value.
func (rd *Reader) Attributes(dst []string, shift time.Duration) ([]string, *Rejection) {
	dst = dst[:0]
	for i := range rd.attrs.attrs {
		a := &rd.attrs.attrs[i]
		raw := ""
		if rd.csv != nil {
			if j := rd.attrs.idx[i]; j < len(rd.attrs.rec) {
				raw = rd.attrs.rec[j]
			}
		} else if b, ok := rd.obj[a.Column]; ok && len(b) > 0 {
			switch b[0] {
			case '"':
				if err := json.Unmarshal(b, &raw); err != nil {
					return dst, rd.attrRejection(rd.lineNo, a.Column, "attribute "+a.Name+": the string does not decode")
				}
			case 'n':
			case '{', '[':
				return dst, rd.attrRejection(rd.lineNo, a.Column, "attribute "+a.Name+": want a string or a number")
			default:
				raw = string(b)
			}
		}
		v, err := a.Generalize(raw, shift)
		if err != nil {
			line := rd.lineNo
			if rd.csv != nil {
				line = rd.attrs.line
			}
			return dst, rd.attrRejection(line, a.Column, err.Error())
		}
		dst = append(dst, v)
	}
	return dst, nil
}

// attrRejection rejects the current row for an attribute's value
// (bad_value), with the row's digest.
func (rd *Reader) attrRejection(line int64, col, msg string) *Rejection {
	return &Rejection{Line: line, Column: col, Reason: ReasonBadValue, Message: msg, Row: rd.rowDigest()}
}
