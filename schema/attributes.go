package schema

import (
	"fmt"
	"math"
	"slices"
	"strconv"
	"strings"
	"time"
	"unicode"
	"unicode/utf8"

	"github.com/goccy/go-yaml/ast"
)

// AttrRole says what a declared attribute can do to a person's privacy.
type AttrRole string

// Attribute roles.
const (
	// RoleQuasi marks a quasi-identifier: a value that, combined with
	// others (age, sex, postal code, admission date), can single a person
	// out. Quasi-identifiers define the equivalence classes of the
	// disclosure report.
	RoleQuasi AttrRole = "quasi"
	// RoleSensitive marks a value whose disclosure harms (diagnosis,
	// outcome); the report measures its l-diversity.
	RoleSensitive AttrRole = "sensitive"
	// RolePlain marks a value of neither kind (channel, priority).
	RolePlain AttrRole = "plain"
)

// AttrType is how a declared attribute's values are read and stored.
type AttrType string

// Attribute types. Free text has no type: it is refused unless its
// column is listed under drop.
const (
	TypeCode    AttrType = "code"    // a short code (at most MaxCodeBytes, one line), stored as a string
	TypeInteger AttrType = "integer" // a whole number, stored as INT64
	TypeAge     AttrType = "age"     // whole years, stored as a band label; over 89 always "90+"
	TypeDate    AttrType = "date"    // a calendar date, stored as DATE truncated to its period
)

// MaxCodeBytes bounds a code attribute's value: a longer value is free
// text, and the row is rejected (bad_value).
const MaxCodeBytes = 64

// maxAttributes bounds the attributes of one profile.
const maxAttributes = 64

// AgeTopCode is the age from which every age is one group, "90+": HIPAA
// Safe Harbor, 45 CFR 164.514(b)(2)(i)(C), lets ages over 89 be kept only
// as a single category of age 90 or older.
const AgeTopCode = 90

// Date periods a date attribute is truncated to.
const (
	PeriodDay   = "day"
	PeriodWeek  = "week" // ISO 8601 week, from its Monday
	PeriodMonth = "month"
	PeriodYear  = "year"
)

// Attribute levels: where a declared attribute's values are kept.
const (
	// LevelCase (the default) keeps one value per case, in the case
	// attribute table beside the case table.
	LevelCase = "case"
	// LevelEvent keeps one value per event, as an extra column of the
	// snapshot files, after the schema's columns.
	LevelEvent = "event"
)

// RuleEventQuasi refuses a quasi-identifier declared at event level: the
// disclosure report's equivalence classes are classes of cases, and a
// value that may differ from one event of a case to the next gives a case
// no single class (DEVELOPERS.md, "Event attributes").
const RuleEventQuasi = "event_quasi"

// Attribute is one extra column a profile keeps, at case level (each case
// carries one value of it, see the case attribute table) or at event level
// (each event carries one, in the snapshot files). Values are generalized
// at ingest by the attribute's rule (Band, Keep, Period), so that the raw
// value never reaches disk.
type Attribute struct {
	Name   string   `json:"name"`
	Column string   `json:"column"`
	Role   AttrRole `json:"role"`
	Type   AttrType `json:"type"`
	// Level is LevelEvent for an event attribute; empty for a case
	// attribute (the default, so that profiles written before event
	// attributes keep their hash).
	Level string `json:"level,omitempty"`
	// Band is the width in years of an age's bands (type age; default 5).
	Band int `json:"band,omitempty"`
	// Keep is how many leading characters of a code are kept (postal
	// codes truncated); 0 keeps the whole code.
	Keep int `json:"keep,omitempty"`
	// SmallAreas are kept prefixes that name areas too small to show
	// (Safe Harbor: three-digit ZIP areas of 20,000 people or fewer):
	// such a prefix is replaced by Keep zeros. Type code with Keep only.
	SmallAreas []string `json:"small_areas,omitempty"`
	// Period is what a date is truncated to: day, week, month or year
	// (type date; default month for a quasi-identifier, day otherwise).
	Period string `json:"period,omitempty"`
}

