package quality

import (
	"cmp"
	"encoding/json"
	"errors"
	"fmt"
	"slices"
	"time"

	"github.com/flowcat-catalog/flowcat/schema"
)

// Raw is the additive part of a report: counts and sums that merge by
// adding, from which [MergeReports] recomputes every share and score.
type Raw struct {
	Settings Settings  `json:"settings"`
	Uploads  int       `json:"uploads"` // per-upload reports merged into this one
	Sites    []SiteRaw `json:"sites"`
	Waits    []WaitRaw `json:"waits"`
	// WaitsFolded sums the (queue, activity) pairs beyond the
	// [ListedWaits] with the most waits, which Waits then leaves out;
	// nil when every pair is listed.
	WaitsFolded *FoldedWaits        `json:"waits_folded,omitempty"`
	Samples     map[string][]Sample `json:"samples"` // by finding code; empty_value:<field> per field
	// ResourcePeak is the most services one resource held open at once
	// (services taken as lost dropped): the capacity the data show, to set
	// against Settings.ResourceCapacity.
	ResourcePeak int `json:"resource_peak"`
	// CapacityPeaks are, for each capacity the profile declares by queue
	// or by resource (Settings.Capacity), the most services one resource
	// held at once under it (queues first, each sorted by name); only
	// those met in the data.
	CapacityPeaks []CapacityPeak `json:"capacity_peaks,omitempty"`
}

// CapacityPeak is the occupancy one declared capacity met: the most
// services a resource held at once when serving from the queue (or, for
// a resource entry, that resource), against the capacity declared.
type CapacityPeak struct {
	Queue    string `json:"queue,omitempty"`
	Resource string `json:"resource,omitempty"` // a pseudonym
	Capacity int    `json:"capacity"`
	Peak     int    `json:"peak"`
}

// Settings are the options the counts were taken with.
type Settings struct {
	Zone             string         `json:"zone"`
	MappedFields     []schema.Field `json:"mapped_fields"`
	MaxSamples       int            `json:"max_samples"`
	ResourceCapacity int            `json:"resource_capacity"`
	// Capacity holds the capacities declared by queue and by resource.
	Capacity              *schema.Capacity `json:"capacity,omitempty"`
	MaxCaseSeconds        float64          `json:"max_case_seconds"`
	MaxServiceSeconds     float64          `json:"max_service_seconds"`
	ClockToleranceSeconds float64          `json:"clock_tolerance_seconds"`
	EventIDWindowSeconds  float64          `json:"event_id_window_seconds"`
	// EventIDBound is set when the event_id check's memory bound
	// (Options.MaxEventIDSlots) made it forget ids still in the window.
	EventIDBound *EventIDBound `json:"event_id_bound,omitempty"`
	// CaseHorizonSeconds is set only in reports made before cases were
	// whole (an idle case was then cut after this long); today's omit it.
	CaseHorizonSeconds float64    `json:"case_horizon_seconds,omitempty"`
	LittleTolerance    float64    `json:"little_tolerance"`
	GapMinMean         float64    `json:"gap_min_mean"`
	GapMinWeeks        int        `json:"gap_min_weeks"`
	StaleAfterSeconds  float64    `json:"stale_after_seconds"`
	UploadedAt         *time.Time `json:"uploaded_at,omitempty"` // the latest, when merged
	WindowFrom         *time.Time `json:"window_from,omitempty"`
	WindowTo           *time.Time `json:"window_to,omitempty"`
	Historical         bool       `json:"historical,omitempty"` // not scored on currentness
}

// EventIDBound says how the memory bound of the event_id check shortened
// its look-back: from From on, an event whose event_id had been seen less
// than LookbackSeconds before was always found a duplicate; one seen
// longer before, but within the window, may not have been. Dropped ids
// were forgotten while still in the window.
type EventIDBound struct {
	Slots           int       `json:"slots"`
	From            time.Time `json:"from"`
	LookbackSeconds float64   `json:"lookback_seconds"`
	Dropped         int64     `json:"dropped"`
}

