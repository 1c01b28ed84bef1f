package synth

import (
	"math"

	"github.com/flowcat-catalog/flowcat/schema"
)

// Peak is one bump of extra arrivals in a site's day: a Gaussian bump of the
// arrival rate centred on a local clock hour.
type Peak struct {
	Hour   float64 // local clock hour of the centre, e.g. 10.5 for 10:30
	Width  float64 // standard deviation of the bump, in hours
	Height float64 // extra arrivals per hour at the centre
}

// Activity is one service step a case waits for and then receives.
// The service time in minutes is lognormal: its natural log is normal with
// mean MeanLog and standard deviation SDLog.
type Activity struct {
	Name    string  // activity name as the site writes it, e.g. "triage"
	Queue   string  // queue the case waits in before this step
	MeanLog float64 // mean of log(service minutes)
	SDLog   float64 // standard deviation of log(service minutes)
	// Patience is the mean number of minutes a waiting case stays before it
	// abandons; each case's patience is exponential with this mean. Zero
	// means a case waits as long as some server will still come on duty.
	Patience float64
	// Staff is the number of servers on duty in each local clock hour.
	// A service that has started runs to its end even past the hour.
	Staff [24]int
	// StaffPrefix starts the pseudonymous staff refs, e.g. "N" gives "N-0042".
	StaffPrefix string
}

// Weighted is one value of a categorical attribute and its relative weight.
type Weighted struct {
	Value  string
	Weight float64
}

// Site is one partner site of a scenario: its export format, its own event
// codes, its opening hours, its arrival rate over the day and its service
// steps. Sites are plain data; change a field to vary a scenario.
type Site struct {
	Code string // site code, the value of the schema's site field
	Name string // display name

	// Format is the export format: "csv" writes the clinic's column set
	// (VisitRef;PatientRef;Step;StaffRef;EvCode;Stamp;Area;Triage;Note),
	// "jsonl" the phone line's keys (call, caller, nurse, what, ts, line,
	// channel, disposition).
	Format    string
	Delimiter rune   // field delimiter of a CSV export
	Zone      string // IANA zone of the site's local clock
	// Layout is the strftime-style layout of the export's wall-clock
	// timestamps; empty means RFC 3339 with a numeric offset.
	Layout string
	// Codes are the site's own event codes; an event type without a code is
	// not written by this site (a phone line has no separate enqueue).
	Codes map[schema.EventType]string
	// UnknownCode is the code of the planted unknown-code defect: a code the
	// site uses but the profile does not map.
	UnknownCode string

	OpenHour, CloseHour float64     // arrivals are accepted in [OpenHour, CloseHour) local time
	Base                [24]float64 // arrivals per hour outside the peaks, by local clock hour
	Peaks               []Peak      // bumps of extra arrivals
	WeekendFactor       float64     // multiplies the whole rate on Saturdays and Sundays

	// Register is the range, in minutes, from arrival to joining the first
	// queue (reception); Gap the range from completing one step to joining
	// the next queue; Leave the range from the last step to departure.
	Register, Gap, Leave [2]float64
	Steps                []Activity // the service steps every case passes in order

	CasePrefix    string  // starts every case ref
	SubjectPrefix string  // starts every subject ref
	ReturnShare   float64 // share of cases whose subject comes from the returning population
	Population    int     // size of the returning-subject population

	Priorities []Weighted // priority levels, assigned when the first step completes
	Lines      []Weighted // when set, each case waits in the queue named by its line
	Channels   []Weighted // contact channels
	Outcomes   []Weighted // outcomes written when the last step completes
	Notes      []string   // free-text notes, written on a few rows (CSV only)
	NoteShare  float64    // share of rows that carry a note
}

// Rate returns the site's arrival rate, in arrivals per hour, at local clock
// hour h (0 <= h < 24, fractional), on a weekend day or not.
func (s *Site) Rate(h float64, weekend bool) float64 {
	if h < s.OpenHour || h >= s.CloseHour {
		return 0
	}
	i := int(h)
	if i < 0 || i > 23 {
		return 0
	}
	r := s.Base[i]
	for _, p := range s.Peaks {
		d := (h - p.Hour) / p.Width
		r += p.Height * math.Exp(-d*d/2)
	}
	if weekend {
		r *= s.WeekendFactor
	}
	return r
}

// rateBound is an upper bound of Rate over the day, the rate of the
// homogeneous process that thinning draws candidates from.
func (s *Site) rateBound(weekend bool) float64 {
	m := 0.0
	for _, b := range s.Base {
		m = math.Max(m, b)
	}
	for _, p := range s.Peaks {
		m += p.Height
	}
	if weekend && s.WeekendFactor > 1 {
		m *= s.WeekendFactor
	}
	return m
}

