package quality

import (
	"cmp"
	"math"
	"slices"
	"time"

	"github.com/flowcat-catalog/flowcat/schema"
)

// Rule constants of the derived findings (SCORING.md states them).
const (
	// clockJudgedMax: backward steps are judged only in a file whose
	// steps back are at most this share of its rows (a time-ordered file).
	clockJudgedMax = 0.01
	// littleMinStays and littleMinSpan: Little's law is judged for a site
	// with at least this many entries and as many exits over a span at
	// least this many times the mean stay (the summary's rule too).
	littleMinStays = 30
	littleMinSpan  = 10.0
	// littlePenalty is what a flagged Little's law takes off the
	// consistency score (scaled by the share of judged sites flagged).
	littlePenalty = 20.0
	// heaping: a grid is heaped when its share is at least heapFactor
	// times the share expected and exceeds it by heapExcess.
	heapFactor = 2.0
	heapExcess = 0.05
)

// derive computes every derived member of a report from its raw parts.
func derive(rows Rows, rej []RejectionCount, raw Raw, unmapped []string) *Report {
	set := &raw.Settings
	if raw.Samples == nil {
		raw.Samples = map[string][]Sample{}
	}
	if rej == nil {
		rej = []RejectionCount{}
	}
	r := &Report{Version: ReportVersion, Rows: rows, Rejections: rej, Raw: raw, UnmappedColumns: unmapped}
	zone, err := time.LoadLocation(set.Zone)
	if err != nil {
		zone = time.UTC
	}
	sites := slices.Clone(raw.Sites)
	slices.SortFunc(sites, func(x, y SiteRaw) int { return cmp.Compare(x.Site, y.Site) })

	// The all-sites sum.
	all := SiteRaw{Counts: map[string]int64{}, NonEmpty: map[schema.Field]int64{}, ByType: map[schema.EventType]TypeRaw{}, Grid: map[string]int64{}}
	var derived []siteDerived
	for i := range sites {
		mergeSite(&all, &sites[i])
		derived = append(derived, deriveSite(&sites[i], set, zone))
	}
	rejected := map[schema.Reason]int64{}
	for _, rc := range rej {
		rejected[rc.Reason] = rc.Count
	}
	sum := siteDerived{}
	for _, d := range derived {
		sum.clockBack += d.clockBack
		sum.notOrdered += d.notOrdered
		sum.gapHours += d.gapHours
		sum.judgedHours += d.judgedHours
		sum.gapDays += d.gapDays
		sum.judgedDays += d.judgedDays
		if d.little.Judged {
			sum.littleJudged++
		}
		if d.little.Flagged {
			sum.littleFlagged++
		}
		if d.cur.Stale {
			sum.stale++
		}
		sum.gapSamples = appendSamples(sum.gapSamples, set.MaxSamples, d.gapSamples)
		sum.daySamples = appendSamples(sum.daySamples, set.MaxSamples, d.daySamples)
		sum.far += d.far
		sum.farSamples = appendSamples(sum.farSamples, set.MaxSamples, d.farSamples)
	}

	// Completeness per field and per event type.
	r.Completeness, r.EventTypes = fieldCompleteness(&all, set)
	st := all.Stages
	r.Stages = Stages{Cases: st.Cases, Arrival: share(st.Arrival, st.Cases), Start: share(st.Start, st.Cases),
		Complete: share(st.Complete, st.Cases), Departure: share(st.Departure, st.Cases)}
	if c := all.Cases; c.N > 0 {
		r.Cases = CaseFigures{Count: c.N, MeanDurationSeconds: c.DurationSeconds / float64(c.N),
			MinDurationSeconds: c.MinSeconds, MaxDurationSeconds: c.MaxSeconds,
			MeanEvents: float64(c.Events) / float64(c.N), MinEvents: c.MinEvents, MaxEvents: c.MaxEvents}
	}
	r.Waits = []WaitCoverage{}
	var waits, noEnq, noStart int64
	for _, w := range raw.Waits {
		r.Waits = append(r.Waits, WaitCoverage{Queue: w.Queue, Activity: w.Activity, Waits: w.Waits,
			NoEnqueue: w.NoEnqueue, NoStart: w.NoStart, Unobservable: share(w.NoEnqueue+w.NoStart, w.Waits)})
		waits += w.Waits
		noEnq += w.NoEnqueue
		noStart += w.NoStart
	}
	if f := raw.WaitsFolded; f != nil {
		r.WaitsFolded = &FoldedCoverage{Pairs: f.Pairs, Waits: f.Waits, NoEnqueue: f.NoEnqueue, NoStart: f.NoStart,
			Unobservable: share(f.NoEnqueue+f.NoStart, f.Waits), MorePairs: f.MorePairs}
		waits += f.Waits
		noEnq += f.NoEnqueue
		noStart += f.NoStart
	}
	slices.SortFunc(r.Waits, func(x, y WaitCoverage) int {
		return cmp.Or(cmp.Compare(x.Queue, y.Queue), cmp.Compare(x.Activity, y.Activity))
	})
	r.Resolution = resolution(all.Grid, all.Events, set.Zone, all.Clock)

	// Per-site sections.
	r.Little, r.Currentness, r.PerSite = []LittleLaw{}, []SiteCurrentness{}, []SiteReport{}
	r.Sites = Sites{Counts: []SiteCount{}}
	for i := range sites {
		s, d := &sites[i], &derived[i]
		r.Little = append(r.Little, d.little)
		r.Currentness = append(r.Currentness, d.cur)
		if s.Site == OtherSite {
			r.Sites.Other += s.Events
		} else {
			r.Sites.Distinct++
		}
		r.Sites.Counts = append(r.Sites.Counts, SiteCount{Site: s.Site, Count: s.Events})
		sc := scores(s, d, set, nil, Rows{Total: s.Events, Accepted: s.Events})
		sr := SiteReport{Site: s.Site, Events: s.Events, Score: overall(sc), Completeness: []FieldShare{}}
		for j, dw := range dimensionWeights {
			sr.Dimensions = append(sr.Dimensions, DimensionScore{Name: dw.name, Score: roundPtr(sc[j])})
		}
		for _, f := range schema.Fields {
			ne, n := s.NonEmpty[f], s.Events
			if !f.Required() {
				ne, n = applicable(s, f)
			}
			sr.Completeness = append(sr.Completeness, FieldShare{Field: f, Share: share(ne, n)})
		}
		r.PerSite = append(r.PerSite, sr)
	}
	slices.SortFunc(r.Sites.Counts, func(x, y SiteCount) int {
		return cmp.Or(cmp.Compare(y.Count, x.Count), cmp.Compare(x.Site, y.Site))
	})
	if all.First != nil {
		r.TimeRange = TimeRange{First: all.First, Last: all.Last}
	}

	// Dimensions, findings and the overall score.
	sc := scores(&all, &sum, set, rejected, rows)
	fs := findings(r, &all, &sum, set, rejected, waits, noEnq, noStart)
	dimRows := []int64{rows.Total, rows.Total, rows.Accepted, sum.judgedHours, rows.Accepted}
	for j, dw := range dimensionWeights {
		d := Dimension{Name: dw.name, Score: roundPtr(sc[j]), Weight: dw.weight, Rows: dimRows[j], Findings: fs[dw.name]}
		if d.Findings == nil {
			d.Findings = []Finding{}
		}
		r.Dimensions = append(r.Dimensions, d)
	}
	r.Score = overall(sc)
	r.Internal = []Finding{}
	if n := all.Counts[CodeOrderBreach]; n > 0 {
		r.Internal = append(r.Internal, finding(CodeOrderBreach, n, rows.Accepted, "accepted rows", raw.Samples[CodeOrderBreach]))
	}
	return r
}

