package web

import (
	"fmt"
	"math"
	"strconv"
	"strings"
	"time"

	"github.com/flowcat-catalog/flowcat/catalog"
	"github.com/flowcat-catalog/flowcat/catalog/summary"
	"github.com/flowcat-catalog/flowcat/quality"
)

// Duration writes seconds the way people read them: s, min, h or d.
func Duration(s float64) string {
	switch {
	case math.IsNaN(s) || math.IsInf(s, 0):
		return "-"
	case math.Abs(s) < 60:
		return strconv.FormatFloat(s, 'f', 0, 64) + " s"
	case math.Abs(s) < 3600:
		return strconv.FormatFloat(s/60, 'f', 1, 64) + " min"
	case math.Abs(s) < 2*86400:
		return strconv.FormatFloat(s/3600, 'f', 1, 64) + " h"
	}
	return strconv.FormatFloat(s/86400, 'f', 1, 64) + " d"
}

// Percent writes a share as a percentage with one decimal.
func Percent(x float64) string { return strconv.FormatFloat(100*x, 'f', 1, 64) + "%" }

var weekdays = []string{"Mon", "Tue", "Wed", "Thu", "Fri", "Sat", "Sun"}

func hourOfWeek(h int) string { return fmt.Sprintf("%s %02d:00", weekdays[h/24%7], h%24) }

func weekTicks() []Tick {
	var out []Tick
	for d := range 7 {
		out = append(out, Tick{At: float64(d*24) + 12, Label: weekdays[d]})
	}
	return out
}

func fixed(n int) func(float64) string {
	return func(v float64) string { return strconv.FormatFloat(v, 'f', n, 64) }
}

// ArrivalsByHourOfWeek draws the mean arrivals per hour for each of the
// 168 hours of the week with the exact Poisson 95% interval of each.
func ArrivalsByHourOfWeek(s *summary.Summary) *Plot {
	rates := s.Arrivals.HourOfWeek
	top := 0.0
	for _, r := range rates {
		top = math.Max(top, r.Upper)
	}
	top = niceMax(top, 1)
	p := &Plot{ID: "arrivals-how", Title: "Arrivals by hour of the week (" + s.Timezone + ")",
		Desc: fmt.Sprintf("Mean arrivals per hour for each hour of the week from Monday 00:00, with a 95%% interval for each; %d arrivals over %d hours observed.", s.Arrivals.Total, s.ExposureHours),
		X:    Axis{Min: 0, Max: 168, Label: "hour of the week, local time", Ticks: weekTicks()},
		Y:    Axis{Min: 0, Max: top, Label: "arrivals per hour", Ticks: niceTicks(0, top, 4, trimmed)},
		Table: Table{Caption: "Arrivals per hour, with the exact Poisson 95% interval",
			Head: []string{"hour", "arrivals", "hours observed", "mean per hour", "lower", "upper"}}}
	for i, r := range rates {
		lo, hi := r.Lower, r.Upper
		p.Bars = append(p.Bars, Bar{X0: float64(i), X1: float64(i + 1), Y: r.Mean, Lo: &lo, Hi: &hi,
			Label: fmt.Sprintf("%s: %s per hour (95%% interval %s to %s; %d arrivals in %d hours)", hourOfWeek(i), trimmed(r.Mean), trimmed(r.Lower), trimmed(r.Upper), r.Count, r.Hours),
			Data:  map[string]string{"hour": strconv.Itoa(i), "value": Value(r.Mean), "count": strconv.FormatUint(r.Count, 10)}})
		p.Table.Rows = append(p.Table.Rows, []string{hourOfWeek(i), strconv.FormatUint(r.Count, 10), strconv.Itoa(r.Hours), trimmed(r.Mean), trimmed(r.Lower), trimmed(r.Upper)})
	}
	return p
}

func trimmed(v float64) string {
	s := strconv.FormatFloat(v, 'f', 2, 64)
	s = strings.TrimRight(strings.TrimRight(s, "0"), ".")
	if s == "" || s == "-" {
		return "0"
	}
	return s
}

