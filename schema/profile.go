package schema

import (
	"crypto/sha256"
	"encoding/hex"
	"encoding/json"
	"errors"
	"fmt"
	"slices"
	"strconv"
	"strings"
	"time"
	"unicode/utf8"

	"github.com/goccy/go-yaml"
	"github.com/goccy/go-yaml/ast"
	"github.com/goccy/go-yaml/lexer"
	"github.com/goccy/go-yaml/parser"
	"github.com/goccy/go-yaml/token"
)

// ErrInvalidProfile is wrapped by every error of ParseProfile and of
// profile validation, so callers can tell a bad profile from a bad file.
var ErrInvalidProfile = errors.New("invalid profile")

// ProfileError says what is wrong with a mapping profile and, where known,
// on which line of its YAML text.
type ProfileError struct {
	Line int    // 1-based YAML line; 0 when not known
	Key  string // dotted key path, e.g. "fields.event_type.codes"
	Msg  string
	// Rule names the rule broken, for the rules callers may branch on
	// (RuleEventQuasi); empty for the others.
	Rule string
}

// Error formats the problem as "profile: line N: key: message".
func (e *ProfileError) Error() string {
	s := "profile"
	if e.Line > 0 {
		s += fmt.Sprintf(": line %d", e.Line)
	}
	if e.Key != "" {
		s += ": " + e.Key
	}
	if e.Rule != "" {
		s += ": " + e.Rule
	}
	return s + ": " + e.Msg
}

// Unwrap makes errors.Is(err, ErrInvalidProfile) hold.
func (e *ProfileError) Unwrap() error { return ErrInvalidProfile }

// Format is the layout of a source file.
type Format string

// Source formats.
const (
	FormatCSV   Format = "csv"   // delimited text with a header row
	FormatTSV   Format = "tsv"   // CSV with a tab delimiter
	FormatJSONL Format = "jsonl" // one JSON object per line
	FormatXES   Format = "xes"   // IEEE 1849-2016 XML event log (xes.go)
)

// Mapping says where one schema field's value comes from.
type Mapping struct {
	Column   string            `json:"column,omitempty"`   // source column (JSON Lines: top-level key)
	Value    string            `json:"value,omitempty"`    // a constant, instead of a column
	Codes    map[string]string `json:"codes,omitempty"`    // source value -> schema value, applied to the trimmed value
	Default  string            `json:"default,omitempty"`  // schema value for codes not in Codes; empty rejects the row
	Layout   string            `json:"layout,omitempty"`   // occurred_at only: strftime-style layout; empty auto-detects
	Optional bool              `json:"optional,omitempty"` // the column may be absent from the file (DefaultProfile only)
	// Stable (event_id only) declares that the partner's event id names the
	// same event in every export: a re-sent event keeps its id, a changed
	// one keeps it too. The catalog then identifies events by site and id.
	Stable bool `json:"stable,omitempty"`
}

// Profile is a partner's mapping of its export onto schema v1: the file
// format, the zone of wall-clock times and where each field comes from.
// Build one with ParseProfile or DefaultProfile; a Profile assembled by
// hand is validated again by NewReader.
type Profile struct {
	Format    Format `json:"format"`
	Delimiter string `json:"delimiter,omitempty"` // CSV/TSV: one character
	Quote     string `json:"quote,omitempty"`     // CSV/TSV: `"` (RFC 4180)
	// Multiline lets a quoted CSV/TSV field hold line breaks (RFC 4180
	// section 2, rule 6), within bounds; nil means every record is one
	// line, so a stray quote costs only its own line.
	Multiline *Multiline        `json:"multiline,omitempty"`
	Timezone  string            `json:"timezone"` // IANA zone name of wall-clock times
	LocalTime LocalTimePolicy   `json:"local_time"`
	Fields    map[Field]Mapping `json:"fields"`
	// Terminal names event types that end a case's presence at its site
	// besides departure and abandon (a contact line's complete, say): the
	// census and Little's law take the case out at the first of them.
	Terminal []EventType `json:"terminal,omitempty"`
	// ResourceCapacity is how many cases one resource may serve at once
	// (0: the quality model's default, 1).
	ResourceCapacity int `json:"resource_capacity,omitempty"`
	// MaxCaseDays is the longest plausible case, first to last event, in
	// days (0: the quality model's default, 30): a hospital whose stays
	// run for months declares more, so that case_too_long counts what it
	// says.
	MaxCaseDays int `json:"max_case_days,omitempty"`
	// Attributes are extra columns kept per case or per event, with their
	// disclosure role and generalization (attributes.go); sorted by name.
	Attributes []Attribute `json:"attributes,omitempty"`
	// Drop lists free-text columns the profile declares and drops.
	Drop []string `json:"drop,omitempty"`
	// TimeShiftDays, when set, moves every event time of a subject by one
	// keyed offset of whole days back, from 0 to TimeShiftDays.
	TimeShiftDays int `json:"time_shift_days,omitempty"`
	// Capacity declares other capacities by queue or resource.
	Capacity *Capacity `json:"capacity,omitempty"`

	loc *time.Location
}