// merge takes in the bound of another report of the same version.
func (b *EventIDBound) merge(o *EventIDBound) *EventIDBound {
	if o == nil {
		return b
	}
	if b == nil {
		c := *o
		return &c
	}
	c := *b
	if o.From.Before(c.From) {
		c.From = o.From
	}
	c.LookbackSeconds = min(c.LookbackSeconds, o.LookbackSeconds)
	c.Slots = max(c.Slots, o.Slots)
	c.Dropped += o.Dropped
	return &c
}

// SiteRaw holds the counts of one site.
type SiteRaw struct {
	Site            string                       `json:"site"`
	Events          int64                        `json:"events"`
	Counts          map[string]int64             `json:"counts"` // by finding code
	AccuracyRows    int64                        `json:"accuracy_rows"`
	ConsistencyRows int64                        `json:"consistency_rows"`
	UniquenessRows  int64                        `json:"uniqueness_rows"`
	NonEmpty        map[schema.Field]int64       `json:"non_empty"`
	ByType          map[schema.EventType]TypeRaw `json:"by_type"`
	Grid            map[string]int64             `json:"grid"` // events on each grid
	Stages          StageRaw                     `json:"stages"`
	Cases           CaseRaw                      `json:"cases"`
	First           *time.Time                   `json:"first"`
	Last            *time.Time                   `json:"last"`
	Census          CensusRaw                    `json:"census"`
	Lag             LagRaw                       `json:"lag"`
	Hours           HourSeries                   `json:"hours"`
	FileRows        int64                        `json:"file_rows"`
	FileBackSteps   int64                        `json:"file_back_steps"`
	// Clock says whether every event sits at one clock time of day, in
	// the dataset's zone or in UTC: dates without a time (nil: no events).
	Clock *ClockTimes `json:"clock,omitempty"`
}

// ClockTimes holds the time of day (µs after midnight) of a site's first
// event in the dataset's zone and in UTC, and whether every event shares
// it.
type ClockTimes struct {
	Zone     int64 `json:"zone"`
	ZoneSame bool  `json:"zone_same"`
	UTC      int64 `json:"utc"`
	UTCSame  bool  `json:"utc_same"`
}

func mergeClock(d, s *ClockTimes) *ClockTimes {
	if s == nil {
		return d
	}
	if d == nil {
		c := *s
		return &c
	}
	c := *d
	c.ZoneSame = c.ZoneSame && s.ZoneSame && c.Zone == s.Zone
	c.UTCSame = c.UTCSame && s.UTCSame && c.UTC == s.UTC
	return &c
}

// TypeRaw counts the events of one type and their non-empty fields.
type TypeRaw struct {
	Events   int64                  `json:"events"`
	NonEmpty map[schema.Field]int64 `json:"non_empty"`
}

// StageRaw counts case records and those with each stage.
type StageRaw struct {
	Cases     int64 `json:"cases"`
	Arrival   int64 `json:"arrival"`
	Start     int64 `json:"start"`
	Complete  int64 `json:"complete"`
	Departure int64 `json:"departure"`
}

// CaseRaw holds the sums of the cases' durations (first to last event)
// and events, for the mean, minimum and maximum.
type CaseRaw struct {
	N               int64   `json:"n"`
	DurationSeconds float64 `json:"duration_seconds"` // sum
	MinSeconds      float64 `json:"min_seconds"`
	MaxSeconds      float64 `json:"max_seconds"`
	Events          int64   `json:"events"` // sum
	MinEvents       int64   `json:"min_events"`
	MaxEvents       int64   `json:"max_events"`
}

func (d *CaseRaw) merge(s *CaseRaw) {
	if s.N == 0 {
		return
	}
	if d.N == 0 {
		*d = *s
		return
	}
	d.N += s.N
	d.DurationSeconds += s.DurationSeconds
	d.MinSeconds, d.MaxSeconds = min(d.MinSeconds, s.MinSeconds), max(d.MaxSeconds, s.MaxSeconds)
	d.Events += s.Events
	d.MinEvents, d.MaxEvents = min(d.MinEvents, s.MinEvents), max(d.MaxEvents, s.MaxEvents)
}

// CensusRaw holds the sums of Little's law for one site.
type CensusRaw struct {
	SpanSeconds     float64 `json:"span_seconds"`
	AreaCaseSeconds float64 `json:"area_case_seconds"` // ∫ census dt
	Entries         int64   `json:"entries"`           // stays begun (see cases.Record.Stays)
	Exits           int64   `json:"exits"`             // stays ended by an exit (cases.Exits)
	StayedSeconds   float64 `json:"stayed_seconds"`    // Σ stays, an open one ending at its case's last event
}