// siteDerived holds what is computed per site before scoring.
type siteDerived struct {
	clockBack, notOrdered  int64
	gapHours, judgedHours  int64
	gapDays, judgedDays    int64
	littleJudged           int64
	littleFlagged          int64
	stale                  int64
	little                 LittleLaw
	cur                    SiteCurrentness
	gapSamples, daySamples []Sample
	far                    int64 // events in runs far from the site's main run
	farSamples             []Sample
}

func deriveSite(s *SiteRaw, set *Settings, zone *time.Location) siteDerived {
	var d siteDerived
	if s.FileRows > 0 {
		if float64(s.FileBackSteps) <= clockJudgedMax*float64(s.FileRows) {
			d.clockBack = s.FileBackSteps
		} else {
			d.notOrdered = s.FileBackSteps
		}
	}
	// Little's law.
	c := &s.Census
	l := LittleLaw{Site: s.Site, SpanHours: c.SpanSeconds / 3600, Entries: c.Entries, Exits: c.Exits}
	if c.SpanSeconds > 0 {
		l.L = c.AreaCaseSeconds / c.SpanSeconds
		l.Lambda = float64(c.Entries) / l.SpanHours
	}
	if c.Entries > 0 {
		l.W = c.StayedSeconds / float64(c.Entries) / 3600
	}
	l.LambdaW = l.Lambda * l.W
	if l.LambdaW > 0 {
		l.Ratio = l.L / l.LambdaW
	}
	if c.Entries >= littleMinStays && c.Exits >= littleMinStays && l.W > 0 && l.SpanHours >= littleMinSpan*l.W {
		l.Judged = true
		l.Flagged = math.Abs(l.Ratio-1) > set.LittleTolerance
	}
	d.little = l
	// Currentness.
	cur := SiteCurrentness{Site: s.Site, Newest: s.Last}
	if s.Lag.N > 0 {
		med, mx := lagMedian(s.Lag), s.Lag.MaxSeconds
		cur.LagMedianSeconds, cur.LagMaxSeconds = &med, &mx
	}
	// Events far from the site's main run: an accuracy finding, judged
	// for historical data too.
	d.far, d.farSamples = farRuns(s.Hours, s.Site, set.MaxSamples)
	if set.Historical { // past events, not a feed: no currentness judged
		d.cur = cur
		return d
	}
	if set.UploadedAt != nil && s.Last != nil && set.UploadedAt.Sub(*s.Last).Seconds() > set.StaleAfterSeconds {
		cur.Stale = true
	}
	gaps(&d, s, set, zone, dateOnly(s.Clock, s.Events))
	cur.GapHours, cur.JudgedHours, cur.GapDays, cur.JudgedDays = d.gapHours, d.judgedHours, d.gapDays, d.judgedDays
	d.cur = cur
	return d
}

