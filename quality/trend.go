package quality

import (
	"bufio"
	"cmp"
	"fmt"
	"io"
	"math"
	"slices"
	"strings"
	"time"

	"github.com/flowcat-catalog/flowcat/schema"
)

// AllSites is the site name of the trend point over all sites.
const AllSites = "*"

// TrendPoint is one upload's quality at one site (or [AllSites]), the
// unit of trends and drift alerts.
type TrendPoint struct {
	Upload       string                   `json:"upload"`
	Seq          int                      `json:"seq"`
	ReceivedAt   time.Time                `json:"received_at"`
	Site         string                   `json:"site"`
	Events       int64                    `json:"events"`
	Score        *float64                 `json:"score"`
	Dimensions   map[string]*float64      `json:"dimensions"`
	Completeness map[schema.Field]float64 `json:"completeness"`
}

// TrendPoints returns the points of one upload's report: one per site,
// in site order, then one for all sites.
func TrendPoints(upload string, seq int, received time.Time, r *Report) []TrendPoint {
	var out []TrendPoint
	for _, s := range r.PerSite {
		p := TrendPoint{Upload: upload, Seq: seq, ReceivedAt: received.UTC(), Site: s.Site, Events: s.Events,
			Score: s.Score, Dimensions: map[string]*float64{}, Completeness: map[schema.Field]float64{}}
		for _, d := range s.Dimensions {
			p.Dimensions[d.Name] = d.Score
		}
		for _, f := range s.Completeness {
			p.Completeness[f.Field] = f.Share
		}
		out = append(out, p)
	}
	p := TrendPoint{Upload: upload, Seq: seq, ReceivedAt: received.UTC(), Site: AllSites, Events: r.Rows.Accepted,
		Score: r.Score, Dimensions: map[string]*float64{}, Completeness: map[schema.Field]float64{}}
	for _, d := range r.Dimensions {
		p.Dimensions[d.Name] = d.Score
	}
	for _, f := range r.Completeness {
		p.Completeness[f.Field] = f.Share
	}
	return append(out, p)
}

// DriftOptions tune [Drift]; zero fields take the defaults.
type DriftOptions struct {
	Window     int     // points of history used, default 14
	MinHistory int     // fewer points: no alert, default 5
	K          float64 // band half-width in scaled MADs, default 3
	// MinSpread floors the scaled MAD, in score points, so a stable
	// history does not alert on tiny wiggles; default 1.
	MinSpread float64
	// FieldWas and FieldNow: a field whose median completeness was at
	// least FieldWas and is now below FieldNow has dropped; defaults 0.9
	// and 0.5.
	FieldWas, FieldNow float64
}

func (o *DriftOptions) defaults() {
	if o.Window <= 0 {
		o.Window = 14
	}
	if o.MinHistory <= 0 {
		o.MinHistory = 5
	}
	if o.K <= 0 {
		o.K = 3
	}
	if o.MinSpread <= 0 {
		o.MinSpread = 1
	}
	if o.FieldWas <= 0 {
		o.FieldWas = 0.9
	}
	if o.FieldNow <= 0 {
		o.FieldNow = 0.5
	}
}

// MADScale makes the median absolute deviation a consistent estimate of
// the standard deviation under a normal distribution (1/Φ⁻¹(3/4)).
const MADScale = 1.4826

// Alert codes.
const (
	AlertScoreDrop = "score_drop"    // the score or a sub-score fell below its band
	AlertFieldDrop = "field_dropped" // a field's completeness fell sharply
)

// Alert is one drift alert: metric fell below Low, the bottom of the
// band [Low, High] = median ∓ K·max(MADScale·MAD, MinSpread) of the
// site's last Window points (for field_dropped: below FieldNow after a
// median of Median).
type Alert struct {
	Code     string  `json:"code"`
	Site     string  `json:"site"`
	Metric   string  `json:"metric"` // "score", a dimension, or "completeness:<field>"
	Value    float64 `json:"value"`
	Median   float64 `json:"median"`
	Low      float64 `json:"low"`
	High     float64 `json:"high"`
	Sentence string  `json:"sentence"`
}

// Drift compares cur with the history of its site (points of other sites
// are ignored; the latest Window by Seq are used) and returns the alerts,
// score first, then the dimensions in report order, then fields in
// schema order.
func Drift(history []TrendPoint, cur TrendPoint, opt DriftOptions) []Alert {
	opt.defaults()
	var h []TrendPoint
	for _, p := range history {
		if p.Site == cur.Site && p.Seq < cur.Seq {
			h = append(h, p)
		}
	}
	slices.SortFunc(h, func(a, b TrendPoint) int { return cmp.Compare(a.Seq, b.Seq) })
	if len(h) > opt.Window {
		h = h[len(h)-opt.Window:]
	}
	if len(h) < opt.MinHistory {
		return nil
	}
	var out []Alert
	check := func(metric string, value *float64, past func(TrendPoint) *float64) {
		if value == nil {
			return
		}
		var xs []float64
		for _, p := range h {
			if v := past(p); v != nil {
				xs = append(xs, *v)
			}
		}
		if len(xs) < opt.MinHistory {
			return
		}
		med := median(xs)
		spread := max(MADScale*mad(xs, med), opt.MinSpread)
		// Scores run 0 to 100: a band past either end is shown at it.
		low, high := med-opt.K*spread, min(med+opt.K*spread, 100)
		if *value < low {
			out = append(out, Alert{Code: AlertScoreDrop, Site: cur.Site, Metric: metric, Value: *value, Median: med, Low: low, High: high,
				Sentence: fmt.Sprintf("The %s at %s fell to %.1f, below its usual range of %.1f to %.1f (median %.1f of the last %d uploads).",
					metricName(metric), siteName(cur.Site), *value, low, high, med, len(xs))})
		}
	}
	check("score", cur.Score, func(p TrendPoint) *float64 { return p.Score })
	for _, dw := range dimensionWeights {
		check(dw.name, cur.Dimensions[dw.name], func(p TrendPoint) *float64 { return p.Dimensions[dw.name] })
	}
	for _, f := range schema.Fields {
		now, ok := cur.Completeness[f]
		if !ok {
			continue
		}
		var xs []float64
		for _, p := range h {
			if v, ok := p.Completeness[f]; ok {
				xs = append(xs, v)
			}
		}
		if len(xs) < opt.MinHistory {
			continue
		}
		med := median(xs)
		if med >= opt.FieldWas && now < opt.FieldNow {
			out = append(out, Alert{Code: AlertFieldDrop, Site: cur.Site, Metric: "completeness:" + string(f), Value: now, Median: med,
				Low: opt.FieldNow, High: 1,
				Sentence: fmt.Sprintf("Field %s at %s is filled in %.0f%% of events, down from a median of %.0f%%: the export may have lost the column.",
					f, siteName(cur.Site), 100*now, 100*med)})
		}
	}
	return out
}