// MaxCaseDaysLimit bounds a profile's max_case_days (a century).
const MaxCaseDaysLimit = 36500

// MaxCase is the profile's longest plausible case (0: the quality model's
// default).
func (p *Profile) MaxCase() time.Duration { return time.Duration(p.MaxCaseDays) * 24 * time.Hour }

// Multiline bounds a record whose quoted fields hold line breaks.
type Multiline struct {
	MaxLines int `json:"max_lines"` // physical lines one record may span (default 50)
	MaxBytes int `json:"max_bytes"` // bytes of one record, line breaks included (default 64 KiB)
}

// Multiline defaults and ceilings.
const (
	DefaultMultilineLines = 50
	DefaultMultilineBytes = 64 << 10
	maxMultilineLines     = 10000
	maxMultilineBytes     = 16 << 20
)

// DefaultProfile returns the profile of a file that already speaks the
// schema: a comma-separated CSV whose header uses the schema field names,
// RFC 3339 timestamps (auto-detected), wall-clock times in UTC, quoted
// fields that may hold line breaks (as flowcat's own CSV export writes
// them) within the default multi-line bounds. Required fields must be
// present as columns; optional ones are used when present.
func DefaultProfile() *Profile {
	p := &Profile{
		Format:    FormatCSV,
		Delimiter: ",",
		Quote:     `"`,
		Multiline: &Multiline{MaxLines: DefaultMultilineLines, MaxBytes: DefaultMultilineBytes},
		Timezone:  "UTC",
		LocalTime: LocalTimePolicy{}.normalized(),
		Fields:    make(map[Field]Mapping, len(Fields)),
		loc:       time.UTC,
	}
	for _, f := range Fields {
		p.Fields[f] = Mapping{Column: string(f), Optional: !f.Required()}
	}
	return p
}

// clone returns a copy of p whose Fields map may be changed; the codes
// maps are shared, read-only.
func (p *Profile) clone() *Profile {
	q := *p
	q.Fields = make(map[Field]Mapping, len(p.Fields))
	for f, m := range p.Fields {
		q.Fields[f] = m
	}
	if p.Multiline != nil {
		ml := *p.Multiline
		q.Multiline = &ml
	}
	q.Attributes = slices.Clone(p.Attributes)
	return &q
}

// Location returns the zone in which wall-clock times are read.
func (p *Profile) Location() *time.Location {
	if p.loc != nil {
		return p.loc
	}
	if loc, err := time.LoadLocation(p.Timezone); err == nil && p.Timezone != "" {
		return loc
	}
	return time.UTC
}

// Hash returns the hex SHA-256 of the profile's canonical JSON form (its
// normalized struct; map keys sorted), so equal profiles hash equal
// whatever the layout of their YAML text.
func (p *Profile) Hash() string {
	b, err := json.Marshal(p)
	if err != nil {
		// A Profile holds only strings, bools and maps of strings.
		panic("schema: profile hash: " + err.Error())
	}
	sum := sha256.Sum256(b)
	return hex.EncodeToString(sum[:])
}

// ProfileLimits bound the YAML text of a profile. A profile is a few
// dozen lines; the bounds keep a hostile one cheap: the YAML parser's
// memory grows with the square of the nesting depth (measured: 8,000
// levels of "- " in 16 KB cost 100 MB). A zero field takes its default.
type ProfileLimits struct {
	MaxBytes int // size of the YAML text (default 256 KiB)
	MaxDepth int // nesting of mappings and sequences (default 16)
}

// Default profile limits; see ProfileLimits.
const (
	DefaultProfileBytes = 256 << 10
	DefaultProfileDepth = 16
)

// ParseProfile reads a YAML mapping profile within the default
// ProfileLimits. It is strict: unknown keys, unknown fields, bad layouts,
// unknown zones and unmapped required fields are errors (a *ProfileError
// naming the YAML line where it can).
func ParseProfile(data []byte) (*Profile, error) {
	return ParseProfileLimits(data, ProfileLimits{})
}