// lagMedian is the middle of the bucket holding the median lag.
func lagMedian(l LagRaw) int64 {
	half := (l.N + 1) / 2
	var cum int64
	for _, b := range sortedKeys(l.Buckets) {
		cum += l.Buckets[b]
		if cum >= half {
			lo, hi := lagBounds(b)
			return lo + (hi-1-lo)/2
		}
	}
	return l.MaxSeconds
}

// gaps finds the hours and days without events where the site's own
// history expects some (rule in SCORING.md).
func gaps(d *siteDerived, s *SiteRaw, set *Settings, zone *time.Location, dates bool) {
	type hour struct {
		t   time.Time
		how int
		n   int64
	}
	type day struct {
		t   time.Time
		dow int
		n   int64
	}
	var occ, sum [7 * 24]int64
	var hs []hour
	var days []day
	// Each run on its own: the silence between runs (more than
	// RunGapHours) is not judged hour by hour.
	for _, run := range s.Hours.Runs {
		first := len(hs)
		for i, n := range run.Counts {
			t := run.Start.Add(time.Duration(i) * time.Hour).In(zone)
			how := int(t.Weekday())*24 + t.Hour()
			occ[how]++
			sum[how] += n
			hs = append(hs, hour{t, how, n})
		}
		// Days: the local days of the run strictly between its first
		// and its last.
		var rd []day
		for _, x := range hs[first:] {
			y, m, dd := x.t.Date()
			if len(rd) > 0 {
				last := &rd[len(rd)-1]
				if ly, lm, ld := last.t.Date(); ly == y && lm == m && ld == dd {
					last.n += x.n
					continue
				}
			}
			rd = append(rd, day{time.Date(y, m, dd, 0, 0, 0, 0, zone), int(x.t.Weekday()), x.n})
		}
		if len(rd) > 2 {
			days = append(days, rd[1:len(rd)-1]...)
		}
	}
	expects := func(occ, sum int64) bool {
		return occ >= int64(set.GapMinWeeks) && float64(sum)/float64(occ) >= set.GapMinMean
	}
	for _, x := range hs {
		if dates || !expects(occ[x.how], sum[x.how]) {
			continue // dates only: no hour-level gaps
		}
		d.judgedHours++
		if x.n == 0 {
			d.gapHours++
			if len(d.gapSamples) < set.MaxSamples {
				d.gapSamples = append(d.gapSamples, Sample{Site: s.Site, At: timePtr(x.t)})
			}
		}
	}
	var docc, dsum [7]int64
	for _, x := range days {
		docc[x.dow]++
		dsum[x.dow] += x.n
	}
	for _, x := range days {
		if !expects(docc[x.dow], dsum[x.dow]) {
			continue
		}
		d.judgedDays++
		if x.n == 0 {
			d.gapDays++
			if len(d.daySamples) < set.MaxSamples {
				d.daySamples = append(d.daySamples, Sample{Site: s.Site, At: timePtr(x.t)})
			}
		}
	}
}