// Rule describes the attribute's generalization in words, for the
// manifest and the data dictionary.
func (a *Attribute) Rule() string {
	switch a.Type {
	case TypeAge:
		return fmt.Sprintf("age in %d-year bands, %d and over as one group (%d+)", a.Band, AgeTopCode, AgeTopCode)
	case TypeDate:
		if a.Period == PeriodDay {
			return "date"
		}
		return "date truncated to the first day of its " + a.Period
	case TypeCode:
		if a.Keep > 0 && len(a.SmallAreas) > 0 {
			return fmt.Sprintf("first %d characters kept; %d small areas as %s", a.Keep, len(a.SmallAreas), strings.Repeat("0", a.Keep))
		}
		if a.Keep > 0 {
			return fmt.Sprintf("first %d characters kept", a.Keep)
		}
	}
	return "as given"
}

// parseAttributes reads the attributes key: a mapping of attribute names
// to mappings of column, role, type and the rule's settings.
func parseAttributes(n ast.Node, lines map[string]int) ([]Attribute, error) {
	kvs, err := mapping(n, "attributes")
	if err != nil {
		return nil, err
	}
	out := make([]Attribute, 0, len(kvs))
	for _, kv := range kvs {
		key := "attributes." + kv.key
		lines[key] = kv.line
		a := Attribute{Name: kv.key}
		subs, err := mapping(kv.value, key)
		if err != nil {
			return nil, err
		}
		for _, s := range subs {
			sub := key + "." + s.key
			lines[sub] = s.line
			if s.key == "small_areas" {
				if a.SmallAreas, err = parseColumnList(s.value, sub); err != nil {
					return nil, err
				}
				continue
			}
			v, err := scalar(s.value, sub)
			if err != nil {
				return nil, err
			}
			switch s.key {
			case "column":
				a.Column = v
			case "role":
				a.Role = AttrRole(v)
			case "type":
				a.Type = AttrType(v)
			case "band", "keep":
				n, err := strconv.Atoi(v)
				if err != nil || n < 1 || n > 100 {
					return nil, &ProfileError{Line: s.line, Key: sub, Msg: "want a whole number from 1 to 100"}
				}
				if s.key == "band" {
					a.Band = n
				} else {
					a.Keep = n
				}
			case "period":
				a.Period = v
			case "level":
				a.Level = v
			default:
				return nil, &ProfileError{Line: s.line, Key: sub, Msg: "unknown key (want column, role, type, level, band, keep, small_areas or period)"}
			}
		}
		out = append(out, a)
	}
	return out, nil
}

// parseColumnList reads a list of column names (drop).
func parseColumnList(n ast.Node, key string) ([]string, error) {
	var out []string
	err := eachScalar(n, key, func(it ast.Node, s string) error {
		s = strings.TrimSpace(s)
		if s == "" {
			return &ProfileError{Line: line(it), Key: key, Msg: "an empty column name"}
		}
		if slices.Contains(out, s) {
			return &ProfileError{Line: line(it), Key: key, Msg: fmt.Sprintf("column %q is listed twice", clip(s))}
		}
		out = append(out, s)
		return nil
	})
	if err != nil {
		return nil, err
	}
	return out, nil
}