// WaitQuantiles draws, per queue, the median, 90th, 95th and 99th
// percentiles of the served waits: the summary keeps these quantiles
// and the shares over thresholds, not a histogram of waits.
func WaitQuantiles(s *summary.Summary) *Plot {
	var qs []summary.QueueSummary
	for _, q := range s.Queues {
		if q.Wait.N > 0 {
			qs = append(qs, q)
		}
	}
	if len(qs) == 0 {
		return nil
	}
	top := 0.0
	for _, q := range qs {
		top = math.Max(top, q.Wait.P99/60)
	}
	top = niceMax(top, 1)
	names := []string{"p50", "p90", "p95", "p99"}
	p := &Plot{ID: "waits", Title: "Waiting time per queue",
		Desc: "For each queue, the median, 90th, 95th and 99th percentile of the waits that ended in a service, in minutes.",
		Y:    Axis{Min: 0, Max: top, Label: "minutes", Ticks: niceTicks(0, top, 4, trimmed)},
		X:    Axis{Min: 0, Max: float64(len(qs))},
		Table: Table{Caption: "Waits that ended in a service, per queue",
			Head: []string{"queue", "waits", "mean", "p50", "p90", "p95", "p99", "abandoned", "abandoned share"}}}
	for i, q := range qs {
		name := q.Name
		if name == "" {
			name = "(no queue)"
		}
		p.X.Ticks = append(p.X.Ticks, Tick{At: float64(i) + 0.5, Label: name})
		vals := []float64{q.Wait.P50, q.Wait.P90, q.Wait.P95, q.Wait.P99}
		for j, v := range vals {
			x0 := float64(i) + 0.1 + 0.2*float64(j)
			p.Bars = append(p.Bars, Bar{X0: x0, X1: x0 + 0.2, Y: v / 60, Class: "q" + strconv.Itoa(j),
				Label: fmt.Sprintf("%s, %s of the waits: %s", name, names[j], Duration(v)),
				Data:  map[string]string{"queue": q.Name, "quantile": names[j], "value": Value(v)}})
		}
		w := q.Wait
		p.Table.Rows = append(p.Table.Rows, []string{name, strconv.FormatUint(w.N, 10), Duration(w.Mean), Duration(w.P50), Duration(w.P90), Duration(w.P95), Duration(w.P99),
			strconv.FormatUint(w.Abandoned, 10), Percent(w.AbandonShare)})
	}
	return p
}

// Patience draws the Kaplan-Meier curve of the time to abandon of one
// queue (served cases censored at their wait) with its 95% band.
func Patience(q *summary.QueueSummary) *Plot {
	if q.Patience == nil || len(q.Patience.Steps) == 0 {
		return nil
	}
	steps := q.Patience.Steps
	last := steps[len(steps)-1].Time / 60
	top := niceMax(last, 1)
	name := q.Name
	if name == "" {
		name = "(no queue)"
	}
	median := "not reached"
	if medianSet(q.Patience) {
		median = Duration(float64(q.Patience.Median))
	}
	p := &Plot{ID: "patience-" + slug(q.Name), Title: "Patience in queue " + name,
		Desc: fmt.Sprintf("Kaplan-Meier estimate of the share still waiting (not abandoned) after each time, with its 95%% band; %d steps; median patience %s.", len(steps), median),
		X:    Axis{Min: 0, Max: top, Label: "minutes waited", Ticks: niceTicks(0, top, 5, trimmed)},
		Y:    Axis{Min: 0, Max: 1, Label: "share still waiting", Ticks: niceTicks(0, 1, 4, func(v float64) string { return Percent(v) })},
		Table: Table{Caption: "Kaplan-Meier steps: time, at risk, abandoned, served (censored), share still waiting and its band",
			Head: []string{"time", "at risk", "abandoned", "censored", "still waiting", "lower", "upper"}}}
	pts := [][2]float64{{0, 1}}
	band := []BandPt{{X: 0, Lo: 1, Hi: 1}}
	var ys []string
	for i, st := range steps {
		pts = append(pts, [2]float64{st.Time / 60, st.Survival})
		band = append(band, BandPt{X: st.Time / 60, Lo: numOr(st.Lower, st.Survival), Hi: numOr(st.Upper, st.Survival)})
		ys = append(ys, Value(st.Survival))
		if i < maxTableRows {
			p.Table.Rows = append(p.Table.Rows, []string{Duration(st.Time), strconv.FormatUint(st.AtRisk, 10), strconv.FormatUint(st.Events, 10),
				strconv.FormatUint(st.Censored, 10), Percent(st.Survival), Percent(numOr(st.Lower, st.Survival)), Percent(numOr(st.Upper, st.Survival))})
		}
	}
	if len(steps) > maxTableRows {
		p.Table.More = fmt.Sprintf("%d more steps: the API's summary holds them all.", len(steps)-maxTableRows)
	}
	p.Bands = []Band{{Pts: band, Step: true, Label: "95% band"}}
	p.Lines = []Line{{Name: "share still waiting", Pts: pts, Step: true, Data: map[string]string{"survival": strings.Join(ys, " "), "steps": strconv.Itoa(len(steps))}}}
	if medianSet(q.Patience) {
		p.Refs = append(p.Refs, Ref{At: float64(q.Patience.Median) / 60, Vertical: true, Label: "median: " + Duration(float64(q.Patience.Median)),
			Data: map[string]string{"value": Value(float64(q.Patience.Median))}})
	}
	return p
}