func resolution(grid map[string]int64, events int64, zone string, clock *ClockTimes) Resolution {
	res := Resolution{Zone: zone, Grid: "microsecond", Heaping: []Heaping{}}
	unit := int64(1)
	if events == 0 {
		return res
	}
	if dateOnly(clock, events) {
		res.Grid, res.DateOnly = "day", true
		res.Artefact = artefact(clock, zone)
		return res
	}
	for g := range numGrids {
		if grid[gridNames[g]] == events {
			res.Grid, unit = gridNames[g], gridMicros[g]
		}
	}
	for g := gMinute; g <= gHour; g++ {
		if gridMicros[g] <= unit {
			continue
		}
		n := grid[gridNames[g]]
		h := Heaping{Grid: gridNames[g], Events: n, Share: share(n, events), Expected: float64(unit) / float64(gridMicros[g])}
		h.Heaped = h.Share >= heapFactor*h.Expected && h.Share-h.Expected > heapExcess
		res.Heaping = append(res.Heaping, h)
	}
	return res
}

// dateOnlyMin is the fewest events that make "every event at one clock
// time" a finding about the data rather than chance.
const dateOnlyMin = 24

// dateOnly reports whether every one of at least dateOnlyMin events sits
// at one clock time of day in the zone or in UTC: a file of dates.
func dateOnly(c *ClockTimes, events int64) bool {
	return events >= dateOnlyMin && c != nil && (c.ZoneSame || c.UTCSame)
}