// ParseProfileLimits is ParseProfile within lim. A profile over a limit
// is a *ProfileError whose message names it ("max profile bytes", "max
// profile depth"); the depth is measured on the YAML tokens before the
// text is parsed.
func ParseProfileLimits(data []byte, lim ProfileLimits) (*Profile, error) {
	if lim.MaxBytes <= 0 {
		lim.MaxBytes = DefaultProfileBytes
	}
	if lim.MaxDepth <= 0 {
		lim.MaxDepth = DefaultProfileDepth
	}
	if len(data) > lim.MaxBytes {
		return nil, &ProfileError{Msg: fmt.Sprintf("the profile is %d bytes, over the limit of %s (max profile bytes)", len(data), sizeText(int64(lim.MaxBytes)))}
	}
	if d, ln := yamlDepth(lexer.Tokenize(string(data))); d > lim.MaxDepth {
		return nil, &ProfileError{Line: ln, Msg: fmt.Sprintf("the profile nests deeper than %d levels (max profile depth)", lim.MaxDepth)}
	}
	body, err := profileBody(data)
	if err != nil {
		return nil, err
	}
	p := &Profile{Fields: map[Field]Mapping{}}
	lines := map[string]int{}
	fieldsNode, err := p.parseTop(body, lines)
	if err != nil {
		return nil, err
	}
	if err := p.parseFields(fieldsNode, lines); err != nil {
		return nil, err
	}
	if err := p.validate(lines); err != nil {
		return nil, err
	}
	return p, nil
}

// profileBody parses data as YAML: the body of its one document.
func profileBody(data []byte) (ast.Node, error) {
	file, err := parser.ParseBytes(data, 0)
	if err != nil {
		pe := &ProfileError{Msg: "not valid YAML"}
		var ye yaml.Error
		if errors.As(err, &ye) {
			pe.Msg = "not valid YAML: " + ye.GetMessage()
			if tk := ye.GetToken(); tk != nil && tk.Position != nil {
				pe.Line = tk.Position.Line
			}
		}
		return nil, pe
	}
	var body ast.Node
	for _, d := range file.Docs {
		if d.Body == nil {
			continue
		}
		if body != nil {
			return nil, &ProfileError{Line: line(d.Body), Msg: "a profile is one YAML document"}
		}
		body = d.Body
	}
	if body == nil {
		return nil, &ProfileError{Msg: "the profile is empty"}
	}
	return body, nil
}

// parseTop reads the profile's top-level keys into p, the line of each
// into lines; it returns the fields mapping, which parseFields reads.
func (p *Profile) parseTop(body ast.Node, lines map[string]int) (ast.Node, error) {
	top, err := mapping(body, "")
	if err != nil {
		return nil, err
	}
	var fieldsNode ast.Node
	for _, kv := range top {
		lines[kv.key] = kv.line
		var err error
		switch kv.key {
		case "format":
			s, err := scalar(kv.value, kv.key)
			if err != nil {
				return nil, err
			}
			p.Format = Format(s)
		case "delimiter":
			err = into(&p.Delimiter)(scalar(kv.value, kv.key))
		case "quote":
			err = into(&p.Quote)(scalar(kv.value, kv.key))
		case "multiline":
			err = into(&p.Multiline)(multilineSetting(kv.value, lines))
		case "timezone":
			err = into(&p.Timezone)(scalar(kv.value, kv.key))
		case "local_time":
			err = p.parseLocalTime(kv.value, lines)
		case "fields":
			fieldsNode = kv.value
		case "resource_capacity":
			err = into(&p.ResourceCapacity)(wholeNumber(kv, 1000, "a whole number"))
		case "max_case_days":
			err = into(&p.MaxCaseDays)(wholeNumber(kv, MaxCaseDaysLimit, "a whole number of days"))
		case "attributes":
			err = into(&p.Attributes)(parseAttributes(kv.value, lines))
		case "drop":
			err = into(&p.Drop)(parseColumnList(kv.value, kv.key))
		case "time_shift_days":
			err = into(&p.TimeShiftDays)(wholeNumber(kv, 3660, "a whole number of days"))
		case "capacity":
			err = into(&p.Capacity)(capacitySetting(kv.value, lines))
		case "terminal":
			err = into(&p.Terminal)(terminalTypes(kv.value, kv.key))
		default:
			return nil, &ProfileError{Line: kv.line, Key: kv.key, Msg: "unknown key (want format, delimiter, quote, multiline, timezone, local_time, terminal, resource_capacity, capacity, max_case_days, fields, attributes, drop or time_shift_days)"}
		}
		if err != nil {
			return nil, err
		}
	}
	return fieldsNode, nil
}

