package quality

import (
	"bufio"
	"fmt"
	"io"
	"strconv"
	"strings"
	"time"
)

// ANSI colours for scores: good, fair, poor.
const (
	ansiGreen  = "\x1b[32m"
	ansiYellow = "\x1b[33m"
	ansiRed    = "\x1b[31m"
	ansiBold   = "\x1b[1m"
	ansiReset  = "\x1b[0m"
)

// Text writes r as a short human-readable summary of aligned tables.
// Scores are coloured with ANSI escapes only when color is true. It
// returns the first write error.
func (r *Report) Text(w io.Writer, color bool) error {
	bw := bufio.NewWriter(w)
	p := &painter{color: color}
	fmt.Fprintf(bw, "%s  score %s\n", p.bold("quality report v"+r.Version), p.score(r.Score, 0))
	fmt.Fprintf(bw, "rows   %d total, %d accepted, %d rejected (%s)\n",
		r.Rows.Total, r.Rows.Accepted, r.Rows.Rejected, percent(r.RejectedShare()))
	if r.TimeRange.First != nil {
		fmt.Fprintf(bw, "time   %s .. %s\n", r.TimeRange.First.Format(time.RFC3339), r.TimeRange.Last.Format(time.RFC3339))
	}
	fmt.Fprintf(bw, "sites  %d distinct", r.Sites.Distinct)
	if r.Sites.Other > 0 {
		fmt.Fprintf(bw, ", %d events at further sites", r.Sites.Other)
	}
	bw.WriteString("\n")
	if len(r.UnmappedColumns) > 0 {
		fmt.Fprintf(bw, "dropped unmapped columns: %s\n", strings.Join(r.UnmappedColumns, ", "))
	}
	bw.WriteString("\n")

	fmt.Fprintf(bw, "%s\n", p.bold(fmt.Sprintf("%-13s %6s %6s %8s", "dimension", "score", "weight", "rows")))
	for _, d := range r.Dimensions {
		fmt.Fprintf(bw, "%-13s %s %6.2f %8d\n", d.Name, p.score(d.Score, 6), d.Weight, d.Rows)
	}

	fields := []string{}
	for _, c := range r.Completeness {
		if c.Scored || c.Required {
			continue
		}
		if c.NonEmpty == 0 {
			fields = append(fields, string(c.Field))
		}
	}
	if len(fields) > 0 {
		fmt.Fprintf(bw, "(not scored, never filled: %s)\n", strings.Join(fields, ", "))
	}

	type row struct{ dim, code, count, share, lines string }
	var rows []row
	for d, f := range r.Findings() {
		code := f.Code
		if f.Field != "" {
			code += " " + string(f.Field)
		}
		rows = append(rows, row{d.Name, code, strconv.FormatInt(f.Count, 10), percent(f.Share), sampleLines(f.Samples)})
	}
	for i := range r.Internal {
		f := &r.Internal[i]
		rows = append(rows, row{"internal", f.Code, strconv.FormatInt(f.Count, 10), percent(f.Share), sampleLines(f.Samples)})
	}
	if len(rows) > 0 {
		wd, wc, wn := len("dimension"), len("finding"), len("count")
		for _, x := range rows {
			wd, wc, wn = max(wd, len(x.dim)), max(wc, len(x.code)), max(wn, len(x.count))
		}
		fmt.Fprintf(bw, "\n%s\n", p.bold(fmt.Sprintf("%-*s %-*s %*s %7s  %s", wd, "dimension", wc, "finding", wn, "count", "share", "lines")))
		for _, x := range rows {
			fmt.Fprintf(bw, "%-*s %-*s %*s %7s  %s\n", wd, x.dim, wc, x.code, wn, x.count, x.share, x.lines)
		}
	}
	return bw.Flush()
}

type painter struct{ color bool }

func (p *painter) bold(s string) string {
	if !p.color {
		return s
	}
	return ansiBold + s + ansiReset
}

// score formats a score right-aligned to width, "-" when absent.
func (p *painter) score(s *float64, width int) string {
	if s == nil {
		return fmt.Sprintf("%*s", width, "-")
	}
	t := fmt.Sprintf("%*.1f", width, *s)
	if !p.color {
		return t
	}
	c := ansiRed
	switch {
	case *s >= 90:
		c = ansiGreen
	case *s >= 70:
		c = ansiYellow
	}
	return c + t + ansiReset
}

func percent(x float64) string {
	return strconv.FormatFloat(100*x, 'f', 1, 64) + "%"
}

func sampleLines(s []Sample) string {
	var b strings.Builder
	for i, x := range s {
		if i > 0 {
			b.WriteByte(' ')
		}
		b.WriteString(strconv.FormatInt(x.Line, 10))
	}
	return b.String()
}
