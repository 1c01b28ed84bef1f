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
	r.textHead(bw, p)
	r.textScores(bw, p)
	r.textLittle(bw, p)
	r.textFindings(bw, p)
	r.textMeanings(bw, p)
	r.textRejections(bw, p)
	return bw.Flush()
}

// textHead writes the report's heading: score, rows, time, sites, cases.
func (r *Report) textHead(bw *bufio.Writer, p *painter) {
	// "format", not "v": the report's own format, never a dataset version.
	fmt.Fprintf(bw, "%s  score %s\n", p.bold("quality report (format "+r.Version+")"), p.score(r.Score, 0))
	if h := r.Rows.Held; h > 0 {
		// An upload that re-sends held events: what the file had, and
		// which of its rows the scores below judge.
		fmt.Fprintf(bw, "rows   %d in the file: %d rejected (%s), %d held already or copies (not judged again), %d accepted and judged here\n",
			r.Rows.InFile(), r.Rows.Rejected, percent(r.RejectedShare()), h, r.Rows.Accepted)
	} else {
		fmt.Fprintf(bw, "rows   %d total, %d accepted, %d rejected (%s)\n",
			r.Rows.Total, r.Rows.Accepted, r.Rows.Rejected, percent(r.RejectedShare()))
	}
	if a := r.Rows.Again; a > 0 {
		if a == 1 {
			bw.WriteString("       1 rejected row sent again by a later file (the same text), counted once above\n")
		} else {
			fmt.Fprintf(bw, "       %d rejected rows sent again by later files (the same text), counted once above\n", a)
		}
	}
	if r.TimeRange.First != nil {
		fmt.Fprintf(bw, "time   %s .. %s\n       resolution %s (%s)\n", r.TimeRange.First.Format(time.RFC3339),
			r.TimeRange.Last.Format(time.RFC3339), r.Resolution.Grid, r.Resolution.Zone)
	}
	fmt.Fprintf(bw, "sites  %d distinct", r.Sites.Distinct)
	if r.Sites.Other > 0 {
		fmt.Fprintf(bw, ", %d events at further sites", r.Sites.Other)
	}
	bw.WriteString("\n")
	if r.Stages.Cases > 0 {
		fmt.Fprintf(bw, "cases  %d; with arrival %s, start %s, complete %s, departure %s\n", r.Stages.Cases,
			percent(r.Stages.Arrival), percent(r.Stages.Start), percent(r.Stages.Complete), percent(r.Stages.Departure))
	}
	if len(r.UnmappedColumns) > 0 {
		fmt.Fprintf(bw, "dropped unmapped columns: %s\n", strings.Join(r.UnmappedColumns, ", "))
	}
	if b := r.Raw.Settings.EventIDBound; b != nil {
		fmt.Fprintf(bw, "event_id check: its memory bound (event_id_bound, %d slots) forgot %d ids still in the window; from %s it looked back at least %s, not %s\n",
			b.Slots, b.Dropped, b.From.Format(time.RFC3339), time.Duration(b.LookbackSeconds*float64(time.Second)),
			time.Duration(r.Raw.Settings.EventIDWindowSeconds*float64(time.Second)))
	}
	bw.WriteString("\n")

}

// textScores writes the sub-scores, all sites then each, and the peaks
// of resource capacity.
func (r *Report) textScores(bw *bufio.Writer, p *painter) {
	head := []string{"site", "score"}
	for _, dw := range dimensionWeights {
		head = append(head, abbrev(dw.name))
	}
	rows := [][]string{head}
	all := []string{"(all)", p.plainScore(r.Score)}
	for _, d := range r.Dimensions {
		all = append(all, p.plainScore(d.Score))
	}
	rows = append(rows, all)
	for _, s := range r.PerSite {
		row := []string{s.Site, p.plainScore(s.Score)}
		for _, d := range s.Dimensions {
			row = append(row, p.plainScore(d.Score))
		}
		rows = append(rows, row)
	}
	p.table(bw, rows, map[int]bool{0: true}, true)
	bw.WriteString(dimensionLegend)

	if r.Raw.ResourcePeak > 0 {
		fmt.Fprintf(bw, "\nresource capacity %d (set); in the data, at most %d services open at one\nresource at once\n",
			r.Raw.Settings.ResourceCapacity, r.Raw.ResourcePeak)
		for _, c := range r.Raw.CapacityPeaks {
			what := "queue " + c.Queue
			if c.Resource != "" {
				what = "resource " + c.Resource
			}
			fmt.Fprintf(bw, "  %s: capacity %d (set); at most %d at once (in the data)\n", what, c.Capacity, c.Peak)
		}
	}

}