// LagRaw is the histogram of lags from event to upload, by bucket
// number: bucket b < 8 holds lags of b seconds, then eight buckets per
// doubling (bucket 8·k+m, k ≥ 3, holds [(8+m)·2^(k-3), (9+m)·2^(k-3))).
type LagRaw struct {
	N          int64         `json:"n"`
	MaxSeconds int64         `json:"max_seconds"`
	Buckets    map[int]int64 `json:"buckets"`
}

// WaitRaw counts the waits of one (queue, activity).
type WaitRaw struct {
	Queue     string `json:"queue"`
	Activity  string `json:"activity"`
	Waits     int64  `json:"waits"`
	NoEnqueue int64  `json:"no_enqueue"`
	NoStart   int64  `json:"no_start"`
}

// ListedWaits is the most (queue, activity) pairs a report lists one by
// one: those with the most waits (ties by queue, then activity); the
// rest are summed in [Raw.WaitsFolded]. Real exports have tens to
// hundreds of pairs; many thousands mean free text in a code column,
// where a list of every value would make the report itself the largest
// thing an upload stores.
const ListedWaits = 4096

// ListedWaitBytes is the most bytes of names (queue and activity) the
// listed pairs hold: long free text lists fewer.
const ListedWaitBytes = 512 << 10

// FoldedWaits sums the waits of the pairs a report does not list.
type FoldedWaits struct {
	Pairs     int64 `json:"pairs"` // the pairs folded of those told apart
	Waits     int64 `json:"waits"`
	NoEnqueue int64 `json:"no_enqueue"`
	NoStart   int64 `json:"no_start"`
	// MorePairs: the sums also hold the waits of pairs the quality model
	// did not tell apart (past 65,536 pairs or 4 MiB of their names),
	// which Pairs does not count.
	MorePairs bool `json:"more_pairs,omitempty"`
}

// add sums o into f; either may be nil.
func (f *FoldedWaits) add(o *FoldedWaits) *FoldedWaits {
	if o == nil {
		return f
	}
	if f == nil {
		f = &FoldedWaits{}
	}
	f.Pairs += o.Pairs
	f.Waits += o.Waits
	f.NoEnqueue += o.NoEnqueue
	f.NoStart += o.NoStart
	f.MorePairs = f.MorePairs || o.MorePairs
	return f
}

// foldWaits keeps, of more than ListedWaits pairs or ListedWaitBytes of
// their names, those with the most waits, in (queue, activity) order, and
// adds the others to folded; ws within both is returned as it is.
func foldWaits(ws []WaitRaw, folded *FoldedWaits) ([]WaitRaw, *FoldedWaits) {
	size := 0
	for _, w := range ws {
		size += len(w.Queue) + len(w.Activity)
	}
	if len(ws) <= ListedWaits && size <= ListedWaitBytes {
		return ws, folded
	}
	byName := func(x, y WaitRaw) int {
		return cmp.Or(cmp.Compare(x.Queue, y.Queue), cmp.Compare(x.Activity, y.Activity))
	}
	slices.SortFunc(ws, func(x, y WaitRaw) int { return cmp.Or(cmp.Compare(y.Waits, x.Waits), byName(x, y)) })
	keep, size := 0, 0
	for keep < len(ws) && keep < ListedWaits && size+len(ws[keep].Queue)+len(ws[keep].Activity) <= ListedWaitBytes {
		size += len(ws[keep].Queue) + len(ws[keep].Activity)
		keep++
	}
	rest := FoldedWaits{Pairs: int64(len(ws) - keep)}
	for _, w := range ws[keep:] {
		rest.Waits += w.Waits
		rest.NoEnqueue += w.NoEnqueue
		rest.NoStart += w.NoStart
	}
	ws = slices.Clip(ws[:keep])
	slices.SortFunc(ws, byName)
	return ws, folded.add(&rest)
}

// ErrIncompatible is returned by [MergeReports] for reports whose formats
// or clocks differ.
var ErrIncompatible = errors.New("incompatible reports")