// artefact names the fixed clock time of date-only data and the offset it
// shows: dates read as midnight at a fixed offset and stored in UTC land
// at one UTC clock time (23:00 UTC for +01:00).
func artefact(c *ClockTimes, zone string) string {
	clock := func(us int64) string {
		return time.UnixMicro(us).UTC().Format("15:04:05")
	}
	offset := func(us int64) string {
		if us > 12*3600e6 {
			us -= 24 * 3600e6
		}
		sign := "+"
		if us > 0 { // 23:00 is midnight at +01:00
			sign = "-"
		} else {
			us = -us
		}
		return sign + time.UnixMicro(us).UTC().Format("15:04")
	}
	switch {
	case c.ZoneSame && c.Zone == 0:
		return ""
	case c.UTCSame && c.UTC == 0:
		return "every event at 00:00:00 UTC: dates at UTC midnight, not at midnight in " + zone
	case c.ZoneSame:
		return "every event at " + clock(c.Zone) + " in " + zone + ": dates shifted by a fixed offset"
	}
	return "every event at " + clock(c.UTC) + " UTC: dates written as midnight at a fixed offset of " + offset(c.UTC) + ", not in " + zone
}

// scoredFields says which optional fields enter the completeness score.
func scoredFields(s *SiteRaw, set *Settings) []schema.Field {
	var out []schema.Field
	for _, f := range schema.Fields {
		if f.Required() {
			continue
		}
		if len(set.MappedFields) > 0 {
			if slices.Contains(set.MappedFields, f) {
				out = append(out, f)
			}
		} else if s.NonEmpty[f] > 0 {
			out = append(out, f)
		}
	}
	return out
}

func fieldCompleteness(all *SiteRaw, set *Settings) ([]FieldCompleteness, []TypeCompleteness) {
	scored := scoredFields(all, set)
	fc := make([]FieldCompleteness, 0, len(schema.Fields))
	for _, f := range schema.Fields {
		ne, n := all.NonEmpty[f], all.Events
		if !f.Required() {
			ne, n = applicable(all, f)
		}
		fc = append(fc, FieldCompleteness{Field: f, Required: f.Required(), NonEmpty: all.NonEmpty[f],
			Share: share(all.NonEmpty[f], all.Events), Applicable: n, ApplicableShare: share(ne, n),
			Scored: n > 0 && slices.Contains(scored, f)})
	}
	tc := []TypeCompleteness{}
	for _, t := range schema.EventTypes {
		tr, ok := all.ByType[t]
		if !ok || tr.Events == 0 {
			continue
		}
		x := TypeCompleteness{Type: t, Events: tr.Events, Fields: []FieldShare{}}
		for _, f := range schema.Fields {
			if !f.Required() {
				x.Fields = append(x.Fields, FieldShare{Field: f, Share: share(tr.NonEmpty[f], tr.Events)})
			}
		}
		tc = append(tc, x)
	}
	return fc, tc
}

// scores returns the unrounded sub-scores in dimensionWeights order; nil
// where a dimension has nothing to measure. rejected is nil for a site.
func scores(s *SiteRaw, d *siteDerived, set *Settings, rejected map[schema.Reason]int64, rows Rows) [len(dimensionWeights)]*float64 {
	var out [len(dimensionWeights)]*float64
	// completeness
	var terms []float64
	if rejected != nil && rows.Total > 0 {
		terms = append(terms, 1-share(rejected[schema.ReasonMissingRequired], rows.Total))
	}
	if s.Events > 0 {
		for _, f := range scoredFields(s, set) {
			if ne, n := applicable(s, f); n > 0 {
				terms = append(terms, share(ne, n))
			}
		}
	}
	if len(terms) > 0 {
		var t float64
		for _, x := range terms {
			t += x
		}
		out[0] = ptr(100 * t / float64(len(terms)))
	}
	// accuracy
	if rows.Total > 0 {
		// case_too_long is counted per case, one row each.
		bad := s.AccuracyRows + d.clockBack + s.Counts[CodeCaseTooLong]
		for reason, n := range rejected {
			if reason != schema.ReasonMissingRequired {
				bad += n
			}
		}
		out[1] = ptr(100 * (1 - float64(min(bad, rows.Total))/float64(rows.Total)))
	}
	// consistency
	if s.Events > 0 {
		c := 100 * (1 - float64(min(s.ConsistencyRows, s.Events))/float64(s.Events))
		if d.littleJudged > 0 {
			c -= littlePenalty * float64(d.littleFlagged) / float64(d.littleJudged)
		} else if d.little.Judged && d.little.Flagged {
			c -= littlePenalty
		}
		out[2] = ptr(max(0, c))
	}
	// currentness
	if d.judgedHours > 0 {
		out[3] = ptr(100 * (1 - float64(d.gapHours)/float64(d.judgedHours)))
	}
	// uniqueness
	if s.Events > 0 {
		out[4] = ptr(100 * (1 - float64(min(s.UniquenessRows, s.Events))/float64(s.Events)))
	}
	return out
}