// textLittle writes the Little's law check of each site.
func (r *Report) textLittle(bw *bufio.Writer, p *painter) {
	var lrows [][]string
	for _, l := range r.Little {
		if l.Exits == 0 && l.Entries == 0 {
			continue
		}
		if l.Exits == 0 {
			// Nothing leaves, so the census only grows: no figure to show.
			lrows = append(lrows, []string{l.Site, "-", "-", "-", "not judged: no case leaves (no departure, abandon, final transfer or terminal type)"})
			continue
		}
		mark := "not judged"
		if l.Judged {
			mark = "ok"
			if l.Flagged {
				mark = "MISMATCH"
			}
		}
		lrows = append(lrows, []string{l.Site, fmt.Sprintf("%.2f", l.L), fmt.Sprintf("%.2f", l.LambdaW), fmt.Sprintf("%.3f", l.Ratio), mark})
	}
	if len(lrows) > 0 {
		bw.WriteString("\n")
		p.table(bw, append([][]string{{"little's law", "L", "λ·W", "ratio", ""}}, lrows...), map[int]bool{0: true, 4: true}, false)
	}

}

// textFindings writes the findings, under a heading per dimension (a
// dimension column would not fit 80 columns), and their first samples.
func (r *Report) textFindings(bw *bufio.Writer, p *painter) {
	frows := [][]string{{"finding", "count", "share", "of"}}
	var where []string
	group := ""
	heading := func(name string) {
		if name != group {
			frows = append(frows, []string{name})
			group = name
		}
	}
	for d, f := range r.Findings() {
		code := f.Code
		if f.Field != "" {
			code += " " + string(f.Field)
		}
		if f.Grid != "" {
			code += " " + f.Grid
		}
		if f.Informational {
			code += " (info)"
		}
		heading(d.Name)
		frows = append(frows, []string{"  " + code, strconv.FormatInt(f.Count, 10), percent(f.Share), f.Of})
		if sl := sampleLines(f.Samples); sl != "" {
			where = append(where, f.Code+": "+sl)
		}
	}
	for i := range r.Internal {
		f := &r.Internal[i]
		heading("internal")
		frows = append(frows, []string{"  " + f.Code, strconv.FormatInt(f.Count, 10), percent(f.Share), f.Of})
		if sl := sampleLines(f.Samples); sl != "" {
			where = append(where, f.Code+": "+sl)
		}
	}
	if len(frows) > 1 {
		bw.WriteString("\n")
		p.table(bw, frows, map[int]bool{0: true, 3: true}, false)
	}
	if len(where) > 0 {
		bw.WriteString("\n" + p.bold("where to look (first samples)") + "\n")
		for _, s := range where {
			bw.WriteString("  " + WrapText(s, TextWidth-2, "    ") + "\n")
		}
	}

}

// textMeanings writes what each finding found means, once per code.
func (r *Report) textMeanings(bw *bufio.Writer, p *painter) {
	said := map[string]bool{}
	var sentences []string
	for _, f := range r.Findings() {
		if f.Count == 0 || said[f.Code] {
			continue
		}
		said[f.Code] = true
		if w := whyOf(f.Code); w != "" {
			sentences = append(sentences, f.Code+": "+w)
		}
	}
	if len(sentences) > 0 {
		bw.WriteString("\n" + p.bold("what the findings mean") + "\n")
		for _, s := range sentences {
			bw.WriteString("  " + WrapText(s, TextWidth-2, "    ") + "\n")
		}
	}
}

// TextRejections writes the report's first rejected rows, where to look,
// as Text does after the rest: nothing when no row was rejected.
func (r *Report) TextRejections(w io.Writer, color bool) error {
	bw := bufio.NewWriter(w)
	r.textRejections(bw, &painter{color: color})
	return bw.Flush()
}

// textRejections writes the first rejected rows, where to look.
func (r *Report) textRejections(bw *bufio.Writer, p *painter) {
	var rej []string
	for _, rc := range r.Rejections {
		for _, s := range rc.Samples {
			where := "line " + strconv.FormatInt(s.Line, 10)
			if s.File != "" {
				where = s.File + " " + where
			}
			if s.Column != "" {
				where += ", column " + s.Column
			}
			if s.Field != "" {
				where += " (" + string(s.Field) + ")"
			}
			if s.Message != "" {
				where += ": " + s.Message
			}
			// The offending text, quoted (control characters escaped),
			// unless the message quotes it already.
			if q := strconv.Quote(s.Text); s.Text != "" && !strings.Contains(s.Message, q) {
				where += " (read " + q + ")"
			}
			rej = append(rej, string(rc.Reason)+"\t"+where)
		}
	}
	if len(rej) > 0 {
		bw.WriteString("\n" + p.bold("first rejected rows") + "\n")
		for _, s := range rej {
			bw.WriteString("  " + WrapText(strings.Replace(s, "\t", ": ", 1), TextWidth-2, "    ") + "\n")
		}
	}
}