func medianSet(c *summary.KMCurve) bool {
	m := float64(c.Median)
	return !math.IsNaN(m) && m > 0
}

func numOr(n summary.Num, alt float64) float64 {
	if f := float64(n); !math.IsNaN(f) && !math.IsInf(f, 0) {
		return f
	}
	return alt
}

const maxTableRows = 200

// ServiceTime draws one activity's service times on a log axis: the
// fitted lognormal's density (per unit of log10 time) and the observed
// quantiles as vertical lines, over the histogram of the observed
// services.
func ServiceTime(a *summary.ActivitySummary) *Plot {
	ln := a.Lognormal
	if ln == nil || a.Service.N == 0 || !(ln.SDLog > 0) {
		return nil
	}
	name := a.Name
	if name == "" {
		name = "(no activity)"
	}
	mu, sd := ln.MeanLog/math.Ln10, ln.SDLog/math.Ln10 // of log10 seconds
	lo := math.Pow(10, math.Floor(math.Min(mu-3*sd, math.Log10(math.Max(a.Service.P50, 1))-1)))
	hi := math.Pow(10, math.Ceil(math.Max(mu+3*sd, math.Log10(math.Max(a.Service.P99, 1))+0.3)))
	peak := 1 / (sd * math.Sqrt(2*math.Pi))
	p := &Plot{ID: "service-" + slug(a.Name), Title: "Service time of " + name + " (log axis)",
		Desc: fmt.Sprintf("The lognormal fitted to %d service times (meanlog %.3f, sdlog %.3f of seconds; Kolmogorov-Smirnov distance %.3f), drawn as a density over log10 of time, with the observed median, 90th, 95th and 99th percentiles as vertical lines.", ln.N, ln.MeanLog, ln.SDLog, ln.KS),
		X:    Axis{Min: lo, Max: hi, Log: true, Label: "service time (log scale)", Ticks: logTicks(lo, hi, Duration)},
		Y:    Axis{Min: 0, Max: niceMax(peak*1.1, 0.1), Label: "density per log10 unit", Ticks: niceTicks(0, niceMax(peak*1.1, 0.1), 3, trimmed)},
		Table: Table{Caption: "Observed quantiles and the fitted lognormal's",
			Head: []string{"quantile", "observed", "lognormal"}}}
	var pts [][2]float64
	for i := 0; i <= 120; i++ {
		lx := math.Log10(lo) + (math.Log10(hi)-math.Log10(lo))*float64(i)/120
		z := (lx - mu) / sd
		pts = append(pts, [2]float64{math.Pow(10, lx), math.Exp(-z*z/2) * peak})
	}
	p.Lines = []Line{{Name: "fitted lognormal", Pts: pts, Class: "fit", Data: map[string]string{"meanlog": Value(ln.MeanLog), "sdlog": Value(ln.SDLog)}}}
	// The observed services as a histogram on the same scale: each bin's
	// share of the services over its width in log10 units, so that the
	// bars and the fitted density compare directly.
	if h := a.Histogram; h != nil && a.Service.N > 0 {
		top := p.Y.Max
		for i, c := range h.Counts {
			from, to := math.Max(h.Edges[i], lo), math.Min(h.Edges[i+1], hi)
			if c == 0 || to <= from || h.Edges[i] <= 0 {
				continue // the first bin starts at 0, which a log axis cannot show
			}
			dens := float64(c) / float64(a.Service.N) / (math.Log10(h.Edges[i+1]) - math.Log10(h.Edges[i]))
			top = math.Max(top, dens)
			p.Bars = append(p.Bars, Bar{X0: from, X1: to, Y: dens,
				Label: fmt.Sprintf("%s to %s: %d services", Duration(h.Edges[i]), Duration(h.Edges[i+1]), c),
				Data:  map[string]string{"from": Value(h.Edges[i]), "value": strconv.FormatUint(c, 10)}})
		}
		if top > p.Y.Max {
			p.Y.Max = niceMax(top*1.05, 0.1)
			p.Y.Ticks = niceTicks(0, p.Y.Max, 3, trimmed)
		}
		p.Desc += " Bars: the observed services in bins growing 1-2-5, as a density on the same scale."
	}
	zs := map[string]float64{"p50": 0, "p90": 1.2815515655446004, "p95": 1.6448536269514722, "p99": 2.3263478740408408} // standard normal quantiles (common practice, R qnorm)
	for _, q := range []struct {
		name string
		v    float64
	}{{"p50", a.Service.P50}, {"p90", a.Service.P90}, {"p95", a.Service.P95}, {"p99", a.Service.P99}} {
		if q.v > 0 {
			p.Refs = append(p.Refs, Ref{At: q.v, Vertical: true, Label: q.name + ": " + Duration(q.v), Data: map[string]string{"quantile": q.name, "value": Value(q.v)}})
		}
		p.Table.Rows = append(p.Table.Rows, []string{q.name, Duration(q.v), Duration(math.Exp(ln.MeanLog + zs[q.name]*ln.SDLog))})
	}
	return p
}