// MergeReports combines the reports of the uploads of one version into
// one: counts add, samples concatenate up to the first report's
// MaxSamples, and every share and score is recomputed from the merged
// counts. Findings that need the event stream (duplicates, per-case
// checks, resource overlaps, the census minimum) were found within each
// upload only: a duplicate or a case split across two uploads is not
// seen. The settings of the first report apply.
func MergeReports(rs ...*Report) (*Report, error) {
	var out *Report
	var unmapped map[string]bool // out.UnmappedColumns, as a set
	for i, r := range rs {
		if r == nil {
			continue
		}
		if r.Version != ReportVersion && r.Version != "3" && r.Version != "2" { // 2: hours as one dense series, read into runs
			return nil, fmt.Errorf("merge: report %d has format %q, want %q: %w", i, r.Version, ReportVersion, ErrIncompatible)
		}
		if out == nil {
			out = &Report{Rows: r.Rows, Rejections: cloneRejections(r.Rejections), UnmappedColumns: slices.Clone(r.UnmappedColumns)}
			out.Raw = cloneRaw(&r.Raw)
			continue
		}
		if r.Raw.Settings.Zone != out.Raw.Settings.Zone {
			return nil, fmt.Errorf("merge: report %d is in zone %s, want %s: %w", i, r.Raw.Settings.Zone, out.Raw.Settings.Zone, ErrIncompatible)
		}
		max := out.Raw.Settings.MaxSamples
		out.Rows.Total += r.Rows.Total
		out.Rows.Accepted += r.Rows.Accepted
		out.Rows.Rejected += r.Rows.Rejected
		out.Rows.Again += r.Rows.Again
		for _, rc := range r.Rejections {
			j := slices.IndexFunc(out.Rejections, func(x RejectionCount) bool { return x.Reason == rc.Reason })
			if j < 0 {
				out.Rejections = append(out.Rejections, RejectionCount{Reason: rc.Reason, Samples: []Sample{}})
				j = len(out.Rejections) - 1
			}
			out.Rejections[j].Count += rc.Count
			out.Rejections[j].Samples = appendSamples(out.Rejections[j].Samples, max, rc.Samples)
		}
		if unmapped == nil {
			unmapped = make(map[string]bool, len(out.UnmappedColumns))
			for _, c := range out.UnmappedColumns {
				unmapped[c] = true
			}
		}
		for _, c := range r.UnmappedColumns {
			if !unmapped[c] {
				unmapped[c] = true
				out.UnmappedColumns = append(out.UnmappedColumns, c)
			}
		}
		mergeRaw(&out.Raw, &r.Raw)
	}
	if out == nil {
		return nil, fmt.Errorf("merge: no reports: %w", ErrIncompatible)
	}
	slices.SortFunc(out.Rejections, func(x, y RejectionCount) int { return cmp.Compare(x.Reason, y.Reason) })
	slices.Sort(out.UnmappedColumns)
	return derive(out.Rows, out.Rejections, out.Raw, out.UnmappedColumns), nil
}

// Repeats are the rejected rows of one file's report that an earlier file
// of the same version rejected too: how many per reason, and their lines.
type Repeats struct {
	ByReason map[schema.Reason]int64
	Lines    map[int64]bool
}

// Add counts one repeated row.
func (rp *Repeats) Add(reason schema.Reason, line int64) {
	if rp.ByReason == nil {
		rp.ByReason, rp.Lines = map[schema.Reason]int64{}, map[int64]bool{}
	}
	rp.ByReason[reason]++
	rp.Lines[line] = true
}

// N is the count of repeated rows.
func (rp *Repeats) N() int64 {
	var n int64
	for _, c := range rp.ByReason {
		n += c
	}
	return n
}

// LessRepeats returns r without the rows of rp, for merging into a
// version whose other files count them already: Total and Rejected less
// them, each reason's count less its own, the samples at their lines
// dropped, Rows.Again counting them. r itself is not changed. The result
// is to be merged (MergeReports derives its figures again).
func LessRepeats(r *Report, rp Repeats) *Report {
	n := rp.N()
	if n == 0 {
		return r
	}
	out := *r
	out.Rows.Total -= n
	out.Rows.Rejected -= n
	out.Rows.Again += n
	out.Rejections = make([]RejectionCount, 0, len(r.Rejections))
	for _, rc := range r.Rejections {
		rc.Count -= rp.ByReason[rc.Reason]
		if rc.Count <= 0 {
			continue
		}
		smp := make([]Sample, 0, len(rc.Samples))
		for _, s := range rc.Samples {
			if !rp.Lines[s.Line] {
				smp = append(smp, s)
			}
		}
		rc.Samples = smp
		out.Rejections = append(out.Rejections, rc)
	}
	return &out
}

