package schema

import (
	"bufio"
	"encoding/xml"
	"errors"
	"fmt"
	"io"
	"maps"
	"slices"
	"strconv"
	"strings"
)

// XES (IEEE 1849-2016, eXtensible Event Stream) read as a partner export.
//
// The element and attribute types below are taken from memory of the
// standard, not from its text: the root <log> holds <extension>, <global
// scope="trace|event">, <classifier>, log attributes and <trace>s; a
// <trace> holds its attributes, then its <event>s; an <event> holds
// attributes. An attribute is one of <string>, <date> (xs:dateTime),
// <int>, <float>, <boolean>, <id>, each with key and value, or <list>
// (its values in order, optionally wrapped in <values>) or <container>
// (child attributes), each with a key; any attribute may hold child
// attributes. A <global> gives the value an attribute takes where a trace
// or event lacks it.
//
// A profile names an attribute by its path: an event's own attribute by
// its key ("concept:name"), a trace's by "trace/" and its key
// ("trace/concept:name"), the log's by "log/" and its key; a child by its
// parent's path, "/" and its key ("cost:drivers/nurse"), a list's item by
// the list's path, "/" and its position from 0 ("tags/0").

// XES file rules.
const (
	RuleXMLDoctype   = "xml_doctype"   // the file declares a DOCTYPE (and so, perhaps, entities)
	RuleXMLEntity    = "xml_entity"    // an entity reference other than XML's five predefined ones
	RuleXESStructure = "xes_structure" // an element where XES has none, or a missing key
	RuleXESValue     = "xes_value"     // a typed attribute whose value does not read as its type
)

// Limits of the XES reader, besides Limits (MaxLineBytes bounds one XML
// token: a start tag with its attributes, or a text run; MaxColumns bounds
// the attributes of one trace or event, nested ones included).
const (
	// MaxXESDepth bounds the nesting of attributes within attributes.
	MaxXESDepth = 32
	// MaxXESAttrBytes bounds the bytes of the attribute keys and values
	// of one element (the log, a global, a trace, an event) the reader
	// holds: with the trace's and the event's, what one event costs.
	MaxXESAttrBytes = 16 << 20
	// xesLifecycleKey is the standard lifecycle extension's transition;
	// an event without one is taken as "complete" (common practice).
	xesLifecycleKey = "lifecycle:transition"
)

var (
	errTokenTooLong = errors.New("xml token too long")
	errXMLCharset   = errors.New("xml charset")
)

// xesState is the XES side of a Reader.
type xesState struct {
	dec    *xml.Decoder
	budget *tokenBudget

	started   bool // inside <log>
	ended     bool // </log> seen
	inTrace   bool
	traceHasE bool // the trace has had an event: its attributes are complete
	traceLine int64

	logAttrs, traceAttrs, eventAttrs attrSet
	globalTrace, globalEvent         attrSet
}

// attrSet is the attributes of one element (the log, a global, a trace,
// an event) by path, and the bytes of their paths and values, bounded by
// MaxXESAttrBytes.
type attrSet struct {
	m     map[string]string
	bytes int
}

func newAttrSet() attrSet { return attrSet{m: map[string]string{}} }

func (a *attrSet) reset() {
	clear(a.m)
	a.bytes = 0
}

// tokenBudget hands the XML decoder its bytes one at a time and stops one
// token from taking more than max bytes: encoding/xml holds a whole token
// (a start tag and its attributes, a text run) in memory.
type tokenBudget struct {
	br  *bufio.Reader
	n   int
	max int
}

func (b *tokenBudget) ReadByte() (byte, error) {
	if b.n >= b.max {
		return 0, errTokenTooLong
	}
	b.n++
	return b.br.ReadByte()
}

func (b *tokenBudget) Read(p []byte) (int, error) {
	if len(p) == 0 {
		return 0, nil
	}
	c, err := b.ReadByte()
	if err != nil {
		return 0, err
	}
	p[0] = c
	return 1, nil
}

