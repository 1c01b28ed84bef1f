package schema

import (
	"errors"
	"fmt"
	"strings"
	"time"

	"github.com/itchyny/timefmt-go"
)

// Sentinel errors of ParseTime. They carry no part of the parsed text, so
// they are safe to log and cheap to return on every bad row.
var (
	// ErrBadTimestamp means the text is not a timestamp in the expected form
	// (including leap seconds, which time.Time cannot represent).
	ErrBadTimestamp = errors.New("timestamp does not parse")
	// ErrNonexistentLocal means the wall-clock time falls into a gap where
	// clocks were set forward, and the policy is to reject it.
	ErrNonexistentLocal = errors.New("wall-clock time does not exist in the zone (daylight-saving gap)")
	// ErrAmbiguousLocal means the wall-clock time occurs twice because clocks
	// were set back, and the policy is to reject it.
	ErrAmbiguousLocal = errors.New("wall-clock time occurs twice in the zone (daylight-saving overlap)")
	// ErrTimestampRange means the instant parses but lies outside the years
	// 0001 to 9999, which snapshots and their JSON metadata can hold (RFC
	// 3339 section 5.6 writes four-digit years).
	ErrTimestampRange = errors.New("timestamp outside the years 0001-9999")
)

// The instants a snapshot can hold.
var (
	minInstant = time.Date(1, 1, 1, 0, 0, 0, 0, time.UTC)
	maxInstant = time.Date(9999, 12, 31, 23, 59, 59, 999999999, time.UTC)
)

// AmbiguousPolicy says what to do with a wall-clock time that occurs twice.
type AmbiguousPolicy string

// Ambiguous-time policies.
const (
	AmbiguousReject  AmbiguousPolicy = "reject"  // reject the row (ambiguous_local)
	AmbiguousEarlier AmbiguousPolicy = "earlier" // take the first occurrence (the summer-time reading)
	AmbiguousLater   AmbiguousPolicy = "later"   // take the second occurrence
)

// NonexistentPolicy says what to do with a wall-clock time inside a
// daylight-saving gap.
type NonexistentPolicy string

// Nonexistent-time policies.
const (
	NonexistentReject NonexistentPolicy = "reject" // reject the row (nonexistent_local)
	NonexistentLater  NonexistentPolicy = "later"  // shift forward by the length of the gap
)

// LocalTimePolicy says how wall-clock times without an offset are resolved
// at daylight-saving changes. The zero value rejects both kinds of problem.
type LocalTimePolicy struct {
	Ambiguous   AmbiguousPolicy   `json:"ambiguous"`
	Nonexistent NonexistentPolicy `json:"nonexistent"`
}

func (p LocalTimePolicy) normalized() LocalTimePolicy {
	if p.Ambiguous == "" {
		p.Ambiguous = AmbiguousReject
	}
	if p.Nonexistent == "" {
		p.Nonexistent = NonexistentReject
	}
	return p
}

// ParseTime reads s as a timestamp and returns the instant in UTC.
//
// With an empty layout it detects the form: RFC 3339 (fractional seconds,
// 'T', 't' or space between date and time, 'Z' or 'z'), ISO 8601 extended
// forms without an offset (hh:mm, hh:mm:ss, hh:mm:ss.fff, decimal point or
// comma), basic offsets +hhmm and hour-only offsets +hh, and a bare date
// 2006-01-02 (local midnight). Otherwise layout is a strftime-style pattern
// (see ValidateLayout); a pattern with %z or %s reads an instant.
//
// Text with an offset is an instant. Text without one is a wall-clock time
// in loc (nil means UTC), resolved under policy; daylight-saving problems
// are reported as ErrNonexistentLocal or ErrAmbiguousLocal unless the
// policy says otherwise, never shifted silently. Every other failure is
// ErrBadTimestamp. Leap seconds (second 60, RFC 3339 section 5.7) are
// rejected with ErrBadTimestamp because time.Time cannot represent them.
func ParseTime(s, layout string, loc *time.Location, policy LocalTimePolicy) (time.Time, error) {
	hasOffset := false
	if layout != "" {
		var err error
		if hasOffset, err = layoutInfo(layout); err != nil {
			return time.Time{}, fmt.Errorf("layout: %w", err)
		}
	}
	tp := timeParser{layout: layout, layoutOffset: hasOffset, loc: loc, policy: policy.normalized()}
	return tp.parse(s)
}