func appendSamples(dst []Sample, max int, src []Sample) []Sample {
	for _, s := range src {
		if len(dst) >= max {
			break
		}
		dst = append(dst, s)
	}
	return dst
}

func cloneRejections(rs []RejectionCount) []RejectionCount {
	out := make([]RejectionCount, len(rs))
	for i, r := range rs {
		out[i] = RejectionCount{Reason: r.Reason, Count: r.Count, Samples: slices.Clone(r.Samples)}
	}
	return out
}

// sortCapacityPeaks orders peaks: queues first, then resources, each by
// name.
func sortCapacityPeaks(ps []CapacityPeak) {
	slices.SortFunc(ps, func(x, y CapacityPeak) int {
		return cmp.Or(cmp.Compare(x.Resource, y.Resource), cmp.Compare(x.Queue, y.Queue))
	})
}

func cloneRaw(r *Raw) Raw {
	out := Raw{Settings: r.Settings, Uploads: r.Uploads, ResourcePeak: r.ResourcePeak, Samples: map[string][]Sample{},
		CapacityPeaks: slices.Clone(r.CapacityPeaks)}
	out.Settings.MappedFields = slices.Clone(r.Settings.MappedFields)
	out.Settings.EventIDBound = (*EventIDBound)(nil).merge(r.Settings.EventIDBound)
	for k, v := range r.Samples {
		out.Samples[k] = slices.Clone(v)
	}
	out.Waits = slices.Clone(r.Waits)
	out.WaitsFolded = (*FoldedWaits)(nil).add(r.WaitsFolded)
	for i := range r.Sites {
		out.Sites = append(out.Sites, SiteRaw{Site: r.Sites[i].Site, Counts: map[string]int64{},
			NonEmpty: map[schema.Field]int64{}, ByType: map[schema.EventType]TypeRaw{}, Grid: map[string]int64{}})
		mergeSite(&out.Sites[i], &r.Sites[i])
	}
	return out
}

func mergeRaw(dst, src *Raw) {
	dst.Uploads += src.Uploads
	dst.ResourcePeak = max(dst.ResourcePeak, src.ResourcePeak)
	for _, p := range src.CapacityPeaks {
		i := slices.IndexFunc(dst.CapacityPeaks, func(q CapacityPeak) bool { return q.Queue == p.Queue && q.Resource == p.Resource })
		if i < 0 {
			dst.CapacityPeaks = append(dst.CapacityPeaks, p)
			continue
		}
		dst.CapacityPeaks[i].Peak = max(dst.CapacityPeaks[i].Peak, p.Peak)
		dst.CapacityPeaks[i].Capacity = p.Capacity
	}
	sortCapacityPeaks(dst.CapacityPeaks)
	dst.Settings.EventIDBound = dst.Settings.EventIDBound.merge(src.Settings.EventIDBound)
	if u := src.Settings.UploadedAt; u != nil && (dst.Settings.UploadedAt == nil || u.After(*dst.Settings.UploadedAt)) {
		dst.Settings.UploadedAt = u
	}
	for _, f := range src.Settings.MappedFields {
		if !slices.Contains(dst.Settings.MappedFields, f) {
			dst.Settings.MappedFields = append(dst.Settings.MappedFields, f)
		}
	}
	max := dst.Settings.MaxSamples
	for _, k := range sortedKeys(src.Samples) {
		dst.Samples[k] = appendSamples(dst.Samples[k], max, src.Samples[k])
	}
	// Indexes by name keep a merge linear in the number of queues and
	// sites, however many there are.
	wi := make(map[[2]string]int, len(dst.Waits))
	for j, w := range dst.Waits {
		wi[[2]string{w.Queue, w.Activity}] = j
	}
	for _, w := range src.Waits {
		j, ok := wi[[2]string{w.Queue, w.Activity}]
		if !ok {
			wi[[2]string{w.Queue, w.Activity}] = len(dst.Waits)
			dst.Waits = append(dst.Waits, WaitRaw{Queue: w.Queue, Activity: w.Activity})
			j = len(dst.Waits) - 1
		}
		dst.Waits[j].Waits += w.Waits
		dst.Waits[j].NoEnqueue += w.NoEnqueue
		dst.Waits[j].NoStart += w.NoStart
	}
	// A pair listed here and folded in another part keeps, in its row,
	// the waits of the parts that listed it; the totals are exact.
	dst.Waits, dst.WaitsFolded = foldWaits(dst.Waits, dst.WaitsFolded.add(src.WaitsFolded))
	si := make(map[string]int, len(dst.Sites))
	for j := range dst.Sites {
		si[dst.Sites[j].Site] = j
	}
	for i := range src.Sites {
		s := &src.Sites[i]
		j, ok := si[s.Site]
		if !ok {
			si[s.Site] = len(dst.Sites)
			dst.Sites = append(dst.Sites, SiteRaw{Site: s.Site, Counts: map[string]int64{},
				NonEmpty: map[schema.Field]int64{}, ByType: map[schema.EventType]TypeRaw{}, Grid: map[string]int64{}})
			j = len(dst.Sites) - 1
		}
		mergeSite(&dst.Sites[j], s)
	}
}