func (rd *Reader) openXES() error {
	x := &xesState{
		budget:      &tokenBudget{br: bufio.NewReaderSize(rd.guard, 64<<10), max: rd.lim.MaxLineBytes},
		logAttrs:    newAttrSet(),
		traceAttrs:  newAttrSet(),
		eventAttrs:  newAttrSet(),
		globalTrace: newAttrSet(),
		globalEvent: newAttrSet(),
	}
	if _, err := x.budget.br.Peek(1); err == io.EOF {
		return rd.fileErr(RuleEmptyFile, 0, "", "the file is empty", nil)
	} else if err != nil {
		return rd.fatal(err, 0)
	}
	x.dec = xml.NewDecoder(x.budget)
	x.dec.Strict = true // XML's five predefined entities only; Entity stays nil
	x.dec.CharsetReader = func(string, io.Reader) (io.Reader, error) { return nil, errXMLCharset }
	rd.xes = x
	rd.seenKeys = make(map[string]bool)
	return nil
}

// token returns the next XML token, a copy safe to keep, and the line the
// decoder stands on after it.
func (rd *Reader) token() (xml.Token, int64, error) {
	x := rd.xes
	x.budget.n = 0
	t, err := x.dec.Token()
	line, _ := x.dec.InputPos()
	if err != nil {
		return nil, int64(line), rd.xmlErr(err, int64(line))
	}
	switch v := t.(type) {
	case xml.Directive:
		return nil, int64(line), rd.fileErr(RuleXMLDoctype, int64(line), "", "the file holds a <!DOCTYPE> or other declaration; XES needs none, and flowcat reads no DTD or entity declarations", nil)
	case xml.CharData:
		if len(strings.TrimSpace(string(v))) > 0 {
			return nil, int64(line), rd.fileErr(RuleXESStructure, int64(line), "", "text outside an attribute's value; XES elements hold no text", nil)
		}
		return nil, int64(line), nil // whitespace: skipped by callers
	case xml.Comment, xml.ProcInst:
		return nil, int64(line), nil
	}
	return xml.CopyToken(t), int64(line), nil
}

// xmlErr turns an error of the XML decoder into a FileError.
func (rd *Reader) xmlErr(err error, line int64) error {
	var se *xml.SyntaxError
	switch {
	case err == io.EOF:
		return io.EOF
	case errors.Is(err, errTokenTooLong):
		return rd.fileErr(RuleLineTooLong, line, "", fmt.Sprintf("an XML tag or text is longer than %s, the limit per token (max line bytes)", sizeText(int64(rd.lim.MaxLineBytes))), nil)
	case errors.Is(err, errXMLCharset):
		return rd.fileErr(RuleEncoding, line, "", "the XML declaration names an encoding other than UTF-8; save the file as UTF-8", nil)
	case errors.As(err, &se):
		if strings.Contains(se.Msg, "entity") {
			return rd.fileErr(RuleXMLEntity, int64(se.Line), "", "an entity reference other than &lt; &gt; &amp; &apos; &quot; or a character reference; flowcat expands no other entity", nil)
		}
		return rd.fileErr(RuleSyntax, int64(se.Line), "", "the file is not well-formed XML: "+se.Msg, nil)
	}
	return rd.fatal(err, line)
}

