package quality

import (
	"cmp"
	"iter"
	"maps"
	"math"
	"slices"
	"time"

	"github.com/flowcat-catalog/flowcat/schema"
)

// ReportVersion is the version of the report's JSON format. Adding a
// dimension, a finding code or an object member keeps the version;
// renaming or removing one, or changing a formula, bumps it.
const ReportVersion = "1"

// Dimension names. Later reports may add dimensions; consumers should
// ignore names they do not know.
const (
	DimValidity     = "validity"
	DimCompleteness = "completeness"
	DimTimestamps   = "timestamps"
	DimUniqueness   = "uniqueness"
)

// Finding codes that are not rejection reasons. Findings derived from
// rejected rows use the [schema.Reason] as their code.
const (
	CodeEmptyValue          = "empty_value"           // an optional field is empty
	CodeLaterThanUpload     = "later_than_upload"     // event after the upload time
	CodeOutsideWindow       = "outside_window"        // event outside the declared window
	CodeStartBeforeArrival  = "start_before_arrival"  // a start earlier than its case's arrival or enqueue
	CodeCompleteBeforeStart = "complete_before_start" // a complete earlier than its case's start
	CodeExactDuplicate      = "exact_duplicate"       // a copy of an earlier event
	CodeOrderBreach         = "order_breach"          // the ingest broke the time order (internal)
)

// dimensionWeights are the nominal weights of the overall score, in report
// order; SCORING.md states the same numbers.
var dimensionWeights = [...]struct {
	name   string
	weight float64
}{
	{DimValidity, 0.35},
	{DimCompleteness, 0.20},
	{DimTimestamps, 0.30},
	{DimUniqueness, 0.15},
}

// Report is the quality report of one upload. Its JSON member names are
// stable; lists are never null.
//
// Scores run from 0 to 100 and are rounded to 0.1; a score is null when
// its dimension had nothing to measure:
//
//	validity     = 100 * accepted / total rows
//	completeness = 100 * mean share of non-empty values over the scored
//	               optional fields (those in Options.MappedFields, or, when
//	               none are given, those with at least one value)
//	timestamps   = 100 * (1 - rows with any timestamp problem / total rows)
//	uniqueness   = 100 * (1 - exact duplicates / accepted rows)
//	score        = sum(weight * dimension score) / sum(weight), over the
//	               dimensions that have a score, from unrounded scores
//
// with weights validity 0.35, completeness 0.20, timestamps 0.30 and
// uniqueness 0.15 (see SCORING.md).
type Report struct {
	Version      string              `json:"version"`
	Score        *float64            `json:"score"`
	Rows         Rows                `json:"rows"`
	Rejections   []RejectionCount    `json:"rejections"`
	Completeness []FieldCompleteness `json:"completeness"`
	Timestamps   Timestamps          `json:"timestamps"`
	Uniqueness   Uniqueness          `json:"uniqueness"`
	TimeRange    TimeRange           `json:"time_range"`
	Sites        Sites               `json:"sites"`
	Dimensions   []Dimension         `json:"dimensions"`
	// Internal lists faults of the program rather than of the data (such
	// as order_breach); they do not enter any score.
	Internal []Finding `json:"internal"`
	// UnmappedColumns names the source columns the profile does not map;
	// ingest dropped them (they may hold free text or identifiers). The
	// ingest sets it; the accumulator does not see columns.
	UnmappedColumns []string `json:"unmapped_columns,omitempty"`
}

// Rows counts the source rows of the upload.
type Rows struct {
	Total    int64 `json:"total"` // accepted + rejected
	Accepted int64 `json:"accepted"`
	Rejected int64 `json:"rejected"`
}

// RejectionCount is how many rows were rejected for one reason.
type RejectionCount struct {
	Reason  schema.Reason `json:"reason"`
	Count   int64         `json:"count"`
	Samples []Sample      `json:"samples"`
}

// FieldCompleteness is how often a schema field holds a value among the
// accepted rows. Scored says whether it enters the completeness score.
type FieldCompleteness struct {
	Field    schema.Field `json:"field"`
	Required bool         `json:"required"`
	NonEmpty int64        `json:"non_empty"`
	Share    float64      `json:"share"` // NonEmpty / accepted rows; 0 when none
	Scored   bool         `json:"scored"`
}

