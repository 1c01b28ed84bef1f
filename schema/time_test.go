package schema

import (
	"errors"
	"testing"
	"time"
)

func mustZone(t testing.TB, name string) *time.Location {
	t.Helper()
	loc, err := time.LoadLocation(name)
	if err != nil {
		t.Fatal(err)
	}
	return loc
}

func mustInstant(t testing.TB, s string) time.Time {
	t.Helper()
	v, err := time.Parse(time.RFC3339Nano, s)
	if err != nil {
		t.Fatal(err)
	}
	return v
}

// TestParseTimeRFC3339Examples checks the examples of RFC 3339 section 5.8.
func TestParseTimeRFC3339Examples(t *testing.T) {
	ams := mustZone(t, "Europe/Amsterdam") // a zone must not matter for text with an offset
	tests := []struct {
		in   string
		want time.Time
	}{
		// RFC 3339 section 5.8: "20 minutes and 50.52 seconds after the 23rd hour of April 12th, 1985 in UTC".
		{"1985-04-12T23:20:50.52Z", time.Date(1985, 4, 12, 23, 20, 50, 520000000, time.UTC)},
		// RFC 3339 section 5.8: 39 minutes 57 seconds after the 16th hour of December 19th, 1996
		// with an offset of -08:00 from UTC (Pacific Standard Time).
		{"1996-12-19T16:39:57-08:00", time.Date(1996, 12, 20, 0, 39, 57, 0, time.UTC)},
		// RFC 3339 section 5.8: "Note that this is equivalent to 1996-12-20T00:39:57Z in UTC."
		{"1996-12-20T00:39:57Z", time.Date(1996, 12, 20, 0, 39, 57, 0, time.UTC)},
		// RFC 3339 section 5.8: 1937-01-01T12:00:27.87+00:20, Netherlands time (offset +00:20).
		{"1937-01-01T12:00:27.87+00:20", time.Date(1937, 1, 1, 11, 40, 27, 870000000, time.UTC)},
		// RFC 3339 section 5.6 allows 't', 'z' and (NOTE) a space for 'T'.
		{"1985-04-12t23:20:50.52z", time.Date(1985, 4, 12, 23, 20, 50, 520000000, time.UTC)},
		{"1985-04-12 23:20:50.52Z", time.Date(1985, 4, 12, 23, 20, 50, 520000000, time.UTC)},
		// ISO 8601 basic offset +hhmm and hour-only offset.
		{"1996-12-19T16:39:57-0800", time.Date(1996, 12, 20, 0, 39, 57, 0, time.UTC)},
		{"1996-12-19T16:39:57-08", time.Date(1996, 12, 20, 0, 39, 57, 0, time.UTC)},
		// Nine fractional digits survive; a comma is ISO 8601's decimal sign too.
		{"2020-01-02T03:04:05.123456789Z", time.Date(2020, 1, 2, 3, 4, 5, 123456789, time.UTC)},
		{"2020-01-02T03:04:05,5Z", time.Date(2020, 1, 2, 3, 4, 5, 500000000, time.UTC)},
	}
	for _, tc := range tests {
		got, err := ParseTime(tc.in, "", ams, LocalTimePolicy{})
		if err != nil {
			t.Errorf("ParseTime(%q): %v", tc.in, err)
			continue
		}
		if !got.Equal(tc.want) {
			t.Errorf("ParseTime(%q) = %v, want %v", tc.in, got, tc.want)
		}
	}
	// RFC 3339 section 5.8: the two examples name the same instant.
	a, _ := ParseTime("1996-12-19T16:39:57-08:00", "", nil, LocalTimePolicy{})
	b, _ := ParseTime("1996-12-20T00:39:57Z", "", nil, LocalTimePolicy{})
	if !a.Equal(b) {
		t.Errorf("RFC 3339 5.8 equivalent instants differ: %v vs %v", a, b)
	}
}

// TestParseTimeLeapSecond documents a decision: RFC 3339 section 5.8 gives
// the leap seconds 1990-12-31T23:59:60Z and 1990-12-31T15:59:60-08:00 as
// valid, but time.Time cannot hold second 60. Rather than roll them into
// the next minute they are rejected as bad timestamps.
func TestParseTimeLeapSecond(t *testing.T) {
	for _, in := range []string{"1990-12-31T23:59:60Z", "1990-12-31T15:59:60-08:00"} {
		if _, err := ParseTime(in, "", nil, LocalTimePolicy{}); !errors.Is(err, ErrBadTimestamp) {
			t.Errorf("ParseTime(%q) err = %v, want ErrBadTimestamp (leap second, RFC 3339 5.8, rejected by decision)", in, err)
		}
	}
}