func addMap[K comparable](dst, src map[K]int64) {
	for k, v := range src {
		dst[k] += v
	}
}

func mergeSite(d, s *SiteRaw) {
	d.Events += s.Events
	addMap(d.Counts, s.Counts)
	d.AccuracyRows += s.AccuracyRows
	d.ConsistencyRows += s.ConsistencyRows
	d.UniquenessRows += s.UniquenessRows
	addMap(d.NonEmpty, s.NonEmpty)
	d.Clock = mergeClock(d.Clock, s.Clock)
	for t, tr := range s.ByType {
		x := d.ByType[t]
		if x.NonEmpty == nil {
			x.NonEmpty = map[schema.Field]int64{}
		}
		x.Events += tr.Events
		addMap(x.NonEmpty, tr.NonEmpty)
		d.ByType[t] = x
	}
	addMap(d.Grid, s.Grid)
	d.Stages.Cases += s.Stages.Cases
	d.Stages.Arrival += s.Stages.Arrival
	d.Stages.Start += s.Stages.Start
	d.Stages.Complete += s.Stages.Complete
	d.Stages.Departure += s.Stages.Departure
	d.Cases.merge(&s.Cases)
	if s.First != nil && (d.First == nil || s.First.Before(*d.First)) {
		d.First = s.First
	}
	if s.Last != nil && (d.Last == nil || s.Last.After(*d.Last)) {
		d.Last = s.Last
	}
	c := &d.Census
	c.SpanSeconds += s.Census.SpanSeconds
	c.AreaCaseSeconds += s.Census.AreaCaseSeconds
	c.Entries += s.Census.Entries
	c.Exits += s.Census.Exits
	c.StayedSeconds += s.Census.StayedSeconds
	d.Lag.N += s.Lag.N
	d.Lag.MaxSeconds = max(d.Lag.MaxSeconds, s.Lag.MaxSeconds)
	if d.Lag.Buckets == nil {
		d.Lag.Buckets = map[int]int64{}
	}
	addMap(d.Lag.Buckets, s.Lag.Buckets)
	d.Hours = mergeHours(d.Hours, s.Hours)
	d.FileRows += s.FileRows
	d.FileBackSteps += s.FileBackSteps
}

// caseCodes are the findings counted per case or per wait rather than per
// row; a version's report takes them from its one per-case pass.
var caseCodes = []string{CodeCaseTooLong, CodeWaitNoEnqueue, CodeWaitNoStart}