// timeParser is ParseTime with the layout checked once.
type timeParser struct {
	layout       string
	layoutOffset bool // the layout reads an offset (%z) or a Unix time (%s)
	loc          *time.Location
	policy       LocalTimePolicy

	// A span of wall-clock times (read as UTC) known to have the single
	// reading offset cacheOff: rows of an export are mostly near each other
	// in time, so most skip the zone lookups.
	cacheOK  bool
	cacheLo  time.Time
	cacheHi  time.Time
	cacheOff time.Duration
}

// local resolves a wall-clock time through the cache.
func (tp *timeParser) local(w time.Time) (time.Time, error) {
	if tp.loc == nil || tp.loc == time.UTC {
		return w, nil
	}
	if tp.cacheOK && !w.Before(tp.cacheLo) && w.Before(tp.cacheHi) {
		return w.Add(-tp.cacheOff), nil
	}
	t, err := resolveLocal(w, tp.loc, tp.policy)
	if err != nil {
		return t, err
	}
	// The zone period holding t has one offset; a wall time whose ±24h
	// neighbourhood stays inside it has exactly that reading.
	start, end := t.In(tp.loc).ZoneBounds()
	_, o := t.In(tp.loc).Zone()
	off := time.Duration(o) * time.Second
	tp.cacheOff = off
	tp.cacheLo = time.Date(-10000, 1, 1, 0, 0, 0, 0, time.UTC)
	tp.cacheHi = time.Date(10000, 1, 1, 0, 0, 0, 0, time.UTC)
	if !start.IsZero() {
		tp.cacheLo = start.UTC().Add(24*time.Hour + off)
	}
	if !end.IsZero() {
		tp.cacheHi = end.UTC().Add(-24*time.Hour + off)
	}
	tp.cacheOK = tp.cacheLo.Before(tp.cacheHi)
	return t, nil
}

func (tp *timeParser) parse(s string) (time.Time, error) {
	t, err := tp.parseAny(s)
	if err == nil && (t.Before(minInstant) || t.After(maxInstant)) {
		return time.Time{}, ErrTimestampRange
	}
	return t, err
}

// parseAny is parse without the range check.
func (tp *timeParser) parseAny(s string) (time.Time, error) {
	if tp.layout != "" {
		t, err := timefmt.Parse(s, tp.layout)
		if err != nil || fieldsRolledOver(s, tp.layout, t) {
			return time.Time{}, ErrBadTimestamp
		}
		if tp.layoutOffset {
			return t.UTC(), nil
		}
		return tp.local(t)
	}
	w, off, hasOff, ok := parseAuto(s)
	if !ok {
		return time.Time{}, ErrBadTimestamp
	}
	if hasOff {
		return w.Add(-time.Duration(off) * time.Second), nil
	}
	return tp.local(w)
}