func TestParseTimeBad(t *testing.T) {
	for _, in := range []string{
		"", "yesterday", "2021-13-01", "2021-02-29", "2021-02-28T24:00:00", "2021-02-28T10:60",
		"2021-02-28T10:00:00.", "2021-02-28T10:00:00+25:00", "2021-02-28X10:00", "2021-02-28T10:00:00Zjunk",
		"2021/02/28", "20210228",
	} {
		if _, err := ParseTime(in, "", nil, LocalTimePolicy{}); !errors.Is(err, ErrBadTimestamp) {
			t.Errorf("ParseTime(%q) err = %v, want ErrBadTimestamp", in, err)
		}
	}
}

func TestParseTimeWallClock(t *testing.T) {
	ams := mustZone(t, "Europe/Amsterdam")
	tests := []struct {
		in, layout string
		want       string
	}{
		{"2021-06-01T10:00:00", "", "2021-06-01T10:00:00+02:00"}, // summer time (CEST, UTC+2)
		{"2021-01-15 10:00", "", "2021-01-15T10:00:00+01:00"},    // winter time (CET, UTC+1)
		{"2021-06-01", "", "2021-06-01T00:00:00+02:00"},          // a date is local midnight
		{"2014/10/22 11:15:41.000", "%Y/%m/%d %H:%M:%S.%f", "2014-10-22T11:15:41+02:00"},
		{"2014/10/27 11:15:41.250", "%Y/%m/%d %H:%M:%S.%f", "2014-10-27T11:15:41.25+01:00"},
		{"22.10.2014 11:15", "%d.%m.%Y %H:%M", "2014-10-22T11:15:00+02:00"},
		// With %z the text carries its offset and the zone is not used.
		{"2014-10-22 11:15:41 +0000", "%Y-%m-%d %H:%M:%S %z", "2014-10-22T11:15:41Z"},
		{"1414000000", "%s", "2014-10-22T17:46:40Z"},
	}
	for _, tc := range tests {
		got, err := ParseTime(tc.in, tc.layout, ams, LocalTimePolicy{})
		if err != nil {
			t.Errorf("ParseTime(%q, %q): %v", tc.in, tc.layout, err)
			continue
		}
		if want := mustInstant(t, tc.want); !got.Equal(want) {
			t.Errorf("ParseTime(%q, %q) = %v, want %v", tc.in, tc.layout, got, want)
		}
	}
	if _, err := ParseTime("2014/10/22", "%Y/%m/%d %H", ams, LocalTimePolicy{}); !errors.Is(err, ErrBadTimestamp) {
		t.Errorf("short text: err = %v, want ErrBadTimestamp", err)
	}
}