func metricName(m string) string {
	if m == "score" {
		return "overall score"
	}
	return m + " score"
}

func siteName(s string) string {
	if s == AllSites {
		return "all sites"
	}
	return "site " + s
}

// median of xs (not modified); the mean of the two middle values for an
// even count.
func median(xs []float64) float64 {
	s := slices.Clone(xs)
	slices.Sort(s)
	n := len(s)
	if n == 0 {
		return math.NaN()
	}
	if n%2 == 1 {
		return s[n/2]
	}
	return (s[n/2-1] + s[n/2]) / 2
}

// mad is the median absolute deviation of xs about med.
func mad(xs []float64, med float64) float64 {
	d := make([]float64, len(xs))
	for i, x := range xs {
		d[i] = math.Abs(x - med)
	}
	return median(d)
}

// WriteTrend writes, per site, a table of score and sub-scores per
// upload with a sparkline of the score, then the alerts. Colour only
// when color is true.
func WriteTrend(w io.Writer, points []TrendPoint, alerts []Alert, color bool) error {
	bw := bufio.NewWriter(w)
	p := &painter{color: color}
	bySite := map[string][]TrendPoint{}
	for _, pt := range points {
		bySite[pt.Site] = append(bySite[pt.Site], pt)
	}
	for _, site := range sortedKeys(bySite) {
		pts := bySite[site]
		slices.SortFunc(pts, func(a, b TrendPoint) int { return cmp.Compare(a.Seq, b.Seq) })
		var scores []*float64
		for _, pt := range pts {
			scores = append(scores, pt.Score)
		}
		fmt.Fprintf(bw, "%s  %s\n", p.bold(siteName(site)), sparkline(scores))
		head := []string{"id", "received", "events", "score"} // "id": the upload's; "upload" would push the table past 80 columns
		for _, dw := range dimensionWeights {
			head = append(head, abbrev(dw.name))
		}
		rows := [][]string{head}
		for _, pt := range pts {
			row := []string{pt.Upload, pt.ReceivedAt.Format("2006-01-02"), fmt.Sprint(pt.Events), p.plainScore(pt.Score)}
			for _, dw := range dimensionWeights {
				row = append(row, p.plainScore(pt.Dimensions[dw.name]))
			}
			rows = append(rows, row)
		}
		p.scoreTable(bw, rows)
		bw.WriteString("\n")
	}
	if len(points) > 0 {
		bw.WriteString(dimensionLegend + "\n")
	}
	if len(alerts) > 0 {
		bw.WriteString(p.bold("alerts") + "\n")
		for _, a := range alerts {
			code := a.Code
			if color {
				code = ansiRed + code + ansiReset
			}
			fmt.Fprintf(bw, "%s %s %s:\n  %s\n", code, a.Site, a.Metric, WrapText(a.Sentence, TextWidth-2, "  "))
		}
	}
	return bw.Flush()
}

// scoreTable is table with the first three columns left plain.
func (p *painter) scoreTable(w *bufio.Writer, rows [][]string) {
	colour := p.color
	out := make([][]string, len(rows))
	for i, r := range rows {
		out[i] = slices.Clone(r)
	}
	p.color = false
	width := map[int]int{}
	for _, r := range out {
		for i, c := range r {
			width[i] = max(width[i], len(c))
		}
	}
	p.color = colour
	for ri, r := range out {
		var b strings.Builder
		for i, c := range r {
			if i > 0 {
				b.WriteString("  ")
			}
			pad := strings.Repeat(" ", width[i]-len(c))
			switch {
			case i < 2:
				if i == len(r)-1 {
					pad = ""
				}
				b.WriteString(c + pad)
			case ri > 0 && i >= 3:
				b.WriteString(pad + p.colour(c))
			default:
				b.WriteString(pad + c)
			}
		}
		line := b.String()
		if ri == 0 {
			line = p.bold(line)
		}
		w.WriteString(line + "\n")
	}
}

var sparks = []rune("▁▂▃▄▅▆▇█")

// sparkline draws scores 0..100 as block characters; a missing score is
// a space.
func sparkline(xs []*float64) string {
	var b strings.Builder
	for _, x := range xs {
		if x == nil {
			b.WriteRune(' ')
			continue
		}
		i := int(*x / 100 * float64(len(sparks)-1))
		b.WriteRune(sparks[min(max(i, 0), len(sparks)-1)])
	}
	return b.String()
}