// Timestamps counts timestamp problems. A row may have several; RowsAffected
// counts each row once and includes the unparseable rows.
type Timestamps struct {
	Unparseable         Unparseable `json:"unparseable"`
	LaterThanUpload     int64       `json:"later_than_upload"`
	OutsideWindow       int64       `json:"outside_window"`
	StartBeforeArrival  int64       `json:"start_before_arrival"`
	CompleteBeforeStart int64       `json:"complete_before_start"`
	RowsAffected        int64       `json:"rows_affected"`
	UploadedAt          *time.Time  `json:"uploaded_at,omitempty"`
	WindowFrom          *time.Time  `json:"window_from,omitempty"`
	WindowTo            *time.Time  `json:"window_to,omitempty"`
}

// Unparseable counts the rows rejected because their time could not be
// read, by reason.
type Unparseable struct {
	Total            int64 `json:"total"`
	BadTimestamp     int64 `json:"bad_timestamp"`
	NonexistentLocal int64 `json:"nonexistent_local"`
	AmbiguousLocal   int64 `json:"ambiguous_local"`
}

// Uniqueness counts repeated events.
type Uniqueness struct {
	// ExactDuplicates counts events equal in every field to an earlier
	// event of the same file; the first copy is not counted.
	ExactDuplicates int64 `json:"exact_duplicates"`
}

// TimeRange is the earliest and latest occurred_at among accepted rows;
// both are null when there were none.
type TimeRange struct {
	First *time.Time `json:"first"`
	Last  *time.Time `json:"last"`
}

// Sites counts events per site. At most 1000 sites are told apart; the
// events of further sites are counted in Other.
type Sites struct {
	Distinct int         `json:"distinct"`
	Other    int64       `json:"other"`
	Counts   []SiteCount `json:"counts"` // by count, descending, then by site
}

// SiteCount is the number of accepted events of one site.
type SiteCount struct {
	Site  string `json:"site"`
	Count int64  `json:"count"`
}

// Dimension is one quality dimension: its score, its nominal weight in the
// overall score, the number of rows it was measured over, and findings.
type Dimension struct {
	Name     string    `json:"name"`
	Score    *float64  `json:"score"`
	Weight   float64   `json:"weight"`
	Rows     int64     `json:"rows"`
	Findings []Finding `json:"findings"`
}

// Finding is one kind of problem found, with how many rows have it, their
// share of the dimension's rows, where to look and why it matters. Only
// findings with a non-zero count are listed.
type Finding struct {
	Code    string       `json:"code"`
	Field   schema.Field `json:"field,omitempty"`
	Count   int64        `json:"count"`
	Share   float64      `json:"share"`
	Samples []Sample     `json:"samples"`
	Why     string       `json:"why"`
}

// Sample locates one row of a finding: its source line and, for accepted
// rows, the case pseudonym; for rejected rows, the column and field at
// fault when known. It never holds a field value.
type Sample struct {
	Line   int64        `json:"line"`
	CaseID string       `json:"case_id,omitempty"`
	Column string       `json:"column,omitempty"`
	Field  schema.Field `json:"field,omitempty"`
}

// RejectedShare is the share of rows rejected, 0 when there were no rows;
// a dataset's rejection threshold is compared against it.
func (r *Report) RejectedShare() float64 {
	return share(r.Rows.Rejected, r.Rows.Total)
}

// Dimension returns the dimension named name, or nil.
func (r *Report) Dimension(name string) *Dimension {
	for i := range r.Dimensions {
		if r.Dimensions[i].Name == name {
			return &r.Dimensions[i]
		}
	}
	return nil
}

// Findings yields every finding of every dimension, in report order.
func (r *Report) Findings() iter.Seq2[*Dimension, *Finding] {
	return func(yield func(*Dimension, *Finding) bool) {
		for i := range r.Dimensions {
			d := &r.Dimensions[i]
			for j := range d.Findings {
				if !yield(d, &d.Findings[j]) {
					return
				}
			}
		}
	}
}