// LengthOfStay draws the histogram of the time from a case's first to
// its last event, on the summary's 1-2-5 bins.
func LengthOfStay(s *summary.Summary) *Plot {
	return binChart("los-hist", "Length of stay", "length of stay", "cases",
		fmt.Sprintf("Cases by the time from their first to their last event, in bins growing 1-2-5; %d cases, median %s, 90th percentile %s.", s.LengthOfStay.N, Duration(s.LengthOfStay.P50), Duration(s.LengthOfStay.P90)),
		&s.LengthOfStay.Histogram)
}

// WaitHistogram draws the waits of one queue that ended in a service, on
// the summary's 1-2-5 bins.
func WaitHistogram(q *summary.QueueSummary) *Plot {
	if q.Wait.Histogram == nil {
		return nil
	}
	name := q.Name
	if name == "" {
		name = "(no queue)"
	}
	return binChart("wait-hist-"+slug(q.Name), "Waits in queue "+name, "wait", "waits",
		fmt.Sprintf("Waits that ended in a service, in bins growing 1-2-5; %d waits, median %s, 90th percentile %s.", q.Wait.N, Duration(q.Wait.P50), Duration(q.Wait.P90)),
		q.Wait.Histogram)
}

// binChart draws a histogram of durations on 1-2-5 bins, one bar per bin.
func binChart(id, title, what, unit, desc string, h *summary.Histogram) *Plot {
	if h == nil || len(h.Counts) == 0 {
		return nil
	}
	var top uint64
	for _, c := range h.Counts {
		top = max(top, c)
	}
	ymax := niceMax(float64(top), 1)
	p := &Plot{ID: id, Title: title, Desc: desc,
		X:     Axis{Min: 0, Max: float64(len(h.Counts)), Label: what + " (bins from)"},
		Y:     Axis{Min: 0, Max: ymax, Label: unit, Ticks: niceTicks(0, ymax, 4, fixed(0))},
		Table: Table{Caption: strings.ToUpper(unit[:1]) + unit[1:] + " per " + what + " bin", Head: []string{"from", "to", unit}}}
	every := max(1, len(h.Counts)/8)
	for i, c := range h.Counts {
		p.Bars = append(p.Bars, Bar{X0: float64(i), X1: float64(i + 1), Y: float64(c),
			Label: fmt.Sprintf("%s to %s: %d %s", Duration(h.Edges[i]), Duration(h.Edges[i+1]), c, unit),
			Data:  map[string]string{"from": Value(h.Edges[i]), "value": strconv.FormatUint(c, 10)}})
		if i%every == 0 {
			p.X.Ticks = append(p.X.Ticks, Tick{At: float64(i), Label: Duration(h.Edges[i])})
		}
		p.Table.Rows = append(p.Table.Rows, []string{Duration(h.Edges[i]), Duration(h.Edges[i+1]), strconv.FormatUint(c, 10)})
	}
	return p
}