// nextXES reads up to the next event and maps it.
func (rd *Reader) nextXES(e *Event) (*Rejection, error) {
	x := rd.xes
	for {
		t, line, err := rd.token()
		if err == io.EOF {
			switch {
			case !x.started:
				return nil, rd.fileErr(RuleEmptyFile, line, "", "the file holds no <log> element", nil)
			case !x.ended:
				return nil, rd.fileErr(RuleSyntax, line, "", "the file ends before </log>", nil)
			case rd.rows == 0:
				return nil, rd.fileErr(RuleNoRows, line, "", "the log holds no events", nil)
			}
			return nil, io.EOF
		}
		if err != nil {
			return nil, err
		}
		if t == nil {
			continue
		}
		switch v := t.(type) {
		case xml.StartElement:
			name := v.Name.Local
			switch {
			case x.ended:
				return nil, rd.fileErr(RuleXESStructure, line, "", fmt.Sprintf("element <%s> after </log>", clip(name)), nil)
			case !x.started:
				if name != "log" {
					return nil, rd.fileErr(RuleXESStructure, line, "", fmt.Sprintf("the root element is <%s>; an XES file's is <log>", clip(name)), nil)
				}
				x.started = true
			case !x.inTrace:
				switch name {
				case "trace":
					x.inTrace, x.traceHasE, x.traceLine = true, false, line
					x.traceAttrs.reset()
				case "extension", "classifier":
					if err := rd.skipEmpty(v, line); err != nil {
						return nil, err
					}
				case "global":
					if err := rd.readGlobal(v, line); err != nil {
						return nil, err
					}
				case "event":
					return nil, rd.fileErr(RuleXESStructure, line, "", "an <event> outside a <trace>", nil)
				default:
					if err := rd.readAttr(v, line, "", &x.logAttrs, 0); err != nil {
						return nil, err
					}
				}
			default: // in a trace
				if name == "event" {
					x.traceHasE = true
					if err := rd.readEvent(line); err != nil {
						return nil, err
					}
					if ferr := rd.countRow(line); ferr != nil {
						return nil, ferr
					}
					rd.fillXES()
					rd.curRec, rd.curLine = nil, nil
					return rd.build(e, line)
				}
				if name == "trace" {
					return nil, rd.fileErr(RuleXESStructure, line, "", "a <trace> inside a <trace>", nil)
				}
				if x.traceHasE {
					return nil, rd.fileErr(RuleXESStructure, line, "", fmt.Sprintf("trace attribute <%s> after the trace's first event; XES puts a trace's attributes before its events", clip(name)), nil)
				}
				if err := rd.readAttr(v, line, "", &x.traceAttrs, 0); err != nil {
					return nil, err
				}
			}
		case xml.EndElement:
			switch {
			case x.inTrace:
				x.inTrace = false
			default:
				x.ended = true
			}
		}
	}
}

// skipEmpty reads past an element whose content flowcat does not use
// (<extension>, <classifier>): it may hold nothing but whitespace.
func (rd *Reader) skipEmpty(start xml.StartElement, line int64) error {
	for {
		t, l, err := rd.token()
		if err == io.EOF {
			return rd.fileErr(RuleSyntax, l, "", fmt.Sprintf("the file ends inside <%s>", start.Name.Local), nil)
		}
		if err != nil {
			return err
		}
		switch v := t.(type) {
		case xml.StartElement:
			return rd.fileErr(RuleXESStructure, l, "", fmt.Sprintf("element <%s> inside <%s> (line %d), which holds none", clip(v.Name.Local), start.Name.Local, line), nil)
		case xml.EndElement:
			return nil
		}
	}
}

// readGlobal reads a <global scope="trace|event"> into the defaults.
func (rd *Reader) readGlobal(start xml.StartElement, line int64) error {
	scope := attrValue(start, "scope")
	var into *attrSet
	switch scope {
	case "trace":
		into = &rd.xes.globalTrace
	case "event", "":
		into = &rd.xes.globalEvent // "event" is the default scope
	default:
		return rd.fileErr(RuleXESStructure, line, "", fmt.Sprintf("<global scope=%q>; want trace or event", clip(scope)), nil)
	}
	return rd.readChildren(start, line, "", into, 0)
}

// readEvent reads an <event>'s attributes, its start tag already read.
func (rd *Reader) readEvent(line int64) error {
	rd.xes.eventAttrs.reset()
	return rd.readChildren(xml.StartElement{Name: xml.Name{Local: "event"}}, line, "", &rd.xes.eventAttrs, 0)
}

// readChildren reads the attribute elements inside start up to its end
// tag, under path prefix.
func (rd *Reader) readChildren(start xml.StartElement, line int64, prefix string, into *attrSet, depth int) error {
	n := 0
	for {
		t, l, err := rd.token()
		if err == io.EOF {
			return rd.fileErr(RuleSyntax, l, "", fmt.Sprintf("the file ends inside <%s> (line %d)", clip(start.Name.Local), line), nil)
		}
		if err != nil {
			return err
		}
		switch v := t.(type) {
		case xml.StartElement:
			if v.Name.Local == "values" && start.Name.Local == "list" {
				// IEEE 1849-2016 wraps a list's items in <values>.
				if err := rd.readListItems(v, l, prefix, into, depth, &n); err != nil {
					return err
				}
				continue
			}
			p := prefix
			if start.Name.Local == "list" {
				p += strconv.Itoa(n)
				n++
			}
			if err := rd.readAttr(v, l, p, into, depth); err != nil {
				return err
			}
		case xml.EndElement:
			return nil
		}
	}
}