// parseLocalTime reads the profile's local_time policies into p.
func (p *Profile) parseLocalTime(node ast.Node, lines map[string]int) error {
	lt, err := mapping(node, "local_time")
	if err != nil {
		return err
	}
	for _, e := range lt {
		lines["local_time."+e.key] = e.line
		s, err := scalar(e.value, "local_time."+e.key)
		if err != nil {
			return err
		}
		switch e.key {
		case "ambiguous":
			p.LocalTime.Ambiguous = AmbiguousPolicy(s)
		case "nonexistent":
			p.LocalTime.Nonexistent = NonexistentPolicy(s)
		default:
			return &ProfileError{Line: e.line, Key: "local_time." + e.key, Msg: "unknown key (want ambiguous or nonexistent)"}
		}
	}
	return nil
}

// parseFields reads the profile's mapping of schema fields into p.
func (p *Profile) parseFields(fieldsNode ast.Node, lines map[string]int) error {
	if fieldsNode == nil {
		return &ProfileError{Key: "fields", Msg: "missing: the profile must map the required fields"}
	}
	fields, err := mapping(fieldsNode, "fields")
	if err != nil {
		return err
	}
	for _, kv := range fields {
		key := "fields." + kv.key
		lines[key] = kv.line
		f := Field(kv.key)
		if !slices.Contains(Fields, f) {
			return &ProfileError{Line: kv.line, Key: key, Msg: "not a schema field (want one of " + fieldList() + ")"}
		}
		m, err := fieldMapping(kv.value, key, lines)
		if err != nil {
			return err
		}
		p.Fields[f] = m
	}
	return nil
}

// validate normalizes p in place (defaults filled in) and checks it, one
// concern after another in a fixed order, so that the first problem
// reported for a profile is always the same one.
// lines maps dotted keys to YAML lines for messages; it may be nil.
func (p *Profile) validate(lines map[string]int) error {
	at := func(key, msg string) error {
		return &ProfileError{Line: lines[key], Key: key, Msg: msg}
	}
	for _, check := range []func(at func(key, msg string) error) error{
		p.validateFormat,
		p.validateTime,
		p.validateFields,
		p.validateIdentifierColumns,
		p.validateRequired,
		p.validateLimits,
		p.validateAttributes,
		p.validateTerminal,
	} {
		if err := check(at); err != nil {
			return err
		}
	}
	return nil
}

// validateFormat checks the file format and the options that go with it,
// filling in the defaults of csv and tsv.
func (p *Profile) validateFormat(at func(key, msg string) error) error {
	if p.Format == "" {
		p.Format = FormatCSV
	}
	switch p.Format {
	case FormatCSV, FormatTSV:
		return p.validateDelimited(at)
	case FormatJSONL, FormatXES:
		if p.Delimiter != "" {
			return at("delimiter", "only for csv and tsv")
		}
		if p.Quote != "" {
			return at("quote", "only for csv and tsv")
		}
		if p.Multiline != nil {
			return at("multiline", "only for csv and tsv (a JSON Lines record is one line, an XES event one element)")
		}
		return nil
	default:
		return at("format", fmt.Sprintf("unknown format %q (want csv, tsv, jsonl or xes)", clip(string(p.Format))))
	}
}

// validateDelimited checks the delimiter, quote and multiline options of
// a csv or tsv profile, filling in their defaults.
func (p *Profile) validateDelimited(at func(key, msg string) error) error {
	if p.Format == FormatTSV {
		if p.Delimiter != "" && p.Delimiter != "\t" && p.Delimiter != `\t` {
			return at("delimiter", "a tsv file is tab-delimited; leave delimiter out or use format: csv")
		}
		p.Delimiter = "\t"
	}
	if p.Delimiter == "" {
		p.Delimiter = ","
	}
	if p.Delimiter == `\t` {
		p.Delimiter = "\t"
	}
	r, size := utf8.DecodeRuneInString(p.Delimiter)
	if size != len(p.Delimiter) || r == utf8.RuneError || r == '"' || r == '\r' || r == '\n' || r == 0xFEFF {
		return at("delimiter", `must be one character other than '"', CR or LF (write "\t" for tab)`)
	}
	if p.Quote == "" {
		p.Quote = `"`
	}
	// Only RFC 4180 quoting: a reader that half-ignores quotes could
	// join rows silently, moving one row's identifier into another's
	// free-text field.
	if p.Quote != `"` {
		return at("quote", `must be '"' (RFC 4180 quoting; a stray quote rejects its row as malformed_row)`)
	}
	if p.Multiline != nil {
		return validateMultiline(p.Multiline, at)
	}
	return nil
}