// Occupancy draws the mean number of cases in the system by hour of the
// week, with the two sides of Little's law (L measured as the
// time-average census, λW as entries per time times their mean stay) as
// reference lines.
func Occupancy(s *summary.Summary) *Plot {
	o := s.Occupancy
	if len(o.HourOfWeek) == 0 || o.Little.Entries == 0 {
		return nil
	}
	top := math.Max(o.Little.L, o.Little.LambdaW)
	for _, v := range o.HourOfWeek {
		top = math.Max(top, v)
	}
	top = niceMax(top, 1)
	l := o.Little
	judged := "not judged (too few stays or too short a span)"
	if l.Judged {
		judged = fmt.Sprintf("judged: L / λW = %.3f", l.Ratio)
	}
	p := &Plot{ID: "occupancy", Title: "Cases in the system by hour of the week (" + s.Timezone + ")",
		Desc: fmt.Sprintf("Mean number of cases in the system for each hour of the week, with Little's law's two sides measured apart: L = %.3f (time-average census) and λW = %.3f (entries per second %.6g times mean stay %s); %s.", l.L, l.LambdaW, l.Lambda, Duration(l.W), judged),
		X:    Axis{Min: 0, Max: 168, Label: "hour of the week, local time", Ticks: weekTicks()},
		Y:    Axis{Min: 0, Max: top, Label: "cases in the system", Ticks: niceTicks(0, top, 4, trimmed)},
		Table: Table{Caption: "Mean cases in the system per hour of the week",
			Head: []string{"hour", "mean in system"}}}
	var pts [][2]float64
	var ys []string
	for i, v := range o.HourOfWeek {
		pts = append(pts, [2]float64{float64(i) + 0.5, v})
		ys = append(ys, Value(v))
		p.Table.Rows = append(p.Table.Rows, []string{hourOfWeek(i), trimmed(v)})
	}
	p.Lines = []Line{{Name: "mean cases in the system", Pts: pts, Data: map[string]string{"values": strings.Join(ys, " ")}}}
	p.Refs = []Ref{
		{At: l.L, Label: fmt.Sprintf("L = %.3f: time-average census", l.L), Class: "little-l", Data: map[string]string{"side": "l", "value": Value(l.L)}},
		{At: l.LambdaW, Label: fmt.Sprintf("λW = %.3f: entries per time times mean stay", l.LambdaW), Class: "little-lw", Data: map[string]string{"side": "lambda_w", "value": Value(l.LambdaW)}},
	}
	return p
}

// Variants draws the share of cases of the most frequent trace variants.
func Variants(pr *summary.Process) *Plot {
	if pr == nil || len(pr.Variants) == 0 {
		return nil
	}
	vs := pr.Variants
	if len(vs) > 10 {
		vs = vs[:10]
	}
	top := 0.0
	for _, v := range vs {
		top = math.Max(top, v.Share)
	}
	top = math.Min(1, niceMax(top, 0.1))
	p := &Plot{ID: "variants", Title: "Most frequent paths through the process",
		Desc: fmt.Sprintf("Share of cases following each of the %d most frequent activity sequences (of %d distinct).", len(vs), pr.DistinctVariant),
		X:    Axis{Min: 0, Max: float64(len(vs)), Label: "path (see the table)"},
		Y:    Axis{Min: 0, Max: top, Label: "share of cases", Ticks: niceTicks(0, top, 4, Percent)},
		Table: Table{Caption: "Paths: the activities in order, cases and share",
			Head: []string{"path", "activities", "cases", "share"}}}
	for i, v := range vs {
		label := "P" + strconv.Itoa(i+1)
		p.X.Ticks = append(p.X.Ticks, Tick{At: float64(i) + 0.5, Label: label})
		p.Bars = append(p.Bars, Bar{X0: float64(i) + 0.1, X1: float64(i) + 0.9, Y: v.Share,
			Label: fmt.Sprintf("%s (%s): %d cases, %s", label, strings.Join(v.Activities, " → "), v.Cases, Percent(v.Share)),
			Data:  map[string]string{"value": Value(v.Share), "cases": strconv.FormatUint(v.Cases, 10)}})
		p.Table.Rows = append(p.Table.Rows, []string{label, strings.Join(v.Activities, " → "), strconv.FormatUint(v.Cases, 10), Percent(v.Share)})
	}
	return p
}

