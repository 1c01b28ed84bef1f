package summary

import (
	"fmt"
	"io"
	"slices"
	"strings"
	"text/tabwriter"
	"time"
)

var sparks = []rune("▁▂▃▄▅▆▇█")

// sparkline draws one character per value, scaled to the largest.
func sparkline(vs []float64) string {
	top := 0.0
	for _, v := range vs {
		top = max(top, v)
	}
	var b strings.Builder
	for _, v := range vs {
		i := 0
		if top > 0 {
			i = int(v / top * float64(len(sparks)-1))
		}
		b.WriteRune(sparks[max(0, min(i, len(sparks)-1))])
	}
	return b.String()
}

// weekGrid draws an hour-of-week series (168 values from Monday 00:00) as
// seven lines of 24, one per day, on one scale: a 168-character line does
// not fit a terminal.
func weekGrid(vs []float64) []string {
	if len(vs) != 168 {
		return []string{sparkline(vs)}
	}
	line := []rune(sparkline(vs))
	days := []string{"Mon", "Tue", "Wed", "Thu", "Fri", "Sat", "Sun"}
	out := make([]string, 7)
	for d := range out {
		out[d] = days[d] + " " + string(line[24*d:24*d+24])
	}
	return out
}

// hourRuler marks the hours under a 24-character sparkline.
const hourRuler = "0     6     12    18"

// named shows an empty queue or activity name as such.
func named(s string) string {
	if s == "" {
		return "(none)"
	}
	return s
}

func means(rs []Rate) []float64 {
	out := make([]float64, len(rs))
	for i, r := range rs {
		out[i] = r.Mean
	}
	return out
}

// dur formats seconds briefly.
func dur(s float64) string {
	if s < 60 {
		return fmt.Sprintf("%.0fs", s)
	}
	return time.Duration(s * float64(time.Second)).Round(time.Second).String()
}