// validateMultiline checks the bounds of a quoted field spanning lines,
// filling in their defaults.
func validateMultiline(ml *Multiline, at func(key, msg string) error) error {
	if ml.MaxLines == 0 {
		ml.MaxLines = DefaultMultilineLines
	}
	if ml.MaxBytes == 0 {
		ml.MaxBytes = DefaultMultilineBytes
	}
	if ml.MaxLines < 2 || ml.MaxLines > maxMultilineLines {
		return at("multiline.max_lines", fmt.Sprintf("must be 2 to %d", maxMultilineLines))
	}
	if ml.MaxBytes < 1 || ml.MaxBytes > maxMultilineBytes {
		return at("multiline.max_bytes", fmt.Sprintf("must be 1 to %d", maxMultilineBytes))
	}
	return nil
}

// validateTime checks the time zone and the rules for local times that
// are ambiguous or do not exist, filling in their defaults.
func (p *Profile) validateTime(at func(key, msg string) error) error {
	if p.Timezone == "" {
		p.Timezone = "UTC"
	}
	loc, err := time.LoadLocation(p.Timezone)
	if err != nil || p.Timezone == "Local" {
		return at("timezone", fmt.Sprintf("unknown IANA time zone %q", clip(p.Timezone)))
	}
	p.loc = loc
	p.LocalTime = p.LocalTime.normalized()
	switch p.LocalTime.Ambiguous {
	case AmbiguousReject, AmbiguousEarlier, AmbiguousLater:
	default:
		return at("local_time.ambiguous", "must be reject, earlier or later")
	}
	switch p.LocalTime.Nonexistent {
	case NonexistentReject, NonexistentLater:
	default:
		return at("local_time.nonexistent", "must be reject or later")
	}
	return nil
}

// validateFields checks each field's mapping, in schema order so that the
// first problem reported is stable, and stores it normalized.
func (p *Profile) validateFields(at func(key, msg string) error) error {
	for f := range p.Fields {
		if !slices.Contains(Fields, f) {
			return at("fields."+string(f), "not a schema field (want one of "+fieldList()+")")
		}
	}
	for _, f := range Fields {
		m, ok := p.Fields[f]
		if !ok {
			continue
		}
		m, err := validateMapping(f, m, at)
		if err != nil {
			return err
		}
		p.Fields[f] = m
	}
	return nil
}

// validateMapping checks the mapping m of field f and returns it
// normalized (its column name trimmed).
func validateMapping(f Field, m Mapping, at func(key, msg string) error) (Mapping, error) {
	key := "fields." + string(f)
	m.Column = strings.TrimSpace(m.Column)
	if err := validateSource(f, m, key, at); err != nil {
		return m, err
	}
	if err := validateTimeLayout(f, m, key, at); err != nil {
		return m, err
	}
	if m.Stable && (f != FieldEventID || m.Column == "") {
		return m, at(key+".stable", "only event_id, mapped from a column, can be declared stable")
	}
	return m, validateCodes(f, m, key, at)
}

// validateSource checks where field f's value comes from: a column or a
// constant value, exactly one, and what a constant may be.
func validateSource(f Field, m Mapping, key string, at func(key, msg string) error) error {
	if (m.Column == "") == (m.Value == "") {
		return at(key, "give exactly one of column or value")
	}
	if m.Optional && f.Required() {
		return at(key, "a required field cannot be optional")
	}
	if m.Value == "" {
		return nil
	}
	if f == FieldOccurredAt {
		return at(key, "occurred_at must come from a column")
	}
	if len(m.Codes) > 0 || m.Default != "" {
		return at(key, "codes and default apply to a column, not to a constant value")
	}
	if f == FieldEventType && !EventType(m.Value).Valid() {
		return at(key+".value", "not an event type (want one of "+eventTypeList()+")")
	}
	return nil
}