// Trend draws one site's score over its uploads, oldest first, with the
// uploads that raised alerts marked by a triangle.
func Trend(site string, points []catalog.TrendPoint, alerts []catalog.UploadAlert) *Plot {
	if len(points) == 0 {
		return nil
	}
	label := site
	if site == quality.AllSites {
		label = "all sites"
	}
	bySeq := map[int][]string{}
	for _, a := range alerts {
		if a.Site == site {
			bySeq[a.Seq] = append(bySeq[a.Seq], a.Sentence)
		}
	}
	minSeq, maxSeq := points[0].Seq, points[len(points)-1].Seq
	p := &Plot{ID: "trend-" + slug(site), Title: "Quality score over uploads: " + label, Height: 180,
		Desc: fmt.Sprintf("The quality score (0 to 100) of each of %d uploads at %s, oldest first; a triangle marks an upload that raised a drift alert (%d such).", len(points), label, len(bySeq)),
		X:    Axis{Min: float64(minSeq) - 0.5, Max: float64(maxSeq) + 0.5, Label: "upload number"},
		Y:    Axis{Min: 0, Max: 100, Label: "score", Ticks: niceTicks(0, 100, 4, fixed(0))},
		Table: Table{Caption: "Score of each upload",
			Head: []string{"upload", "received", "status", "version", "events", "score", "alerts"}}}
	every := max(1, (maxSeq-minSeq+1)/10)
	for s := minSeq; s <= maxSeq; s += every {
		p.X.Ticks = append(p.X.Ticks, Tick{At: float64(s), Label: "#" + strconv.Itoa(s)})
	}
	var pts [][2]float64
	for _, pt := range points {
		score := "-"
		if pt.Score != nil {
			score = strconv.FormatFloat(*pt.Score, 'f', 1, 64)
			pts = append(pts, [2]float64{float64(pt.Seq), *pt.Score})
			m := Mark{X: float64(pt.Seq), Y: *pt.Score,
				Label: fmt.Sprintf("upload #%d, %s: score %s (%s)", pt.Seq, pt.ReceivedAt.Format("2006-01-02 15:04"), score, pt.Status),
				Data:  map[string]string{"seq": strconv.Itoa(pt.Seq), "score": Value(*pt.Score), "status": string(pt.Status)}}
			if as := bySeq[pt.Seq]; len(as) > 0 {
				m.Shape, m.Class = "triangle", "alert"
				m.Label += "; alert: " + strings.Join(as, " ")
				m.Data["alerts"] = strconv.Itoa(len(as))
			}
			p.Marks = append(p.Marks, m)
		}
		version := ""
		if pt.Version > 0 {
			version = strconv.Itoa(pt.Version)
		}
		p.Table.Rows = append(p.Table.Rows, []string{"#" + strconv.Itoa(pt.Seq), pt.ReceivedAt.Format(time.DateTime), string(pt.Status), version,
			strconv.FormatInt(pt.Events, 10), score, strings.Join(bySeq[pt.Seq], " ")})
	}
	if len(pts) > 1 {
		p.Lines = []Line{{Name: "score of " + label, Pts: pts}}
	}
	return p
}

// slug makes a name safe in an element id.
func slug(s string) string {
	if s == "" {
		return "none"
	}
	if s == quality.AllSites {
		return "all"
	}
	var b strings.Builder
	for _, r := range s {
		if r >= 'a' && r <= 'z' || r >= 'A' && r <= 'Z' || r >= '0' && r <= '9' || r == '-' || r == '_' {
			b.WriteRune(r)
		} else {
			fmt.Fprintf(&b, "_%x", r)
		}
	}
	return b.String()
}