// Why sentences, one per finding code.
var why = map[string]string{
	string(schema.ReasonMissingRequired):  "Rows without a site, case, event type or time cannot be placed on a case's timeline, so they are missing from the snapshot.",
	string(schema.ReasonUnknownCode):      "Rows whose code has no mapping are missing from the snapshot, so counts per event type are too low.",
	string(schema.ReasonBadTimestamp):     "Rows whose time cannot be read are missing from the snapshot, which lowers arrival counts and biases waits.",
	string(schema.ReasonNonexistentLocal): "A wall-clock time skipped by a daylight-saving change points to a clock or export fault, and such rows are missing from the snapshot.",
	string(schema.ReasonAmbiguousLocal):   "A wall-clock time repeated by a daylight-saving change cannot be placed on one instant, and such rows are missing from the snapshot.",
	string(schema.ReasonFieldCount):       "Rows with the wrong number of fields may be shifted or cut, so they are missing from the snapshot.",
	string(schema.ReasonMalformedRow):     "Rows that cannot be parsed are missing from the snapshot, so counts computed from it are too low.",
	string(schema.ReasonBadValue):         "Rows with a value of the wrong type are missing from the snapshot, so counts computed from it are too low.",
	CodeEmptyValue:                        "Rows without this value drop out of any analysis split or filtered by this field.",
	CodeLaterThanUpload:                   "Events dated after the upload cannot have happened yet, so their clock or time zone is likely wrong.",
	CodeOutsideWindow:                     "Events outside the declared period distort per-period counts and may belong to another export.",
	CodeStartBeforeArrival:                "A case served before it arrived gives a negative wait, which corrupts waiting-time statistics.",
	CodeCompleteBeforeStart:               "A service that ends before it begins gives a negative service time, which corrupts service-time statistics.",
	CodeExactDuplicate:                    "Repeated copies of one event inflate arrival and service counts.",
	CodeOrderBreach:                       "The ingest fed events out of time order, so duplicate and per-case checks skipped them; this is a program fault, not a data fault.",
}

func whyOf(code string) string {
	if s, ok := why[code]; ok {
		return s
	}
	return "Rejected rows are missing from the snapshot, so counts computed from it are too low."
}