// validateTimeLayout checks the time layout, which only occurred_at takes,
// and that occurred_at takes no codes.
func validateTimeLayout(f Field, m Mapping, key string, at func(key, msg string) error) error {
	if f != FieldOccurredAt {
		if m.Layout != "" {
			return at(key+".layout", "layout applies only to occurred_at")
		}
		return nil
	}
	if len(m.Codes) > 0 || m.Default != "" {
		return at(key, "codes and default do not apply to occurred_at")
	}
	if m.Layout != "" {
		if err := ValidateLayout(m.Layout); err != nil {
			return at(key+".layout", err.Error())
		}
	}
	return nil
}

// validateCodes checks the codes and default of field f: a default needs
// codes, and event_type's codes and default must be event types.
func validateCodes(f Field, m Mapping, key string, at func(key, msg string) error) error {
	if m.Default != "" && len(m.Codes) == 0 {
		return at(key+".default", "default applies to codes not listed under codes; add codes")
	}
	if f != FieldEventType {
		return nil
	}
	for from, to := range m.Codes {
		if !EventType(to).Valid() {
			return at(key+".codes", fmt.Sprintf("code %q maps to %q, not an event type (want one of %s)", clip(from), clip(to), eventTypeList()))
		}
	}
	if m.Default != "" && !EventType(m.Default).Valid() {
		return at(key+".default", "not an event type (want one of "+eventTypeList()+")")
	}
	return nil
}

// validateIdentifierColumns checks that a column which feeds an identifier
// feeds no other field: the other field would keep (or quote in a
// message) the raw identifier.
func (p *Profile) validateIdentifierColumns(at func(key, msg string) error) error {
	idCols := map[string]Field{}
	for _, f := range Fields {
		if m, ok := p.Fields[f]; ok && f.Identifier() && m.Column != "" {
			idCols[m.Column] = f
		}
	}
	for _, f := range Fields {
		if m, ok := p.Fields[f]; ok && !f.Identifier() && m.Column != "" {
			if idf, clash := idCols[m.Column]; clash {
				return at("fields."+string(f), fmt.Sprintf("column %q is %s's, an identifier: it cannot also feed %s", clip(m.Column), idf, f))
			}
		}
	}
	return nil
}

// validateRequired checks that every required field is mapped.
func (p *Profile) validateRequired(at func(key, msg string) error) error {
	for _, f := range Fields {
		if f.Required() {
			if _, ok := p.Fields[f]; !ok {
				return at("fields", fmt.Sprintf("required field %s is not mapped", f))
			}
		}
	}
	return nil
}

// validateLimits checks the declared capacities and the longest case.
func (p *Profile) validateLimits(at func(key, msg string) error) error {
	if p.ResourceCapacity < 0 || p.ResourceCapacity > MaxCapacity {
		return at("resource_capacity", fmt.Sprintf("want a whole number from 1 to %d", MaxCapacity))
	}
	if err := validateCapacity(p.Capacity, at); err != nil {
		return err
	}
	if p.MaxCaseDays < 0 || p.MaxCaseDays > MaxCaseDaysLimit {
		return at("max_case_days", fmt.Sprintf("want a whole number of days from 1 to %d", MaxCaseDaysLimit))
	}
	return nil
}

// validateTerminal checks that each declared terminal type can end a case.
func (p *Profile) validateTerminal(at func(key, msg string) error) error {
	for _, t := range p.Terminal {
		if !t.Valid() || t == Arrival || t == Enqueue {
			return at("terminal", fmt.Sprintf("%q cannot end a case (want start, complete, abandon, transfer or departure)", clip(string(t))))
		}
	}
	return nil
}

// yamlDepth returns the nesting depth of YAML tokens and the line where it
// is greatest: flow collections ([ and {) count one level each, and block
// collections one per indentation column in force, the column of a
// sequence entry "-" or of a mapping key.
func yamlDepth(tks token.Tokens) (depth, line int) {
	flow := 0
	var cols []int // block columns in force, increasing
	for i, tk := range tks {
		if tk == nil || tk.Position == nil {
			continue
		}
		switch tk.Type {
		case token.SequenceStartType, token.MappingStartType:
			flow++
		case token.SequenceEndType, token.MappingEndType:
			if flow > 0 {
				flow--
			}
		case token.SequenceEntryType, token.MappingKeyType, token.MappingValueType:
			if flow > 0 {
				break
			}
			col := tk.Position.Column
			if tk.Type == token.MappingValueType && i > 0 && tks[i-1] != nil && tks[i-1].Position != nil {
				col = tks[i-1].Position.Column // the key's column
			}
			for len(cols) > 0 && cols[len(cols)-1] > col {
				cols = cols[:len(cols)-1]
			}
			if len(cols) == 0 || cols[len(cols)-1] < col {
				cols = append(cols, col)
			}
		}
		if d := len(cols) + flow; d > depth {
			depth, line = d, tk.Position.Line
		}
	}
	return depth, line
}