// TestParseTimeDaylightSaving covers a gap and an overlap of two zones
// under every policy. Transition times are those of the IANA tz database:
// the EU changes at 01:00 UTC on the last Sunday of March and of October,
// the US at 02:00 local time on the second Sunday of March and the first
// Sunday of November (from memory; the embedded tzdata is the authority).
func TestParseTimeDaylightSaving(t *testing.T) {
	ams := mustZone(t, "Europe/Amsterdam")
	nyc := mustZone(t, "America/New_York")
	rej := LocalTimePolicy{Ambiguous: AmbiguousReject, Nonexistent: NonexistentReject}
	earlier := LocalTimePolicy{Ambiguous: AmbiguousEarlier, Nonexistent: NonexistentLater}
	later := LocalTimePolicy{Ambiguous: AmbiguousLater, Nonexistent: NonexistentLater}
	tests := []struct {
		name    string
		in      string
		loc     *time.Location
		policy  LocalTimePolicy
		want    string // instant, or empty when err is expected
		wantErr error
	}{
		// 2021-03-28 02:00 CET clocks went to 03:00 CEST: 02:30 does not exist.
		{"ams gap reject", "2021-03-28T02:30:00", ams, rej, "", ErrNonexistentLocal},
		{"ams gap zero policy rejects", "2021-03-28T02:30:00", ams, LocalTimePolicy{}, "", ErrNonexistentLocal},
		{"ams gap later", "2021-03-28T02:30:00", ams, later, "2021-03-28T03:30:00+02:00", nil},
		{"ams before gap", "2021-03-28T01:59:59", ams, rej, "2021-03-28T01:59:59+01:00", nil},
		{"ams after gap", "2021-03-28T03:00:00", ams, rej, "2021-03-28T03:00:00+02:00", nil},
		// 2021-10-31 03:00 CEST clocks went back to 02:00 CET: 02:30 occurs twice.
		{"ams overlap reject", "2021-10-31T02:30:00", ams, rej, "", ErrAmbiguousLocal},
		{"ams overlap earlier", "2021-10-31T02:30:00", ams, earlier, "2021-10-31T02:30:00+02:00", nil},
		{"ams overlap later", "2021-10-31T02:30:00", ams, later, "2021-10-31T02:30:00+01:00", nil},
		{"ams after overlap", "2021-10-31T03:00:00", ams, rej, "2021-10-31T03:00:00+01:00", nil},
		// 2021-03-14 02:00 EST clocks went to 03:00 EDT.
		{"nyc gap reject", "2021-03-14 02:30", nyc, rej, "", ErrNonexistentLocal},
		{"nyc gap later", "2021-03-14 02:30", nyc, later, "2021-03-14T03:30:00-04:00", nil},
		// 2021-11-07 02:00 EDT clocks went back to 01:00 EST: 01:30 occurs twice.
		{"nyc overlap reject", "2021-11-07 01:30", nyc, rej, "", ErrAmbiguousLocal},
		{"nyc overlap earlier", "2021-11-07 01:30", nyc, earlier, "2021-11-07T01:30:00-04:00", nil},
		{"nyc overlap later", "2021-11-07 01:30", nyc, later, "2021-11-07T01:30:00-05:00", nil},
		// An offset in the text is an instant: no daylight-saving question.
		{"offset wins", "2021-10-31T02:30:00+01:00", ams, rej, "2021-10-31T01:30:00Z", nil},
		// UTC has no changes.
		{"utc", "2021-10-31T02:30:00", time.UTC, rej, "2021-10-31T02:30:00Z", nil},
	}
	for _, tc := range tests {
		got, err := ParseTime(tc.in, "", tc.loc, tc.policy)
		if tc.wantErr != nil {
			if !errors.Is(err, tc.wantErr) {
				t.Errorf("%s: err = %v, want %v", tc.name, err, tc.wantErr)
			}
			continue
		}
		if err != nil {
			t.Errorf("%s: %v", tc.name, err)
			continue
		}
		if want := mustInstant(t, tc.want); !got.Equal(want) {
			t.Errorf("%s: got %v, want %v", tc.name, got.In(tc.loc), want)
		}
	}
	// The layout path resolves wall-clock times the same way.
	if _, err := ParseTime("2021/10/31 02:30:00.000", "%Y/%m/%d %H:%M:%S.%f", ams, rej); !errors.Is(err, ErrAmbiguousLocal) {
		t.Errorf("layout overlap: err = %v, want ErrAmbiguousLocal", err)
	}
}

func TestValidateLayout(t *testing.T) {
	good := []string{"%Y/%m/%d %H:%M:%S.%f", "%F %T", "%d.%m.%Y", "%Y-%m-%dT%H:%M:%S%z", "%Y-%m-%dT%H:%M:%S%:z", "%s", "%Y%m%d%H%M%S", "%d %b %Y %I:%M %p"}
	for _, l := range good {
		if err := ValidateLayout(l); err != nil {
			t.Errorf("ValidateLayout(%q): %v", l, err)
		}
	}
	bad := []string{"", "%Q", "%Y-%m-%d %Z", "%H:%M", "%Y-%m-%d %", "%Y %-m", "%c", "%Y %:M"}
	for _, l := range bad {
		if err := ValidateLayout(l); err == nil {
			t.Errorf("ValidateLayout(%q) = nil, want an error", l)
		}
	}
}

func BenchmarkParseTimeLayout(b *testing.B) {
	ams := mustZone(b, "Europe/Amsterdam")
	tp := timeParser{layout: "%Y/%m/%d %H:%M:%S.%f", loc: ams, policy: LocalTimePolicy{}.normalized()}
	for b.Loop() {
		if _, err := tp.parse("2014/10/22 11:15:41.000"); err != nil {
			b.Fatal(err)
		}
	}
}

func BenchmarkParseTimeAuto(b *testing.B) {
	ams := mustZone(b, "Europe/Amsterdam")
	tp := timeParser{loc: ams, policy: LocalTimePolicy{}.normalized()}
	for b.Loop() {
		if _, err := tp.parse("2014-10-22T11:15:41.000"); err != nil {
			b.Fatal(err)
		}
	}
}