// Report computes the report from the counts so far. It does not change
// the accumulator, so it may be called again after more input.
func (a *Accumulator) Report() *Report {
	total := a.accepted + a.rejected
	r := &Report{
		Version: ReportVersion,
		Rows:    Rows{Total: total, Accepted: a.accepted, Rejected: a.rejected},
	}

	// Rejections, by reason code.
	r.Rejections = []RejectionCount{}
	var invalid []Finding
	for _, reason := range slices.Sorted(maps.Keys(a.reasons)) {
		f := a.reasons[reason]
		r.Rejections = append(r.Rejections, RejectionCount{Reason: reason, Count: f.n, Samples: samples(f.samples)})
		invalid = append(invalid, a.findingOf(string(reason), "", f, total))
	}

	// Completeness, in schema order.
	mapped := map[schema.Field]bool{}
	for _, f := range a.opt.MappedFields {
		mapped[f] = true
	}
	r.Completeness = make([]FieldCompleteness, 0, numFields)
	var shareSum float64
	var scored int
	var empties []Finding
	for i, f := range schema.Fields {
		c := FieldCompleteness{
			Field:    f,
			Required: f.Required(),
			NonEmpty: a.nonEmpty[i],
			Share:    share(a.nonEmpty[i], a.accepted),
		}
		if !c.Required && a.accepted > 0 {
			if len(mapped) > 0 {
				c.Scored = mapped[f]
			} else {
				c.Scored = c.NonEmpty > 0
			}
		}
		if c.Scored {
			shareSum += c.Share
			scored++
			if n := a.accepted - c.NonEmpty; n > 0 {
				fd := a.findingOf(CodeEmptyValue, f, &finding{n: n, samples: a.emptySamples[i]}, a.accepted)
				empties = append(empties, fd)
			}
		}
		r.Completeness = append(r.Completeness, c)
	}

	// Timestamps.
	un := Unparseable{
		BadTimestamp:     a.count(schema.ReasonBadTimestamp),
		NonexistentLocal: a.count(schema.ReasonNonexistentLocal),
		AmbiguousLocal:   a.count(schema.ReasonAmbiguousLocal),
	}
	un.Total = un.BadTimestamp + un.NonexistentLocal + un.AmbiguousLocal
	r.Timestamps = Timestamps{
		Unparseable:         un,
		LaterThanUpload:     a.future.n,
		OutsideWindow:       a.outside.n,
		StartBeforeArrival:  a.startBeforeArrival.n,
		CompleteBeforeStart: a.completeBeforeStart.n,
		RowsAffected:        un.Total + a.timeRows,
		UploadedAt:          timePtr(a.opt.UploadedAt),
		WindowFrom:          timePtr(a.opt.WindowFrom),
		WindowTo:            timePtr(a.opt.WindowTo),
	}
	var timeFindings []Finding
	for _, reason := range []schema.Reason{schema.ReasonBadTimestamp, schema.ReasonNonexistentLocal, schema.ReasonAmbiguousLocal} {
		if f := a.reasons[reason]; f != nil {
			timeFindings = append(timeFindings, a.findingOf(string(reason), "", f, total))
		}
	}
	for _, c := range []struct {
		code string
		f    *finding
	}{
		{CodeLaterThanUpload, &a.future},
		{CodeOutsideWindow, &a.outside},
		{CodeStartBeforeArrival, &a.startBeforeArrival},
		{CodeCompleteBeforeStart, &a.completeBeforeStart},
	} {
		if c.f.n > 0 {
			timeFindings = append(timeFindings, a.findingOf(c.code, "", c.f, total))
		}
	}

	// Uniqueness.
	r.Uniqueness = Uniqueness{ExactDuplicates: a.dups.n}
	var dupFindings []Finding
	if a.dups.n > 0 {
		dupFindings = append(dupFindings, a.findingOf(CodeExactDuplicate, "", &a.dups, a.accepted))
	}

	// Time range and sites.
	if a.hasTime {
		r.TimeRange = TimeRange{First: timePtr(a.first), Last: timePtr(a.last)}
	}
	r.Sites = Sites{Distinct: len(a.sites), Other: a.siteOther, Counts: make([]SiteCount, 0, len(a.sites))}
	for s, n := range a.sites {
		r.Sites.Counts = append(r.Sites.Counts, SiteCount{Site: s, Count: *n})
	}
	slices.SortFunc(r.Sites.Counts, func(x, y SiteCount) int {
		return cmp.Or(cmp.Compare(y.Count, x.Count), cmp.Compare(x.Site, y.Site))
	})

	// Dimensions and the overall score.
	scores := map[string]*float64{}
	rows := map[string]int64{DimValidity: total, DimCompleteness: a.accepted, DimTimestamps: total, DimUniqueness: a.accepted}
	findings := map[string][]Finding{DimValidity: invalid, DimCompleteness: empties, DimTimestamps: timeFindings, DimUniqueness: dupFindings}
	if total > 0 {
		scores[DimValidity] = ptr(100 * float64(a.accepted) / float64(total))
		scores[DimTimestamps] = ptr(100 * (1 - float64(r.Timestamps.RowsAffected)/float64(total)))
	}
	if scored > 0 {
		scores[DimCompleteness] = ptr(100 * shareSum / float64(scored))
	}
	if a.accepted > 0 {
		scores[DimUniqueness] = ptr(100 * (1 - float64(a.dups.n)/float64(a.accepted)))
	}
	var sum, weights float64
	for _, dw := range dimensionWeights {
		d := Dimension{Name: dw.name, Weight: dw.weight, Rows: rows[dw.name], Findings: findings[dw.name]}
		if d.Findings == nil {
			d.Findings = []Finding{}
		}
		if s := scores[dw.name]; s != nil {
			sum += dw.weight * *s
			weights += dw.weight
			d.Score = ptr(round1(*s))
		}
		r.Dimensions = append(r.Dimensions, d)
	}
	if weights > 0 {
		r.Score = ptr(round1(sum / weights))
	}

	r.Internal = []Finding{}
	if a.orderBreaches.n > 0 {
		r.Internal = append(r.Internal, a.findingOf(CodeOrderBreach, "", &a.orderBreaches, a.accepted))
	}
	return r
}

func (a *Accumulator) count(reason schema.Reason) int64 {
	if f := a.reasons[reason]; f != nil {
		return f.n
	}
	return 0
}

func (a *Accumulator) findingOf(code string, field schema.Field, f *finding, of int64) Finding {
	return Finding{Code: code, Field: field, Count: f.n, Share: share(f.n, of), Samples: samples(f.samples), Why: whyOf(code)}
}

// samples copies s, so that a report shares nothing with its accumulator.
func samples(s []Sample) []Sample {
	return append([]Sample{}, s...)
}

func share(n, of int64) float64 {
	if of <= 0 {
		return 0
	}
	return float64(n) / float64(of)
}

func round1(x float64) float64 { return math.Round(x*10) / 10 }

func ptr(x float64) *float64 { return &x }

func timePtr(t time.Time) *time.Time {
	if t.IsZero() {
		return nil
	}
	u := t.UTC()
	return &u
}