// TextWidth is the width, in columns, the text forms fit: an ordinary
// terminal's 80.
const TextWidth = 80

// abbrev names a dimension in table heads: its adjective, which is
// shorter and still a word (the legend below the table names the
// dimension).
func abbrev(name string) string {
	if a, ok := dimensionHeads[name]; ok {
		return a
	}
	return name
}

var dimensionHeads = map[string]string{
	DimCompleteness: "complete", DimAccuracy: "accurate", DimConsistency: "consistent",
	DimCurrentness: "current", DimUniqueness: "unique",
}

// dimensionLegend follows every table of sub-scores.
const dimensionLegend = "sub-scores 0-100 of the dimensions completeness, accuracy, consistency,\n" +
	"currentness and uniqueness; - where there is nothing to measure\n"

// WrapText breaks s at spaces into lines of at most width runes, each
// after the first starting with indent; a longer word keeps its own line.
func WrapText(s string, width int, indent string) string {
	var b strings.Builder
	col := 0
	for i, w := range strings.Fields(s) {
		n := len([]rune(w))
		switch {
		case i == 0:
		case col+1+n > width:
			b.WriteString("\n" + indent)
			col = len([]rune(indent))
		default:
			b.WriteByte(' ')
			col++
		}
		b.WriteString(w)
		col += n
	}
	return b.String()
}

// table writes rows as aligned columns; left marks left-aligned columns.
// With scores, cells after the first are coloured as scores.
func (p *painter) table(w *bufio.Writer, rows [][]string, left map[int]bool, scores bool) {
	width := map[int]int{}
	for _, r := range rows {
		for i, c := range r {
			width[i] = max(width[i], len([]rune(c)))
		}
	}
	for ri, r := range rows {
		var b strings.Builder
		for i, c := range r {
			if i > 0 {
				b.WriteString("  ")
			}
			pad := strings.Repeat(" ", width[i]-len([]rune(c)))
			cell := c
			if ri > 0 && scores && i > 0 {
				cell = p.colour(c)
			}
			if left[i] {
				if i == len(r)-1 {
					pad = ""
				}
				b.WriteString(cell + pad)
			} else {
				b.WriteString(pad + cell)
			}
		}
		line := strings.TrimRight(b.String(), " ")
		if ri == 0 {
			line = p.bold(line)
		}
		w.WriteString(line + "\n")
	}
}

type painter struct{ color bool }

func (p *painter) bold(s string) string {
	if !p.color {
		return s
	}
	return ansiBold + s + ansiReset
}

func (p *painter) plainScore(s *float64) string {
	if s == nil {
		return "-"
	}
	return strconv.FormatFloat(*s, 'f', 1, 64)
}

// colour colours a formatted score.
func (p *painter) colour(t string) string {
	v, err := strconv.ParseFloat(t, 64)
	if !p.color || err != nil {
		return t
	}
	c := ansiRed
	switch {
	case v >= 90:
		c = ansiGreen
	case v >= 70:
		c = ansiYellow
	}
	return c + t + ansiReset
}

// score formats a score right-aligned to width, "-" when absent.
func (p *painter) score(s *float64, width int) string {
	t := p.plainScore(s)
	return strings.Repeat(" ", max(0, width-len(t))) + p.colour(t)
}

func percent(x float64) string {
	return strconv.FormatFloat(100*x, 'f', 1, 64) + "%"
}

// sampleLines lists where the samples are: lines, or sites and times.
func sampleLines(s []Sample) string {
	var parts, cases []string
	for _, x := range s {
		switch {
		case x.Line > 0:
			l := strconv.FormatInt(x.Line, 10)
			if x.File != "" {
				l = x.File + ":" + l
			}
			parts = append(parts, l)
		case x.At != nil:
			parts = append(parts, x.Site+"@"+x.At.Format("2006-01-02T15"))
		case x.CaseID != "":
			// A case-level finding: the cases' pseudonyms, which the
			// snapshot and the case table hold, locate it.
			cases = append(cases, x.CaseID)
		default:
			parts = append(parts, x.Site)
		}
	}
	if len(cases) > 0 {
		parts = append(parts, "cases "+strings.Join(cases, " "))
	}
	return strings.Join(parts, " ")
}