// resolveLocal turns w, a wall-clock reading held as if it were UTC, into
// an instant in loc. Each distinct UTC offset o that loc uses within a day
// of w is a valid reading when the instant w-o shows offset o again; no
// valid reading means a gap, two mean an overlap.
func resolveLocal(w time.Time, loc *time.Location, p LocalTimePolicy) (time.Time, error) {
	if loc == nil || loc == time.UTC {
		return w, nil
	}
	var offs [3]int
	n := 0
	for _, t := range [3]time.Time{w.Add(-24 * time.Hour), w, w.Add(24 * time.Hour)} {
		_, o := t.In(loc).Zone()
		dup := false
		for i := 0; i < n; i++ {
			if offs[i] == o {
				dup = true
			}
		}
		if !dup {
			offs[n] = o
			n++
		}
	}
	var valid [3]int
	nv := 0
	maxOff := offs[0]
	for _, o := range offs[:n] {
		if o > maxOff {
			maxOff = o
		}
		c := w.Add(-time.Duration(o) * time.Second)
		if _, oc := c.In(loc).Zone(); oc == o {
			valid[nv] = o
			nv++
		}
	}
	switch {
	case nv == 1:
		return w.Add(-time.Duration(valid[0]) * time.Second), nil
	case nv == 0:
		if p.Nonexistent != NonexistentLater {
			return time.Time{}, ErrNonexistentLocal
		}
		// The instant w-maxOff lies before the gap; reading w with the
		// offset in force there moves it forward by the gap's length.
		_, before := w.Add(-time.Duration(maxOff) * time.Second).In(loc).Zone()
		return w.Add(-time.Duration(before) * time.Second), nil
	default:
		lo, hi := valid[0], valid[0]
		for _, o := range valid[:nv] {
			lo, hi = min(lo, o), max(hi, o)
		}
		switch p.Ambiguous {
		case AmbiguousEarlier:
			return w.Add(-time.Duration(hi) * time.Second), nil
		case AmbiguousLater:
			return w.Add(-time.Duration(lo) * time.Second), nil
		}
		return time.Time{}, ErrAmbiguousLocal
	}
}

// parseAuto reads the forms listed at ParseTime. It returns the wall-clock
// fields as a UTC time, the offset in seconds east of UTC and whether the
// text had one.
func parseAuto(s string) (w time.Time, off int, hasOff, ok bool) {
	n := len(s)
	if n < 10 || s[4] != '-' || s[7] != '-' {
		return
	}
	year, ok1 := digits(s[0:4])
	month, ok2 := digits(s[5:7])
	day, ok3 := digits(s[8:10])
	if !ok1 || !ok2 || !ok3 || month < 1 || month > 12 || day < 1 || day > daysIn(year, month) {
		return
	}
	if n == 10 {
		return time.Date(year, time.Month(month), day, 0, 0, 0, 0, time.UTC), 0, false, true
	}
	if c := s[10]; c != 'T' && c != 't' && c != ' ' {
		return
	}
	i := 11
	if n < i+5 || s[i+2] != ':' {
		return
	}
	hour, ok1 := digits(s[i : i+2])
	minute, ok2 := digits(s[i+3 : i+5])
	if !ok1 || !ok2 || hour > 23 || minute > 59 {
		return
	}
	i += 5
	second, nsec := 0, 0
	if i < n && s[i] == ':' {
		if n < i+3 {
			return
		}
		var okS bool
		second, okS = digits(s[i+1 : i+3])
		// Second 60 is a leap second (RFC 3339 section 5.7); time.Time has no
		// representation for it, so it is refused rather than rolled over.
		if !okS || second > 59 {
			return
		}
		i += 3
		if i < n && (s[i] == '.' || s[i] == ',') {
			i++
			start := i
			scale := 100000000
			for i < n && s[i] >= '0' && s[i] <= '9' {
				nsec += int(s[i]-'0') * scale
				scale /= 10
				i++
			}
			if i == start {
				return
			}
		}
	}
	if i < n {
		switch s[i] {
		case 'Z', 'z':
			i++
			hasOff = true
		case '+', '-':
			sign := 1
			if s[i] == '-' {
				sign = -1
			}
			i++
			if n < i+2 {
				return
			}
			oh, okH := digits(s[i : i+2])
			if !okH || oh > 23 {
				return
			}
			i += 2
			om := 0
			if i < n {
				if s[i] == ':' {
					i++
				}
				if n < i+2 {
					return
				}
				var okM bool
				om, okM = digits(s[i : i+2])
				if !okM || om > 59 {
					return
				}
				i += 2
			}
			off = sign * (oh*3600 + om*60)
			hasOff = true
		default:
			return
		}
	}
	if i != n {
		return
	}
	return time.Date(year, time.Month(month), day, hour, minute, second, nsec, time.UTC), off, hasOff, true
}

func digits(s string) (int, bool) {
	v := 0
	for i := 0; i < len(s); i++ {
		c := s[i]
		if c < '0' || c > '9' {
			return 0, false
		}
		v = v*10 + int(c-'0')
	}
	return v, true
}