// overall is the weighted mean of the sub-scores that exist, rounded.
func overall(sc [len(dimensionWeights)]*float64) *float64 {
	var sum, w float64
	for j, dw := range dimensionWeights {
		if sc[j] != nil {
			sum += dw.weight * *sc[j]
			w += dw.weight
		}
	}
	if w == 0 {
		return nil
	}
	return ptr(round1(sum / w))
}

func roundPtr(x *float64) *float64 {
	if x == nil {
		return nil
	}
	return ptr(round1(*x))
}

func finding(code string, n, of int64, ofName string, samples []Sample) Finding {
	return Finding{Code: code, Count: n, Share: share(n, of), Of: ofName, Samples: append([]Sample{}, samples...), Why: whyOf(code)}
}

// findings lists the findings of each dimension, in a fixed order.
func findings(r *Report, all *SiteRaw, sum *siteDerived, set *Settings, rejected map[schema.Reason]int64, waits, noEnq, noStart int64) map[string][]Finding {
	out := map[string][]Finding{}
	smp := r.Raw.Samples
	rows := r.Rows
	add := func(dim string, f Finding, info bool) {
		if f.Count > 0 {
			f.Informational = info
			out[dim] = append(out[dim], f)
		}
	}
	rejSamples := map[schema.Reason][]Sample{}
	for _, rc := range r.Rejections {
		rejSamples[rc.Reason] = rc.Samples
	}
	c := all.Counts

	// completeness
	add(DimCompleteness, finding(string(schema.ReasonMissingRequired), rejected[schema.ReasonMissingRequired], rows.Total, "rows", rejSamples[schema.ReasonMissingRequired]), false)
	for _, fc := range r.Completeness {
		if fc.Scored {
			ne, _ := applicable(all, fc.Field)
			f := finding(CodeEmptyValue, fc.Applicable-ne, fc.Applicable, "events the field applies to", smp[emptyKey(fc.Field)])
			f.Field = fc.Field
			add(DimCompleteness, f, false)
		}
	}
	st := all.Stages
	add(DimCompleteness, finding(CodeStageNoArrival, st.Cases-st.Arrival, st.Cases, "cases", nil), true)
	add(DimCompleteness, finding(CodeStageNoStart, st.Cases-st.Start, st.Cases, "cases", nil), true)
	add(DimCompleteness, finding(CodeStageNoComplete, st.Cases-st.Complete, st.Cases, "cases", nil), true)
	add(DimCompleteness, finding(CodeStageNoDepart, st.Cases-st.Departure, st.Cases, "cases", nil), true)
	add(DimCompleteness, finding(CodeWaitNoEnqueue, noEnq, waits, "waits", smp[CodeWaitNoEnqueue]), true)
	add(DimCompleteness, finding(CodeWaitNoStart, noStart, waits, "waits", smp[CodeWaitNoStart]), true)

	// accuracy
	for _, rc := range r.Rejections {
		if rc.Reason != schema.ReasonMissingRequired {
			add(DimAccuracy, finding(string(rc.Reason), rc.Count, rows.Total, "rows", rc.Samples), false)
		}
	}
	for _, code := range []string{CodeLaterThanUpload, CodeOutsideWindow} {
		add(DimAccuracy, finding(code, c[code], rows.Total, "rows", smp[code]), false)
	}
	add(DimAccuracy, finding(CodeClockBackwards, sum.clockBack, all.FileRows, "rows in file order", smp[CodeClockBackwards]), false)
	add(DimAccuracy, finding(CodeFileNotTimeOrdered, sum.notOrdered, all.FileRows, "rows in file order", nil), true)
	for _, code := range []string{CodeStartBeforeArrival, CodeCompleteBeforeStart, CodeDepartureBeforeArrival, CodeActivityAfterDeparture} {
		add(DimAccuracy, finding(code, c[code], rows.Accepted, "accepted rows", smp[code]), false)
	}
	add(DimAccuracy, finding(CodeCaseTooLong, c[CodeCaseTooLong], st.Cases, "cases", smp[CodeCaseTooLong]), false)
	add(DimAccuracy, finding(CodeServiceTooLong, c[CodeServiceTooLong], all.ByType[schema.Complete].Events, "completes", smp[CodeServiceTooLong]), false)
	add(DimAccuracy, finding(CodeFarInstant, sum.far, rows.Accepted, "accepted rows", sum.farSamples), false)
	add(DimAccuracy, finding(CodeSameInstantOrder, c[CodeSameInstantOrder], rows.Accepted, "accepted rows", smp[CodeSameInstantOrder]), false)
	add(DimAccuracy, finding(CodeSameInstant, c[CodeSameInstant], rows.Accepted, "accepted rows", smp[CodeSameInstant]), true)
	for _, h := range r.Resolution.Heaping {
		if h.Heaped {
			f := finding(CodeHeaping, h.Events, rows.Accepted, "accepted rows", nil)
			f.Grid = h.Grid
			add(DimAccuracy, f, true)
		}
	}

	// consistency
	add(DimConsistency, finding(CodeResourceOverlap, c[CodeResourceOverlap], all.ByType[schema.Start].Events, "starts", smp[CodeResourceOverlap]), false)
	add(DimConsistency, finding(CodeSiteChangeWithoutTransfer, c[CodeSiteChangeWithoutTransfer], rows.Accepted, "accepted rows", smp[CodeSiteChangeWithoutTransfer]), false)
	add(DimConsistency, finding(CodeCensusNegative, c[CodeCensusNegative], all.ByType[schema.Departure].Events, "departures", smp[CodeCensusNegative]), false)
	var littleSamples []Sample
	for _, l := range r.Little {
		if l.Flagged {
			littleSamples = append(littleSamples, Sample{Site: l.Site})
		}
	}
	add(DimConsistency, finding(CodeLittlesLawMismatch, sum.littleFlagged, sum.littleJudged, "judged sites", littleSamples), false)

	// currentness
	add(DimCurrentness, finding(CodeGapHour, sum.gapHours, sum.judgedHours, "judged hours", sum.gapSamples), false)
	add(DimCurrentness, finding(CodeGapDay, sum.gapDays, sum.judgedDays, "judged days", sum.daySamples), true)
	var staleSamples []Sample
	for _, cu := range r.Currentness {
		if cu.Stale {
			staleSamples = append(staleSamples, Sample{Site: cu.Site, At: cu.Newest})
		}
	}
	add(DimCurrentness, finding(CodeStaleSite, sum.stale, int64(len(r.Currentness)), "sites", staleSamples), true)

	// uniqueness
	for _, code := range []string{CodeExactDuplicate, CodeDuplicateEventID, CodeDuplicateCaseTypeTime} {
		add(DimUniqueness, finding(code, c[code], rows.Accepted, "accepted rows", smp[code]), false)
	}
	// Counted within duplicate_case_type_time already: said apart, not
	// scored twice.
	add(DimUniqueness, finding(CodeDuplicateAcrossFiles, c[CodeDuplicateAcrossFiles], rows.Accepted, "accepted rows", smp[CodeDuplicateAcrossFiles]), true)
	return out
}