// validateAttributes normalizes and checks the attribute declarations,
// the dropped columns and the time shift; at gives a *ProfileError.
func (p *Profile) validateAttributes(at func(key, msg string) error) error {
	if len(p.Attributes) > maxAttributes {
		return at("attributes", fmt.Sprintf("%d attributes, over the limit of %d", len(p.Attributes), maxAttributes))
	}
	if p.TimeShiftDays < 0 || p.TimeShiftDays > 3660 {
		return at("time_shift_days", "want a whole number of days from 1 to 3660")
	}
	used := map[string]string{} // column -> what uses it
	for _, f := range Fields {
		if m, ok := p.Fields[f]; ok && m.Column != "" {
			used[m.Column] = "field " + string(f)
		}
	}
	names := map[string]bool{}
	for i := range p.Attributes {
		a := &p.Attributes[i]
		key := "attributes." + a.Name
		if !validAttrName(a.Name) {
			return at(key, "an attribute name is 1 to 40 of a-z, 0-9 and _, starting with a letter")
		}
		if slices.Contains(Fields, Field(a.Name)) || names[a.Name] {
			return at(key, fmt.Sprintf("the name %q is taken (a schema field or another attribute)", a.Name))
		}
		names[a.Name] = true
		a.Column = strings.TrimSpace(a.Column)
		if a.Column == "" {
			return at(key+".column", "missing: the source column of the attribute")
		}
		if by, ok := used[a.Column]; ok {
			return at(key+".column", fmt.Sprintf("column %q already feeds %s", clip(a.Column), by))
		}
		used[a.Column] = "attribute " + a.Name
		switch a.Level {
		case LevelCase:
			a.Level = "" // the default, stored as absent
		case "", LevelEvent:
		default:
			return at(key+".level", fmt.Sprintf("unknown level %q (want case or event)", clip(a.Level)))
		}
		switch a.Role {
		case RoleQuasi, RoleSensitive, RolePlain:
		case "":
			return at(key+".role", "missing (want quasi, sensitive or plain)")
		default:
			return at(key+".role", fmt.Sprintf("unknown role %q (want quasi, sensitive or plain)", clip(string(a.Role))))
		}
		switch a.Type {
		case TypeCode, TypeInteger, TypeAge, TypeDate:
		case "text":
			return at(key+".type", "free text cannot be kept as an attribute: list the column under drop")
		case "":
			return at(key+".type", "missing (want code, integer, age or date)")
		default:
			return at(key+".type", fmt.Sprintf("unknown type %q (want code, integer, age or date)", clip(string(a.Type))))
		}
		if a.Band != 0 && a.Type != TypeAge {
			return at(key+".band", "band applies to type age")
		}
		if a.Type == TypeAge && a.Band == 0 {
			a.Band = 5
		}
		if a.Keep != 0 && a.Type != TypeCode {
			return at(key+".keep", "keep applies to type code")
		}
		for _, sa := range a.SmallAreas {
			if a.Keep == 0 || utf8.RuneCountInString(sa) != a.Keep {
				return at(key+".small_areas", fmt.Sprintf("each small area is a kept prefix of %d characters (needs keep)", a.Keep))
			}
		}
		if a.Period != "" && a.Type != TypeDate {
			return at(key+".period", "period applies to type date")
		}
		if a.Type == TypeDate {
			if a.Period == "" {
				a.Period = PeriodDay
				if a.Role == RoleQuasi {
					a.Period = PeriodMonth
				}
			}
			switch a.Period {
			case PeriodDay, PeriodWeek, PeriodMonth, PeriodYear:
			default:
				return at(key+".period", fmt.Sprintf("unknown period %q (want day, week, month or year)", clip(a.Period)))
			}
			if a.Role == RoleQuasi && a.Period == PeriodDay {
				return at(key+".period", "a quasi-identifying date must be generalized: want week, month or year")
			}
		}
		if a.Type == TypeInteger && a.Role == RoleQuasi {
			return at(key+".type", "a quasi-identifier needs a generalization: declare it as age (bands), code (keep) or date (period)")
		}
		if a.Level == LevelEvent && a.Role == RoleQuasi {
			err := at(key+".role", "a quasi-identifier is a property of the person, measured per case: declare it at case level (remove level: event), or as sensitive or plain if it describes the event")
			if pe, ok := err.(*ProfileError); ok {
				pe.Rule = RuleEventQuasi
			}
			return err
		}
	}
	for _, c := range p.Drop {
		if by, ok := used[c]; ok {
			return at("drop", fmt.Sprintf("column %q is dropped but feeds %s", clip(c), by))
		}
	}
	slices.SortFunc(p.Attributes, func(a, b Attribute) int { return strings.Compare(a.Name, b.Name) })
	return nil
}

func validAttrName(s string) bool {
	if len(s) == 0 || len(s) > 40 || s[0] < 'a' || s[0] > 'z' {
		return false
	}
	for i := 0; i < len(s); i++ {
		c := s[i]
		if !(c >= 'a' && c <= 'z' || c >= '0' && c <= '9' || c == '_') {
			return false
		}
	}
	return true
}

// EventLevel reports whether a is kept per event, in the snapshots.
func (a *Attribute) EventLevel() bool { return a.Level == LevelEvent }

// EventAttributes returns the profile's event attributes, in profile order
// (by name): the extra columns of its snapshot files, in that order.
func (p *Profile) EventAttributes() []Attribute {
	var out []Attribute
	for _, a := range p.Attributes {
		if a.EventLevel() {
			out = append(out, a)
		}
	}
	return out
}

// CaseAttributes returns the profile's case attributes, in profile order.
func (p *Profile) CaseAttributes() []Attribute {
	var out []Attribute
	for _, a := range p.Attributes {
		if !a.EventLevel() {
			out = append(out, a)
		}
	}
	return out
}