// TestTimeParserCache walks wall-clock times across a year's changes with
// one parser (whose zone-period cache is then exercised) and checks every
// answer against the uncached resolution.
func TestTimeParserCache(t *testing.T) {
	for _, zone := range []string{"Europe/Amsterdam", "America/New_York", "Australia/Lord_Howe", "UTC"} {
		loc := mustZone(t, zone)
		for _, pol := range []LocalTimePolicy{{}, {Ambiguous: AmbiguousLater, Nonexistent: NonexistentLater}} {
			tp := timeParser{loc: loc, policy: pol.normalized()}
			w := time.Date(2020, 12, 25, 0, 0, 0, 0, time.UTC)
			for end := w.AddDate(1, 1, 0); w.Before(end); w = w.Add(7 * time.Minute) {
				got, gotErr := tp.local(w)
				want, wantErr := resolveLocal(w, loc, pol.normalized())
				if gotErr != wantErr || !got.Equal(want) {
					t.Fatalf("%s %v: cached %v %v, uncached %v %v", zone, w, got, gotErr, want, wantErr)
				}
			}
		}
	}
}

// TestParseTimeRange: instants outside the years 0001-9999 are refused,
// whatever form they come in (a snapshot's JSON metadata and RFC 3339's
// four-digit years cannot hold them).
func TestParseTimeRange(t *testing.T) {
	for _, c := range []struct {
		in, layout string
		ok         bool
	}{
		{"0001-01-01T00:00:00Z", "", true},
		{"9999-12-31T23:59:59Z", "", true},
		{"0000-01-01T00:00:00+01:00", "", false}, // year -1 in UTC
		{"9999-12-31T23:30:00-01:00", "", false}, // year 10000 in UTC
		{"99999999999999", "%s", false},
		{"1700000000", "%s", true},
	} {
		_, err := ParseTime(c.in, c.layout, time.UTC, LocalTimePolicy{})
		if c.ok != (err == nil) {
			t.Errorf("ParseTime(%q, %q) = %v, want ok %v", c.in, c.layout, err, c.ok)
		}
		if !c.ok && err != nil && !errors.Is(err, ErrTimestampRange) && !errors.Is(err, ErrBadTimestamp) {
			t.Errorf("ParseTime(%q): error %v is neither range nor bad timestamp", c.in, err)
		}
	}
}

// TestLayoutNoRollover: a layout reading never normalizes an impossible
// date or time into another instant; it rejects the row.
func TestLayoutNoRollover(t *testing.T) {
	for _, c := range []struct {
		in, layout string
		want       string // RFC 3339 UTC, or "" for rejected
	}{
		{"2021-02-30 10:00:00", "%Y-%m-%d %H:%M:%S", ""},
		{"2021-12-31 23:59:60", "%Y-%m-%d %H:%M:%S", ""}, // leap second, as in auto-detection
		{"2021-366 10:00", "%Y-%j %H:%M", ""},
		{"2020-366 10:00", "%Y-%j %H:%M", "2020-12-31T10:00:00Z"},
		{"2021-02-28 10:00:00.5", "%Y-%m-%d %H:%M:%S.%f", "2021-02-28T10:00:00.5Z"},
		{"2021-02-28 10:00:00.000", "%Y-%m-%d %H:%M:%S.%f", "2021-02-28T10:00:00Z"},
		{"28 Feb 2021 02:30 PM", "%d %b %Y %I:%M %p", "2021-02-28T14:30:00Z"},
		{"1/2/2021 9:05", "%m/%d/%Y %H:%M", "2021-01-02T09:05:00Z"},
	} {
		got, err := ParseTime(c.in, c.layout, time.UTC, LocalTimePolicy{})
		switch {
		case c.want == "" && err == nil:
			t.Errorf("ParseTime(%q, %q) = %v, want rejected", c.in, c.layout, got)
		case c.want != "" && (err != nil || got.Format(time.RFC3339Nano) != c.want):
			t.Errorf("ParseTime(%q, %q) = %v, %v; want %s", c.in, c.layout, got, err, c.want)
		}
	}
	// A 12-hour clock without AM/PM would read every afternoon as morning.
	if err := ValidateLayout("%Y-%m-%d %I:%M"); err == nil {
		t.Error("ValidateLayout accepted a 12-hour clock without AM/PM")
	}
}