func daysIn(year, month int) int {
	return time.Date(year, time.Month(month)+1, 0, 0, 0, 0, 0, time.UTC).Day()
}

// layoutDirectives are the strftime conversions a profile layout may use.
// Zone names (%Z, and %c/%+ which imply them) are left out on purpose:
// abbreviations such as CST are ambiguous; data with offsets uses %z.
const layoutDirectives = "YmdHMSfzsebBhaAyCjklIpPFTDRnt%:"

// ValidateLayout checks a strftime-style timestamp layout: every directive
// must be one this package supports (%Y %m %d %e %j %H %k %I %l %M %S %f
// %p %P %b %B %h %a %A %y %C %F %T %D %R %z %:z %s %n %t %%), the layout
// must name a year (or be a Unix time), and a timestamp formatted with it
// must parse back.
func ValidateLayout(layout string) error {
	_, err := layoutInfo(layout)
	return err
}

func layoutInfo(layout string) (hasOffset bool, err error) {
	if strings.TrimSpace(layout) == "" {
		return false, errors.New("layout is empty")
	}
	hasYear, hour12, ampm := false, false, false
	for i := 0; i < len(layout); i++ {
		if layout[i] != '%' {
			continue
		}
		i++
		if i == len(layout) {
			return false, errors.New(`layout ends with a lone "%"`)
		}
		c := layout[i]
		if c == ':' {
			// Only %:z is meaningful.
			if i+1 >= len(layout) || layout[i+1] != 'z' {
				return false, errors.New(`"%:" must be followed by "z"`)
			}
			i++
			c = 'z'
		}
		if !strings.ContainsRune(layoutDirectives, rune(c)) {
			return false, fmt.Errorf("unsupported directive %%%c", c)
		}
		switch c {
		case 'Y', 'y', 'F', 'D':
			hasYear = true
		case 's':
			hasYear, hasOffset = true, true
		case 'z':
			hasOffset = true
		case 'I', 'l':
			hour12 = true
		case 'p', 'P':
			ampm = true
		}
	}
	if !hasYear {
		return false, errors.New("layout has no year (%Y, %y, %F, %D or %s)")
	}
	if hour12 && !ampm {
		return false, errors.New("a 12-hour clock (%I or %l) needs %p or %P, or afternoon times read as morning")
	}
	ref := time.Date(2021, time.October, 31, 14, 30, 15, 250000000, time.FixedZone("", 3600))
	if _, err := timefmt.Parse(timefmt.Format(ref, layout), layout); err != nil {
		return false, errors.New("a timestamp written with the layout does not parse back with it")
	}
	return hasOffset, nil
}

// fieldsRolledOver reports whether t, parsed from s with layout, has been
// normalized away from what s says (February 30 read as March 2, second
// 60 as the next minute, day 366 of a common year as January 1): it
// formats t back with the layout and compares the runs of digits of both
// texts as numbers. A run of six digits in the formatted text (a %f
// fraction) also matches a shorter run that pads to it with zeros.
func fieldsRolledOver(s, layout string, t time.Time) bool {
	in, out := digitRuns(s), digitRuns(timefmt.Format(t, layout))
	if len(in) != len(out) {
		return true
	}
	for i := range in {
		if numEqual(in[i], out[i]) {
			continue
		}
		if len(out[i]) == 6 && len(in[i]) < 6 && in[i]+strings.Repeat("0", 6-len(in[i])) == out[i] {
			continue
		}
		return true
	}
	return false
}

func digitRuns(s string) []string {
	var runs []string
	start := -1
	for i := 0; i <= len(s); i++ {
		digit := i < len(s) && s[i] >= '0' && s[i] <= '9'
		switch {
		case digit && start < 0:
			start = i
		case !digit && start >= 0:
			runs = append(runs, s[start:i])
			start = -1
		}
	}
	return runs
}

// numEqual compares two digit runs as numbers (leading zeros ignored).
func numEqual(a, b string) bool {
	a, b = strings.TrimLeft(a, "0"), strings.TrimLeft(b, "0")
	return a == b
}