// Text writes s as small readable tables with sparkline arrival profiles
// (24 hours, and 168 hours from Monday 00:00 as a line per day), fitting
// 80 columns but for long names; headings are bold when
// color is true. It returns the first write error.
func (s *Summary) Text(w io.Writer, color bool) error {
	bold := func(t string) string {
		if color {
			return "\x1b[1m" + t + "\x1b[0m"
		}
		return t
	}
	tw := tabwriter.NewWriter(w, 2, 4, 2, ' ', 0)
	p := func(format string, args ...any) { fmt.Fprintf(tw, format, args...) }
	p("%s\n", bold("Summary"))
	if s.From != nil {
		p("period\t%s .. %s\n", s.From.Format(time.RFC3339), s.To.Format(time.RFC3339))
		p("\t%s, %d hours of exposure\n", s.Timezone, s.ExposureHours)
		if x := s.Excluded; x.LaterThanUpload+x.OutsideWindow+x.ExactDuplicates > 0 {
			p("left out\t%d later than their upload, %d outside the window, %d exact copies\n", x.LaterThanUpload, x.OutsideWindow, x.ExactDuplicates)
		}
	}
	approx := func(c Count) string {
		if c.Exact {
			return fmt.Sprintf("%.0f", c.Value)
		}
		return fmt.Sprintf("~%.0f (±%.1f%%)", c.Value, 100*c.RelStdError)
	}
	p("events\t%d\tcases\t%s\tsubjects\t%s\tresources\t%s\n", s.Events, approx(s.Cases), approx(s.Subjects), approx(s.Resources))
	p("\n%s\n", bold("Arrivals per hour"))
	p("all, by hour of day\t%s\n", sparkline(means(s.Arrivals.HourOfDay)))
	for _, x := range s.Sites {
		p("site %s, by hour of day\t%s\n", x.Name, sparkline(means(x.Arrivals.HourOfDay)))
	}
	for _, x := range s.Queues {
		p("queue %s, by hour of day\t%s\n", named(x.Name), sparkline(means(x.Arrivals.HourOfDay)))
	}
	p("\t%s\n", hourRuler)
	for i, l := range weekGrid(means(s.Arrivals.HourOfWeek)) {
		p("%s\t%s\n", map[bool]string{true: "all, by hour of week"}[i == 0], l)
	}
	p("\t    %s\n", hourRuler)
	if len(s.Queues) > 0 {
		p("\n%s\n", bold("Waiting"))
		p("queue\tn\tmean\tp50\tp90\tp95\tp99\tabandoned\tpatience median\n")
		for _, q := range s.Queues {
			med := "-"
			if q.Patience != nil && float64(q.Patience.Median) == float64(q.Patience.Median) {
				med = dur(float64(q.Patience.Median))
			}
			p("%s\t%d\t%s\t%s\t%s\t%s\t%s\t%.1f%%\t%s\n", named(q.Name), q.Wait.N, dur(q.Wait.Mean), dur(q.Wait.P50),
				dur(q.Wait.P90), dur(q.Wait.P95), dur(q.Wait.P99), 100*q.Wait.AbandonShare, med)
		}
	}
	// Activities without a measured service have no row: zeros would
	// read as instant services (their figure is "not measurable" below).
	measured := slices.DeleteFunc(slices.Clone(s.Activities), func(a ActivitySummary) bool { return a.Service.N == 0 })
	if len(measured) > 0 {
		p("\n%s\n", bold("Service"))
		p("activity\tn\tmean\tp50\tp90\tlognormal (meanlog, sdlog, KS)\n")
		for _, a := range measured {
			ln := "-"
			if a.Lognormal != nil {
				ln = fmt.Sprintf("%.3f, %.3f, %.3f", a.Lognormal.MeanLog, a.Lognormal.SDLog, a.Lognormal.KS)
			}
			p("%s\t%d\t%s\t%s\t%s\t%s\n", a.Name, a.Service.N, dur(a.Service.Mean), dur(a.Service.P50), dur(a.Service.P90), ln)
		}
	}
	noCensus := ""
	for _, nm := range s.NotMeasurable {
		p("\n%s\tnot measurable: %s\n", bold(figureLabel(nm.Figure)), nm.Why)
		if nm.Figure == "littles_law" {
			noCensus = nm.Why
		}
	}
	l := s.LengthOfStay
	p("\n%s\n", bold("Case duration (first to last event)"))
	p("n %d\tmean %s\tp50 %s\tp90 %s\tp99 %s\n", l.N, dur(l.Mean), dur(l.P50), dur(l.P90), dur(l.P99))
	if ev := s.EventsPerCase; ev.N > 0 {
		p("events per case\tmean %.2f\tmin %.0f\tp50 %.0f\tp90 %.0f\tmax %.0f\n", ev.Mean, ev.Min, ev.P50, ev.P90, ev.Max)
	}
	if b := s.BetweenEvents; b.N > 0 {
		p("between events\tmean %s\tp50 %s\tp90 %s\n", dur(b.Mean), dur(b.P50), dur(b.P90))
	}
	o := s.Occupancy
	p("\n%s\n", bold("In system"))
	if noCensus != "" {
		// Cases that never leave would pile up in the census: its curve and
		// L would count the log's length, not the cases present.
		p("not measurable: %s\n", noCensus)
	} else {
		for i, l := range weekGrid(o.HourOfWeek) {
			p("%s\t%s\n", map[bool]string{true: "by hour of week"}[i == 0], l)
		}
		p("\t    %s\n", hourRuler)
		p("peak (bucket mean)\t%.2f\n", o.Peak)
		p("Little: L (census)\t%.3f\tλW (stays)\t%.3f\tratio\t%.4f\n", o.Little.L, o.Little.LambdaW, o.Little.Ratio)
		p("\tentries %d\texits %d\topen %d\n", o.Little.Entries, o.Little.Exits, o.Little.Open)
	}
	if pr := s.Process; pr != nil {
		if len(pr.DirectlyFollows) > 0 {
			p("\n%s\n", bold("Directly follows (top 10)"))
			p("from\tto\tcount\tp50\tp90\n")
			for _, f := range pr.DirectlyFollows[:min(10, len(pr.DirectlyFollows))] {
				p("%s\t%s\t%d\t%s\t%s\n", f.From, f.To, f.Count, dur(f.P50), dur(f.P90))
			}
		}
		if len(pr.Variants) > 0 {
			p("\n%s\n", bold(fmt.Sprintf("Variants (top 5 of %d)", pr.DistinctVariant)))
			for _, v := range pr.Variants[:min(5, len(pr.Variants))] {
				p("%d cases\t%.1f%%\t%s\n", v.Cases, 100*v.Share, strings.Join(v.Activities, " > "))
			}
		}
		if len(pr.Handovers) > 0 {
			p("\n%s\n", bold("Handovers (top 5)"))
			for _, h := range pr.Handovers[:min(5, len(pr.Handovers))] {
				p("%s\t%s\t%d\n", h.From, h.To, h.Count)
			}
		}
	}
	return tw.Flush()
}

// Label is the heading of the figure, for people ("Little's law", not
// its key).
func (n NotMeasurable) Label() string { return figureLabel(n.Figure) }

// figureLabel is the heading of a figure named in NotMeasurable.
func figureLabel(figure string) string {
	switch figure {
	case "littles_law":
		return "Little's law"
	case "waits":
		return "Waits"
	case "services":
		return "Services"
	}
	return strings.ToUpper(figure[:1]) + figure[1:]
}