// keyValue is one entry of a YAML mapping.
type keyValue struct {
	key   string
	value ast.Node
	line  int
}

func line(n ast.Node) int {
	if n == nil {
		return 0
	}
	if tk := n.GetToken(); tk != nil && tk.Position != nil {
		return tk.Position.Line
	}
	return 0
}

// mapping returns the entries of a YAML mapping node, rejecting duplicate
// keys, anchors, aliases and tags (a profile is plain data).
func mapping(n ast.Node, key string) ([]keyValue, error) {
	var vals []*ast.MappingValueNode
	switch m := n.(type) {
	case *ast.MappingNode:
		vals = m.Values
	case *ast.MappingValueNode:
		vals = []*ast.MappingValueNode{m}
	default:
		return nil, &ProfileError{Line: line(n), Key: key, Msg: "must be a mapping (key: value)"}
	}
	out := make([]keyValue, 0, len(vals))
	seen := map[string]bool{}
	for _, mv := range vals {
		k, err := scalar(mv.Key, key)
		if err != nil {
			return nil, err
		}
		path := k
		if key != "" {
			path = key + "." + k
		}
		if seen[k] {
			return nil, &ProfileError{Line: line(mv.Key), Key: path, Msg: "given twice"}
		}
		seen[k] = true
		out = append(out, keyValue{key: k, value: mv.Value, line: line(mv.Key)})
	}
	return out, nil
}

// scalar returns the text of a scalar node as written (so a code 01 stays
// "01"); mappings, sequences, nulls and anchors are errors.
func scalar(n ast.Node, key string) (string, error) {
	switch v := n.(type) {
	case *ast.StringNode:
		return v.Value, nil
	case *ast.LiteralNode:
		return v.Value.Value, nil
	case *ast.IntegerNode, *ast.FloatNode, *ast.BoolNode, *ast.InfinityNode, *ast.NanNode:
		return n.GetToken().Value, nil
	case *ast.NullNode, nil:
		return "", &ProfileError{Line: line(n), Key: key, Msg: "has no value"}
	case *ast.AnchorNode, *ast.AliasNode, *ast.TagNode:
		return "", &ProfileError{Line: line(n), Key: key, Msg: "anchors, aliases and tags are not supported in profiles"}
	}
	return "", &ProfileError{Line: line(n), Key: key, Msg: "must be a single value"}
}

// terminalTypes reads the terminal key: one event type or a list of them.
func terminalTypes(n ast.Node, key string) ([]EventType, error) {
	var out []EventType
	err := eachScalar(n, key, func(it ast.Node, s string) error {
		t, err := ParseEventType(s)
		if err != nil {
			return &ProfileError{Line: line(it), Key: key, Msg: fmt.Sprintf("unknown event type %q (want one of %s)", clip(s), eventTypeList())}
		}
		if !slices.Contains(out, t) {
			out = append(out, t)
		}
		return nil
	})
	if err != nil {
		return nil, err
	}
	return out, nil
}

// eachScalar calls fn with each value of n, one scalar or a sequence of
// them (a key that takes one value or a list), in order.
func eachScalar(n ast.Node, key string, fn func(it ast.Node, s string) error) error {
	items := []ast.Node{n}
	if seq, ok := n.(*ast.SequenceNode); ok {
		items = seq.Values
	}
	for _, it := range items {
		s, err := scalar(it, key)
		if err != nil {
			return err
		}
		if err := fn(it, s); err != nil {
			return err
		}
	}
	return nil
}