// readListItems reads the items of a list's <values>, numbering them on
// from *n.
func (rd *Reader) readListItems(start xml.StartElement, line int64, prefix string, into *attrSet, depth int, n *int) error {
	for {
		t, l, err := rd.token()
		if err == io.EOF {
			return rd.fileErr(RuleSyntax, l, "", fmt.Sprintf("the file ends inside <values> (line %d)", line), nil)
		}
		if err != nil {
			return err
		}
		switch v := t.(type) {
		case xml.StartElement:
			if err := rd.readAttr(v, l, prefix+strconv.Itoa(*n), into, depth); err != nil {
				return err
			}
			*n++
		case xml.EndElement:
			return nil
		}
	}
}

// readAttr reads one attribute element (its start tag read) and its
// children into `into`. path, when not empty, replaces the attribute's
// key in its own path (list items are named by position).
func (rd *Reader) readAttr(start xml.StartElement, line int64, path string, into *attrSet, depth int) error {
	typ := start.Name.Local
	switch typ {
	case "string", "date", "int", "float", "boolean", "id", "list", "container":
	case "event", "trace", "log", "global", "extension", "classifier":
		return rd.fileErr(RuleXESStructure, line, "", fmt.Sprintf("element <%s> where an attribute belongs", typ), nil)
	default:
		return rd.fileErr(RuleXESStructure, line, "", fmt.Sprintf("element <%s> is not an XES attribute type (string, date, int, float, boolean, id, list, container)", clip(typ)), nil)
	}
	if depth >= MaxXESDepth {
		return rd.fileErr(RuleXESStructure, line, "", fmt.Sprintf("attributes nest deeper than %d levels (max XES depth)", MaxXESDepth), nil)
	}
	key, hasKey := attrLookup(start, "key")
	if !hasKey || key == "" {
		return rd.fileErr(RuleXESStructure, line, "", fmt.Sprintf("<%s> without a key", typ), nil)
	}
	if strings.ContainsRune(key, 0) {
		return rd.fileErr(RuleXESStructure, line, "", "an attribute key holds a NUL byte", nil)
	}
	if path == "" {
		path = key
	} else if !isListIndex(path) {
		path += key
	}
	if typ != "list" && typ != "container" {
		val, ok := attrLookup(start, "value")
		if !ok {
			return rd.fileErr(RuleXESValue, line, key, fmt.Sprintf("<%s key=%q> without a value", typ, clip(key)), nil)
		}
		if msg := checkXESValue(typ, val); msg != "" {
			return rd.fileErr(RuleXESValue, line, key, fmt.Sprintf("<%s key=%q>: %s", typ, clip(key), msg), nil)
		}
		if len(into.m) >= rd.lim.MaxColumns {
			return rd.fileErr(RuleTooManyColumns, line, "", fmt.Sprintf("a trace or event has more than %d attributes, the limit (max columns)", rd.lim.MaxColumns), nil)
		}
		if into.bytes += len(path) + len(val); into.bytes > MaxXESAttrBytes {
			return rd.fileErr(RuleTooManyBytes, line, "", fmt.Sprintf("a trace or event holds more than %s of attributes, the limit per element (max XES attribute bytes)", sizeText(MaxXESAttrBytes)), nil)
		}
		if _, dup := into.m[path]; dup {
			// Keys are unique among an element's attributes (a list's
			// items are told apart by position); keeping one of two
			// would be a silent choice.
			return rd.fileErr(RuleXESStructure, line, key, fmt.Sprintf("attribute %q appears twice in one trace, event or attribute", clip(path)), nil)
		}
		into.m[path] = val
	}
	return rd.readChildren(start, line, path+"/", into, depth+1)
}