// HasQuasi reports whether the profile declares a quasi-identifier.
func (p *Profile) HasQuasi() bool {
	for _, a := range p.Attributes {
		if a.Role == RoleQuasi {
			return true
		}
	}
	return false
}

// Generalize turns one raw value of a into its stored form: "" for an
// empty value (NULL); an age band label; a truncated code; a date as
// YYYY-MM-DD, moved by shift and truncated to its period; an integer in
// decimal. An invalid value gives an error whose message never quotes it
// (a raw attribute value is as private as an identifier).
func (a *Attribute) Generalize(raw string, shift time.Duration) (string, error) {
	v := strings.TrimSpace(raw)
	if v == "" {
		return "", nil
	}
	if strings.IndexByte(v, 0) >= 0 {
		return "", fmt.Errorf("attribute %s: the value holds a NUL byte (0x00)", a.Name)
	}
	switch a.Type {
	case TypeCode:
		if freeText(v) {
			return "", fmt.Errorf("attribute %s: the value reads as free text (over %d bytes, a line break or more than three words); free text is not kept", a.Name, MaxCodeBytes)
		}
		if a.Keep > 0 && utf8.RuneCountInString(v) > a.Keep {
			r := []rune(v)
			v = string(r[:a.Keep])
		}
		if slices.Contains(a.SmallAreas, v) {
			v = strings.Repeat("0", a.Keep)
		}
		return v, nil
	case TypeInteger:
		n, err := strconv.ParseInt(v, 10, 64)
		if err != nil {
			return "", fmt.Errorf("attribute %s: not a whole number", a.Name)
		}
		return strconv.FormatInt(n, 10), nil
	case TypeAge:
		f, err := strconv.ParseFloat(v, 64)
		if err != nil || math.IsNaN(f) || f < 0 || f > 150 {
			return "", fmt.Errorf("attribute %s: not an age in years from 0 to 150", a.Name)
		}
		return AgeBand(int(f), a.Band), nil
	case TypeDate:
		d, err := parseDate(v)
		if err != nil {
			return "", fmt.Errorf("attribute %s: not a date (want YYYY-MM-DD or an RFC 3339 timestamp)", a.Name)
		}
		return TruncateDate(d.Add(shift), a.Period).Format(time.DateOnly), nil
	}
	return "", fmt.Errorf("attribute %s: unknown type", a.Name)
}

func words(s string) int {
	return len(strings.FieldsFunc(s, unicode.IsSpace))
}

// AgeBand is the band label of a whole age: width-year bands from 0
// ("00-04", "05-09", ...; width 1 gives "07"), the band below 90 cut at
// 89, and every age of AgeTopCode or over "90+" (45 CFR 164.514(b)(2)(i)(C)).
func AgeBand(age, width int) string {
	if age >= AgeTopCode {
		return fmt.Sprintf("%d+", AgeTopCode)
	}
	if width < 1 {
		width = 1
	}
	lo := age / width * width
	hi := min(lo+width-1, AgeTopCode-1)
	if lo == hi {
		return fmt.Sprintf("%02d", lo)
	}
	return fmt.Sprintf("%02d-%02d", lo, hi)
}

// TruncateDate returns the first day of d's period (d's calendar date in
// UTC): the day itself, the Monday of its ISO 8601 week, the first of its
// month or of its year.
func TruncateDate(d time.Time, period string) time.Time {
	y, m, day := d.UTC().Date()
	t := time.Date(y, m, day, 0, 0, 0, 0, time.UTC)
	switch period {
	case PeriodWeek:
		back := (int(t.Weekday()) + 6) % 7 // days since Monday
		return t.AddDate(0, 0, -back)
	case PeriodMonth:
		return time.Date(y, m, 1, 0, 0, 0, 0, time.UTC)
	case PeriodYear:
		return time.Date(y, 1, 1, 0, 0, 0, 0, time.UTC)
	}
	return t
}

// parseDate reads a calendar date (YYYY-MM-DD) or an RFC 3339 timestamp,
// whose calendar date in its own offset is taken.
func parseDate(s string) (time.Time, error) {
	if t, err := time.Parse(time.DateOnly, s); err == nil {
		return t, nil
	}
	t, err := time.Parse(time.RFC3339Nano, s)
	if err != nil {
		return time.Time{}, err
	}
	y, m, d := t.Date()
	return time.Date(y, m, d, 0, 0, 0, 0, time.UTC), nil
}