func staffPlan(spans ...[3]int) (a [24]int) {
	for _, s := range spans {
		for h := s[0]; h < s[1]; h++ {
			a[h] = s[2]
		}
	}
	return a
}

// walkinSite is the invented walk-in clinic: semicolon CSV, wall-clock
// times, own codes, a free-text note column, open 08:00-20:00.
func walkinSite() Site {
	var base [24]float64
	for h := 8; h < 20; h++ {
		base[h] = 4
	}
	return Site{
		Code:      "qb-walkin",
		Name:      "Quillon Bay Walk-in Clinic",
		Format:    "csv",
		Delimiter: ';',
		Zone:      "America/Halifax",
		Layout:    "%d.%m.%Y %H:%M:%S",
		Codes: map[schema.EventType]string{
			schema.Arrival: "REG", schema.Enqueue: "QIN", schema.Start: "BEG",
			schema.Complete: "END", schema.Abandon: "LWBS", schema.Departure: "OUT",
		},
		UnknownCode:   "HLD",
		OpenHour:      8,
		CloseHour:     20,
		Base:          base,
		Peaks:         []Peak{{Hour: 10.5, Width: 1, Height: 7}, {Hour: 18, Width: 1, Height: 6}},
		WeekendFactor: 0.65,
		Register:      [2]float64{1, 4},
		Gap:           [2]float64{0, 2},
		Leave:         [2]float64{1, 8},
		Steps: []Activity{
			{Name: "triage", Queue: "walkin", MeanLog: math.Log(6), SDLog: 0.4, Patience: 60,
				Staff: staffPlan([3]int{8, 10, 1}, [3]int{10, 13, 2}, [3]int{13, 17, 1}, [3]int{17, 20, 2}, [3]int{20, 22, 1}), StaffPrefix: "N"},
			{Name: "consult", Queue: "exam", MeanLog: math.Log(15), SDLog: 0.5, Patience: 120,
				Staff: staffPlan([3]int{8, 10, 2}, [3]int{10, 13, 3}, [3]int{13, 17, 2}, [3]int{17, 21, 3}, [3]int{21, 23, 2}), StaffPrefix: "D"},
		},
		CasePrefix:    "W",
		SubjectPrefix: "QBP-",
		ReturnShare:   0.35,
		Population:    600,
		Priorities:    []Weighted{{"1", 1}, {"2", 6}, {"3", 30}, {"4", 45}, {"5", 18}},
		Notes: []string{
			"brought own medication list",
			"interpreter requested",
			"asked about parking validation",
			"wheelchair needed at door",
			"came back; same complaint as last week",
			`says "it is getting worse"`,
			"accompanied by carer",
			"allergy band applied",
			"prefers text reminders",
			"waited outside; returned at call",
		},
		NoteShare: 0.08,
	}
}

// nurselineSite is the invented nurse advice line: JSON Lines, RFC 3339
// timestamps with offset, 24-hour service with low night volume.
func nurselineSite() Site {
	var base [24]float64
	for h := range base {
		switch {
		case h < 7:
			base[h] = 3
		case h < 8:
			base[h] = 7
		case h < 22:
			base[h] = 12
		default:
			base[h] = 6
		}
	}
	return Site{
		Code:   "qb-nurseline",
		Name:   "Quillon Bay Nurse Advice Line",
		Format: "jsonl",
		Zone:   "America/Halifax",
		Codes: map[schema.EventType]string{
			schema.Arrival: "offered", schema.Start: "answered",
			schema.Complete: "ended", schema.Abandon: "hungup",
		},
		UnknownCode:   "held",
		OpenHour:      0,
		CloseHour:     24,
		Base:          base,
		Peaks:         []Peak{{Hour: 10.5, Width: 1.2, Height: 14}, {Hour: 19, Width: 1.2, Height: 12}},
		WeekendFactor: 1.15,
		Steps: []Activity{
			{Name: "advice", Queue: "general", MeanLog: math.Log(9), SDLog: 0.55, Patience: 4,
				Staff: staffPlan([3]int{0, 7, 1}, [3]int{7, 9, 3}, [3]int{9, 13, 5}, [3]int{13, 17, 3}, [3]int{17, 22, 5}, [3]int{22, 24, 2}), StaffPrefix: "N"},
		},
		CasePrefix:    "NL",
		SubjectPrefix: "K-",
		ReturnShare:   0.25,
		Population:    2500,
		Lines:         []Weighted{{"general", 80}, {"paediatric", 20}},
		Channels:      []Weighted{{"phone", 92}, {"callback", 8}},
		Outcomes:      []Weighted{{"self-care", 45}, {"see-gp", 30}, {"walk-in", 15}, {"emergency", 8}, {"ambulance", 2}},
	}
}