// isListIndex reports whether path ends in a list position ("tags/0"),
// which names the item in place of its key.
func isListIndex(path string) bool {
	i := strings.LastIndexByte(path, '/')
	s := path[i+1:]
	if s == "" {
		return false
	}
	for _, c := range s {
		if c < '0' || c > '9' {
			return false
		}
	}
	return true
}

// checkXESValue checks a typed attribute's value against its type (XML
// Schema's lexical forms, which XES uses); it returns what is wrong or "".
func checkXESValue(typ, v string) string {
	switch typ {
	case "int":
		if _, err := strconv.ParseInt(strings.TrimSpace(v), 10, 64); err != nil {
			return "the value is not a whole number"
		}
	case "float":
		s := strings.TrimSpace(v)
		if s == "INF" || s == "-INF" || s == "NaN" { // xs:double's special values
			return ""
		}
		if _, err := strconv.ParseFloat(s, 64); err != nil || strings.ContainsAny(s, "xXpP_") || strings.EqualFold(s, "inf") || strings.EqualFold(s, "+inf") || strings.EqualFold(s, "infinity") || strings.EqualFold(s, "nan") {
			return "the value is not a number"
		}
	case "boolean":
		switch strings.TrimSpace(v) {
		case "true", "false", "1", "0": // xs:boolean
		default:
			return "the value is not true, false, 1 or 0"
		}
	case "date":
		if _, _, _, ok := parseAuto(strings.TrimSpace(v)); !ok {
			return "the value is not an xs:dateTime (such as 2014-10-22T11:15:41.000+02:00)"
		}
	}
	return ""
}

func attrLookup(s xml.StartElement, name string) (string, bool) {
	for _, a := range s.Attr {
		if a.Name.Local == name && a.Name.Space == "" {
			return a.Value, true
		}
	}
	return "", false
}

func attrValue(s xml.StartElement, name string) string {
	v, _ := attrLookup(s, name)
	return v
}

// fillXES looks each mapped column up among the event's attributes, the
// trace's ("trace/" paths) or the log's ("log/"), then the globals.
func (rd *Reader) fillXES() {
	x := rd.xes
	for i := range rd.cols {
		c := &rd.cols[i]
		if c.kind != kindColumn {
			continue
		}
		var v string
		var ok bool
		switch {
		case strings.HasPrefix(c.name, "trace/"):
			k := c.name[len("trace/"):]
			if v, ok = x.traceAttrs.m[k]; !ok {
				v = x.globalTrace.m[k]
			}
		case strings.HasPrefix(c.name, "log/"):
			v = x.logAttrs.m[c.name[len("log/"):]]
		default:
			if v, ok = x.eventAttrs.m[c.name]; !ok {
				v, ok = x.globalEvent.m[c.name]
			}
			if !ok && c.name == xesLifecycleKey {
				v = "complete"
			}
		}
		rd.vals[i] = v
	}
	if len(rd.seenKeys) < maxUnmappedKeys {
		note := func(prefix string, m map[string]string) {
			for k := range m {
				if len(rd.seenKeys) >= maxUnmappedKeys {
					return
				}
				if k = prefix + k; len(k) <= 200 && !rd.seenKeys[k] && !rd.mappedKey(k) {
					rd.seenKeys[k] = true
				}
			}
		}
		note("", x.eventAttrs.m)
		note("trace/", x.traceAttrs.m)
	}
}

// xesUnmapped lists the attribute paths seen that the profile does not map.
func (rd *Reader) xesUnmapped() []string {
	out := make([]string, 0, len(rd.seenKeys))
	for k := range rd.seenKeys {
		out = append(out, k)
	}
	slices.Sort(out)
	return out
}

// xesRowDigest is the RowDigest of the current event: its mapped values
// (the trace's among them) and its own attributes, sorted by path.
func (rd *Reader) xesRowDigest() RowDigest {
	rec := slices.Clone(rd.vals[:])
	m := rd.xes.eventAttrs.m
	for _, k := range slices.Sorted(maps.Keys(m)) {
		rec = append(rec, k, m[k])
	}
	return digestFields(rec)
}