// multilineSetting reads "multiline: true|false" or a mapping of
// max_lines and max_bytes; defaults are filled in by validate.
func multilineSetting(n ast.Node, lines map[string]int) (*Multiline, error) {
	switch n.(type) {
	case *ast.MappingNode, *ast.MappingValueNode:
	default:
		s, err := scalar(n, "multiline")
		if err != nil {
			return nil, err
		}
		switch s {
		case "true":
			return &Multiline{}, nil
		case "false":
			return nil, nil
		}
		return nil, &ProfileError{Line: line(n), Key: "multiline", Msg: "want true, false or a mapping of max_lines and max_bytes"}
	}
	kvs, err := mapping(n, "multiline")
	if err != nil {
		return nil, err
	}
	ml := &Multiline{}
	for _, kv := range kvs {
		key := "multiline." + kv.key
		lines[key] = kv.line
		s, err := scalar(kv.value, key)
		if err != nil {
			return nil, err
		}
		v, ok := digits(s)
		if !ok || len(s) == 0 || len(s) > 9 || v == 0 {
			return nil, &ProfileError{Line: kv.line, Key: key, Msg: "must be a positive whole number"}
		}
		switch kv.key {
		case "max_lines":
			ml.MaxLines = v
		case "max_bytes":
			ml.MaxBytes = v
		default:
			return nil, &ProfileError{Line: kv.line, Key: key, Msg: "unknown key (want max_lines or max_bytes)"}
		}
	}
	return ml, nil
}

func fieldMapping(n ast.Node, key string, lines map[string]int) (Mapping, error) {
	var m Mapping
	switch n.(type) {
	case *ast.MappingNode, *ast.MappingValueNode:
	default:
		s, err := scalar(n, key)
		if err != nil {
			return m, err
		}
		m.Column = s
		return m, nil
	}
	kvs, err := mapping(n, key)
	if err != nil {
		return m, err
	}
	for _, kv := range kvs {
		sub := key + "." + kv.key
		lines[sub] = kv.line
		if kv.key == "codes" {
			codes, err := mapping(kv.value, sub)
			if err != nil {
				return m, err
			}
			m.Codes = make(map[string]string, len(codes))
			for _, c := range codes {
				to, err := scalar(c.value, sub+"."+c.key)
				if err != nil {
					return m, err
				}
				k := strings.TrimSpace(c.key)
				if _, dup := m.Codes[k]; dup {
					return m, &ProfileError{Line: c.line, Key: sub + "." + c.key, Msg: fmt.Sprintf("code %q is listed twice (values are trimmed before matching)", clip(k))}
				}
				m.Codes[k] = to
			}
			continue
		}
		s, err := scalar(kv.value, sub)
		if err != nil {
			return m, err
		}
		switch kv.key {
		case "column":
			if strings.TrimSpace(s) == "" {
				return m, &ProfileError{Line: kv.line, Key: sub, Msg: "is empty"}
			}
			m.Column = s
		case "value":
			if s == "" {
				return m, &ProfileError{Line: kv.line, Key: sub, Msg: "is empty"}
			}
			m.Value = s
		case "default":
			m.Default = s
		case "layout":
			m.Layout = s
		case "stable":
			switch s {
			case "true":
				m.Stable = true
			case "false":
			default:
				return m, &ProfileError{Line: kv.line, Key: sub, Msg: "must be true or false"}
			}
		default:
			return m, &ProfileError{Line: kv.line, Key: sub, Msg: "unknown key (want column, value, codes, default, layout or stable)"}
		}
	}
	return m, nil
}

func fieldList() string {
	s := make([]string, len(Fields))
	for i, f := range Fields {
		s[i] = string(f)
	}
	return strings.Join(s, ", ")
}

func eventTypeList() string {
	s := make([]string, len(EventTypes))
	for i, t := range EventTypes {
		s[i] = string(t)
	}
	return strings.Join(s, ", ")
}

// clip shortens a non-identifier value for quoting in a message.
func clip(s string) string {
	const max = 40
	if len(s) <= max {
		return s
	}
	cut := max
	for cut > 0 && !utf8.RuneStart(s[cut]) {
		cut--
	}
	return s[:cut] + "..."
}

// into returns a function that stores a setting's value in dst unless
// reading it failed, and passes the error on.
func into[T any](dst *T) func(T, error) error {
	return func(v T, err error) error {
		if err == nil {
			*dst = v
		}
		return err
	}
}

// wholeNumber reads kv's value as a whole number from 1 to max; what
// names it in the error ("a whole number", "a whole number of days").
func wholeNumber(kv keyValue, max int, what string) (int, error) {
	s, err := scalar(kv.value, kv.key)
	if err != nil {
		return 0, err
	}
	n, err := strconv.Atoi(s)
	if err != nil || n < 1 || n > max {
		return 0, &ProfileError{Line: kv.line, Key: kv.key, Msg: fmt.Sprintf("%q: want %s from 1 to %d", clip(s), what, max)}
	}
	return n, nil
}