// WithCases returns merged (the merge of a version's per-upload reports)
// with its case-level figures taken from cases, the report of one
// per-case pass over every event of the version ([Accumulator.Event] and
// [Accumulator.Case] only): per site the cases, their durations and
// events, their stage coverage,
// the census sums of Little's law (arrivals, completed stays, sojourn,
// time in system), case_too_long, and the wait coverage. So a case whose
// events span uploads counts once. Duplicates of case, type, activity and
// instant are counted over the whole version, those across files apart
// (duplicate_across_files). Other row-level findings (order checks within
// a case, overlaps, duplicate event ids) stay those found within each
// upload.
func WithCases(merged, cases *Report) *Report {
	raw := cloneRaw(&merged.Raw)
	bySite := map[string]*SiteRaw{}
	for i := range cases.Raw.Sites {
		bySite[cases.Raw.Sites[i].Site] = &cases.Raw.Sites[i]
	}
	for i := range raw.Sites {
		s := &raw.Sites[i]
		c := bySite[s.Site]
		if c == nil {
			c = &SiteRaw{}
		}
		s.Stages = c.Stages
		s.Cases = c.Cases
		s.Census.SpanSeconds = c.Census.SpanSeconds
		s.Census.AreaCaseSeconds = c.Census.AreaCaseSeconds
		s.Census.Entries = c.Census.Entries
		s.Census.Exits = c.Census.Exits
		s.Census.StayedSeconds = c.Census.StayedSeconds
		for _, code := range caseCodes {
			if n := c.Counts[code]; n > 0 {
				s.Counts[code] = n
			} else {
				delete(s.Counts, code)
			}
		}
		// Duplicates of case, type, activity and instant: each file's
		// report counts those within the file; the pass over the whole
		// version counts them all. The difference are the rows that
		// repeat, in another file, an event of their case (per group of
		// equal events: the files holding it, less one). Those rows enter
		// the uniqueness rows too (a row also flagged in its upload for a
		// reused event_id would count twice there). A merged report that
		// holds such a count already (of an earlier WithCases) has it
		// taken out first.
		old := s.Counts[CodeDuplicateAcrossFiles]
		within := s.Counts[CodeDuplicateCaseTypeTime] - old
		s.Counts[CodeDuplicateCaseTypeTime] = within
		s.UniquenessRows -= old
		if within == 0 {
			delete(s.Counts, CodeDuplicateCaseTypeTime)
		}
		if across := c.Counts[CodeDuplicateCaseTypeTime] - within; across > 0 {
			s.Counts[CodeDuplicateAcrossFiles] = across
			s.Counts[CodeDuplicateCaseTypeTime] = within + across
			s.UniquenessRows += across
		} else {
			delete(s.Counts, CodeDuplicateAcrossFiles)
		}
	}
	if smp := cases.Raw.Samples[CodeDuplicateAcrossFiles]; len(smp) > 0 {
		raw.Samples[CodeDuplicateAcrossFiles] = slices.Clone(smp)
	} else {
		delete(raw.Samples, CodeDuplicateAcrossFiles)
	}
	raw.Waits = slices.Clone(cases.Raw.Waits)
	raw.WaitsFolded = (*FoldedWaits)(nil).add(cases.Raw.WaitsFolded)
	for _, code := range caseCodes {
		if smp := cases.Raw.Samples[code]; len(smp) > 0 {
			raw.Samples[code] = slices.Clone(smp)
		} else {
			delete(raw.Samples, code)
		}
	}
	return derive(merged.Rows, cloneRejections(merged.Rejections), raw, slices.Clone(merged.UnmappedColumns))
}

// WithFile returns a copy of r whose samples name file (see SetFile); r
// itself when file is "".
func (r *Report) WithFile(file string) *Report {
	if file == "" {
		return r
	}
	b, err := json.Marshal(r)
	if err != nil {
		return r
	}
	var c Report
	if err := json.Unmarshal(b, &c); err != nil {
		return r
	}
	c.SetFile(file)
	return &c
}

// SetFile names file as the file of every sample of r that has a source
// line and no file yet, so that a version's merged report says where each
// line is.
func (r *Report) SetFile(file string) {
	if file == "" {
		return
	}
	set := func(ss []Sample) {
		for i := range ss {
			if ss[i].Line > 0 && ss[i].File == "" {
				ss[i].File = file
			}
		}
	}
	for _, ss := range r.Raw.Samples {
		set(ss)
	}
	for i := range r.Rejections {
		set(r.Rejections[i].Samples)
	}
	for i := range r.Dimensions {
		for j := range r.Dimensions[i].Findings {
			set(r.Dimensions[i].Findings[j].Samples)
		}
	}
	for j := range r.Internal {
		set(r.Internal[j].Samples)
	}
}
