package synth

import (
	"errors"
	"fmt"
	"io"
	"time"
)

// Sentinel errors of Night and Site.
var (
	ErrUnknownSite = errors.New("unknown site")       // no site of the scenario has the code
	ErrDayRange    = errors.New("day out of range")   // day is not in [0, Days)
	ErrFormat      = errors.New("unsupported format") // a site's Format or Layout cannot be written
)

// Defect kinds planted in a night's export; the keys of Stats.Defects.
// Ingest sees unknown_code and bad_timestamp as the schema reasons of the
// same names and an empty case id as missing_required; duplicates and clock
// skew pass ingest and are quality findings.
const (
	DefectUnknownCode  = "unknown_code"  // a row with an event code the profile does not map
	DefectClockSkew    = "clock_skew"    // a start stamped before its case's arrival
	DefectDuplicate    = "duplicate_row" // an exact copy of another row
	DefectEmptyCaseID  = "empty_case_id" // a row whose case id is empty
	DefectBadTimestamp = "bad_timestamp" // a row whose timestamp does not parse
)

// DefectKinds lists every planted defect kind.
var DefectKinds = []string{DefectUnknownCode, DefectClockSkew, DefectDuplicate, DefectEmptyCaseID, DefectBadTimestamp}

// Scenario is an invented network of sites and a run of days. Its exports
// are a pure function of its fields: the same scenario writes the same bytes.
type Scenario struct {
	Seed uint64
	// Start is the first day. Only its calendar date (in its own location)
	// counts: day d of a site begins at local midnight of Start's date plus
	// d days in the site's zone.
	Start time.Time
	Days  int
	// Defects plants one or two defects of each kind in every night's export.
	Defects bool
	Sites   []Site
}

// Stats counts what one Night wrote.
type Stats struct {
	Events    int            // data rows written, planted defect rows included
	Cases     int            // cases (visits, calls) generated
	Abandoned int            // cases that left a queue unserved
	Defects   map[string]int // planted defects by kind; every kind is present, zero when none
}

// QuillonBay returns the invented scenario of Quillon Bay Health: a walk-in
// clinic ("qb-walkin", semicolon CSV) and a nurse advice line
// ("qb-nurseline", JSON Lines), over days days from firstDay, with defects.
func QuillonBay(seed uint64, firstDay time.Time, days int) *Scenario {
	return &Scenario{
		Seed:    seed,
		Start:   firstDay,
		Days:    days,
		Defects: true,
		Sites:   []Site{walkinSite(), nurselineSite()},
	}
}

// Site returns the site with the given code and its index in Sites.
func (s *Scenario) Site(code string) (*Site, int, error) {
	for i := range s.Sites {
		if s.Sites[i].Code == code {
			return &s.Sites[i], i, nil
		}
	}
	return nil, -1, fmt.Errorf("site %q: %w", code, ErrUnknownSite)
}

// DayStart returns the instant day begins at the site: local midnight.
func (s *Scenario) DayStart(site *Site, day int) (time.Time, error) {
	loc, err := time.LoadLocation(site.Zone)
	if err != nil {
		return time.Time{}, fmt.Errorf("zone: %w", err)
	}
	y, m, d := s.Start.Date()
	return time.Date(y, m, d+day, 0, 0, 0, 0, loc), nil
}

// Night writes the export of one site for one day (the nightly upload) to
// w, in that site's own format. The export holds every case that arrived on
// that local day, with all its events, sorted by time; a case that runs
// past midnight keeps its late events in the export of its arrival day.
// Night holds one day's cases of one site in memory (hundreds), never more.
func (s *Scenario) Night(site string, day int, w io.Writer) (Stats, error) {
	st := &Stats{Defects: map[string]int{}}
	for _, k := range DefectKinds {
		st.Defects[k] = 0
	}
	si, idx, err := s.Site(site)
	if err != nil {
		return *st, fmt.Errorf("night: %w", err)
	}
	if day < 0 || day >= s.Days {
		return *st, fmt.Errorf("night: day %d of %d: %w", day, s.Days, ErrDayRange)
	}
	start, err := s.DayStart(si, day)
	if err != nil {
		return *st, fmt.Errorf("night: %w", err)
	}
	g := newDay(s.Seed, si, idx, day, start)
	vs := g.simulate()
	rows := g.rows(vs)
	if s.Defects {
		rows = g.plant(vs, rows, st.Defects)
	}
	sortRows(rows)
	st.Cases = len(vs)
	for _, v := range vs {
		if v.abandoned {
			st.Abandoned++
		}
	}
	st.Events = len(rows)
	if err := g.write(w, rows); err != nil {
		return *st, fmt.Errorf("night: %w", err)
	}
	return *st, nil
}
