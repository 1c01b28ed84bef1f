package web

import (
	"fmt"
	"html"
	"html/template"
	"math"
	"slices"
	"strconv"
	"strings"
)

// Plot is one chart drawn as SVG on the server: a plot area with a linear
// or logarithmic x axis and a linear y axis, and layers of bars, bands,
// lines, markers and reference lines. Every chart carries its title and
// a description for screen readers (SVG 2 section 5.6: <title> and <desc>
// as the accessible name and description, linked by aria-labelledby and
// aria-describedby) and a data table below it, so that nothing is told by
// colour or shape alone. Numbers ride on data-* attributes, so that a
// test in a browser can read back what each element stands for.
type Plot struct {
	ID, Title, Desc string
	X, Y            Axis
	Bars            []Bar
	Bands           []Band
	Lines           []Line
	Marks           []Mark
	Refs            []Ref
	Table           Table
	// Height of the plot in viewBox units (default 220); the width is
	// plotWidth and the SVG scales to its container.
	Height int
}

// Axis is one axis: its range, whether it is logarithmic (x only), its
// label and ticks.
type Axis struct {
	Min, Max float64
	Log      bool
	Label    string
	Ticks    []Tick
}

// Tick is a labelled position on an axis.
type Tick struct {
	At    float64
	Label string
}

// Bar is a bar from Y0 to Y over [X0, X1], with an optional interval
// whisker [Lo, Hi].
type Bar struct {
	X0, X1, Y0, Y float64
	Lo, Hi        *float64
	Label         string // its tooltip and accessible text
	Class         string
	Data          map[string]string // data-* attributes
}

// Band is a filled area between Lo and Hi over x (a confidence band).
type Band struct {
	Pts   []BandPt
	Step  bool
	Class string
	Label string
}

// BandPt is one x of a band.
type BandPt struct{ X, Lo, Hi float64 }

// Line is a polyline (or a step function) through points.
type Line struct {
	Name  string
	Pts   [][2]float64
	Step  bool
	Class string
	Data  map[string]string
}

// Mark is a marker at one point; Shape "triangle" draws an alert marker.
type Mark struct {
	X, Y  float64
	Label string
	Shape string
	Class string
	Data  map[string]string
}

// Ref is a reference line across the plot: horizontal at Y, or vertical
// at X when Vertical.
type Ref struct {
	At       float64
	Vertical bool
	Label    string
	Class    string
	Data     map[string]string
}

// Table is a chart's data as a table.
type Table struct {
	Caption string
	Head    []string
	Rows    [][]string
	// More, when set, says what rows were left out.
	More string
}

const (
	plotWidth  = 640
	marginL    = 56
	marginR    = 12
	marginT    = 12
	marginB    = 40
	defaultPlH = 220
)

func (p *Plot) height() int {
	if p.Height > 0 {
		return p.Height
	}
	return defaultPlH
}

func (p *Plot) sx(x float64) float64 {
	w := float64(plotWidth - marginL - marginR)
	lo, hi := p.X.Min, p.X.Max
	if p.X.Log {
		x, lo, hi = math.Log10(math.Max(x, lo)), math.Log10(lo), math.Log10(hi)
	}
	if hi <= lo {
		return marginL
	}
	return marginL + w*(x-lo)/(hi-lo)
}

func (p *Plot) sy(y float64) float64 {
	h := float64(p.height() - marginT - marginB)
	lo, hi := p.Y.Min, p.Y.Max
	if hi <= lo {
		return float64(p.height() - marginB)
	}
	y = math.Max(lo, math.Min(hi, y))
	return marginT + h*(1-(y-lo)/(hi-lo))
}

// num formats a coordinate.
func num(f float64) string { return strconv.FormatFloat(f, 'f', 1, 64) }

// Value formats a data value for a data-* attribute: the shortest
// representation that reads back as the same float64.
func Value(f float64) string { return strconv.FormatFloat(f, 'g', -1, 64) }

func attrs(b *strings.Builder, data map[string]string) {
	keys := make([]string, 0, len(data))
	for k := range data {
		keys = append(keys, k)
	}
	slices.Sort(keys)
	for _, k := range keys {
		fmt.Fprintf(b, ` data-%s="%s"`, html.EscapeString(k), html.EscapeString(data[k]))
	}
}

func class(base, extra string) string {
	if extra == "" {
		return base
	}
	return base + " " + extra
}

// SVG renders the plot as a figure: the SVG, then its data table in a
// disclosure element.
func (p *Plot) SVG() template.HTML {
	var b strings.Builder
	esc := html.EscapeString
	h := p.height()
	fmt.Fprintf(&b, `<figure class="chart" id="fig-%s">`, esc(p.ID))
	fmt.Fprintf(&b, `<svg id="%s" viewBox="0 0 %d %d" role="img" aria-labelledby="%[1]s-t" aria-describedby="%[1]s-d" preserveAspectRatio="xMidYMid meet">`, esc(p.ID), plotWidth, h)
	fmt.Fprintf(&b, `<title id="%[1]s-t">%[2]s</title><desc id="%[1]s-d">%[3]s</desc>`, esc(p.ID), esc(p.Title), esc(p.Desc))
	x0, x1 := float64(marginL), float64(plotWidth-marginR)
	y0, y1 := float64(marginT), float64(h-marginB)
	// Axes and ticks.
	fmt.Fprintf(&b, `<g class="axis" aria-hidden="true"><line x1="%s" y1="%s" x2="%s" y2="%s"/><line x1="%s" y1="%s" x2="%s" y2="%s"/>`,
		num(x0), num(y1), num(x1), num(y1), num(x0), num(y0), num(x0), num(y1))
	for _, t := range p.Y.Ticks {
		y := p.sy(t.At)
		fmt.Fprintf(&b, `<line class="grid" x1="%s" y1="%s" x2="%s" y2="%s"/><text x="%s" y="%s" text-anchor="end">%s</text>`,
			num(x0), num(y), num(x1), num(y), num(x0-4), num(y+3.5), esc(t.Label))
	}
	for _, t := range p.X.Ticks {
		x := p.sx(t.At)
		fmt.Fprintf(&b, `<line x1="%s" y1="%s" x2="%s" y2="%s"/><text x="%s" y="%s" text-anchor="middle">%s</text>`,
			num(x), num(y1), num(x), num(y1+4), num(x), num(y1+15), esc(t.Label))
	}
	if p.X.Label != "" {
		fmt.Fprintf(&b, `<text class="label" x="%s" y="%d" text-anchor="middle">%s</text>`, num((x0+x1)/2), h-6, esc(p.X.Label))
	}
	if p.Y.Label != "" {
		fmt.Fprintf(&b, `<text class="label" x="12" y="%s" text-anchor="middle" transform="rotate(-90 12 %[1]s)">%s</text>`, num((y0+y1)/2), esc(p.Y.Label))
	}
	b.WriteString(`</g>`)
	for _, bd := range p.Bands {
		if len(bd.Pts) == 0 {
			continue
		}
		var up, down []string
		for i, pt := range bd.Pts {
			if bd.Step && i > 0 {
				prev := bd.Pts[i-1]
				up = append(up, num(p.sx(pt.X))+","+num(p.sy(prev.Hi)))
				down = append(down, num(p.sx(pt.X))+","+num(p.sy(prev.Lo)))
			}
			up = append(up, num(p.sx(pt.X))+","+num(p.sy(pt.Hi)))
			down = append(down, num(p.sx(pt.X))+","+num(p.sy(pt.Lo)))
		}
		for i, j := 0, len(down)-1; i < j; i, j = i+1, j-1 {
			down[i], down[j] = down[j], down[i]
		}
		fmt.Fprintf(&b, `<polygon class="%s" points="%s"><title>%s</title></polygon>`, class("band", bd.Class), strings.Join(append(up, down...), " "), esc(bd.Label))
	}
	for _, br := range p.Bars {
		bx0, bx1 := p.sx(br.X0), p.sx(br.X1)
		top, bot := p.sy(math.Max(br.Y, br.Y0)), p.sy(math.Min(br.Y, br.Y0))
		w := math.Max(bx1-bx0-1, 0.6)
		fmt.Fprintf(&b, `<rect class="%s" x="%s" y="%s" width="%s" height="%s"`, class("bar", br.Class), num(bx0+0.5), num(top), num(w), num(bot-top))
		attrs(&b, br.Data)
		fmt.Fprintf(&b, `><title>%s</title></rect>`, esc(br.Label))
		if br.Lo != nil && br.Hi != nil {
			cx := (bx0 + bx1) / 2
			fmt.Fprintf(&b, `<line class="ci" x1="%s" y1="%s" x2="%s" y2="%s" data-lower="%s" data-upper="%s"/>`,
				num(cx), num(p.sy(*br.Lo)), num(cx), num(p.sy(*br.Hi)), Value(*br.Lo), Value(*br.Hi))
		}
	}
	for _, ln := range p.Lines {
		var pts []string
		for i, pt := range ln.Pts {
			if ln.Step && i > 0 {
				pts = append(pts, num(p.sx(pt[0]))+","+num(p.sy(ln.Pts[i-1][1])))
			}
			pts = append(pts, num(p.sx(pt[0]))+","+num(p.sy(pt[1])))
		}
		fmt.Fprintf(&b, `<polyline class="%s" points="%s"`, class("line", ln.Class), strings.Join(pts, " "))
		attrs(&b, ln.Data)
		fmt.Fprintf(&b, `><title>%s</title></polyline>`, esc(ln.Name))
	}
	for _, r := range p.Refs {
		if r.Vertical {
			x := p.sx(r.At)
			fmt.Fprintf(&b, `<line class="%s" x1="%s" y1="%s" x2="%s" y2="%s"`, class("ref", r.Class), num(x), num(y0), num(x), num(y1))
			attrs(&b, r.Data)
			fmt.Fprintf(&b, `><title>%s</title></line><text class="reflabel" x="%s" y="%s">%s</text>`, esc(r.Label), num(x+2), num(y0+9), esc(shortLabel(r.Label)))
			continue
		}
		y := p.sy(r.At)
		fmt.Fprintf(&b, `<line class="%s" x1="%s" y1="%s" x2="%s" y2="%s"`, class("ref", r.Class), num(x0), num(y), num(x1), num(y))
		attrs(&b, r.Data)
		fmt.Fprintf(&b, `><title>%s</title></line><text class="reflabel" x="%s" y="%s" text-anchor="end">%s</text>`, esc(r.Label), num(x1-2), num(y-3), esc(shortLabel(r.Label)))
	}
	for _, m := range p.Marks {
		x, y := p.sx(m.X), p.sy(m.Y)
		if m.Shape == "triangle" {
			fmt.Fprintf(&b, `<path class="%s" d="M%s,%s L%s,%s L%s,%s Z"`, class("mark", m.Class), num(x), num(y-6), num(x-5.5), num(y+4), num(x+5.5), num(y+4))
		} else {
			fmt.Fprintf(&b, `<circle class="%s" cx="%s" cy="%s" r="3"`, class("mark", m.Class), num(x), num(y))
		}
		attrs(&b, m.Data)
		fmt.Fprintf(&b, `><title>%s</title></%s>`, esc(m.Label), map[bool]string{true: "path", false: "circle"}[m.Shape == "triangle"])
	}
	b.WriteString(`</svg>`)
	if len(p.Table.Rows) > 0 {
		fmt.Fprintf(&b, `<details class="data"><summary>The numbers behind &ldquo;%s&rdquo;</summary><table><caption>%s</caption><thead><tr>`, esc(p.Title), esc(p.Table.Caption))
		for _, h := range p.Table.Head {
			fmt.Fprintf(&b, `<th scope="col">%s</th>`, esc(h))
		}
		b.WriteString(`</tr></thead><tbody>`)
		for _, r := range p.Table.Rows {
			b.WriteString(`<tr>`)
			for i, c := range r {
				if i == 0 {
					fmt.Fprintf(&b, `<th scope="row">%s</th>`, esc(c))
				} else {
					fmt.Fprintf(&b, `<td>%s</td>`, esc(c))
				}
			}
			b.WriteString(`</tr>`)
		}
		b.WriteString(`</tbody></table>`)
		if p.Table.More != "" {
			fmt.Fprintf(&b, `<p class="note">%s</p>`, esc(p.Table.More))
		}
		b.WriteString(`</details>`)
	}
	b.WriteString(`</figure>`)
	return template.HTML(b.String())
}

// shortLabel is the visible part of a reference line's label: up to the
// first colon.
func shortLabel(s string) string {
	if i := strings.IndexByte(s, ':'); i > 0 {
		return s[:i]
	}
	return s
}

// niceTicks returns about n ticks over [lo, hi] at 1-2-5 steps.
func niceTicks(lo, hi float64, n int, format func(float64) string) []Tick {
	if !(hi > lo) || n < 1 {
		return []Tick{{At: lo, Label: format(lo)}}
	}
	raw := (hi - lo) / float64(n)
	mag := math.Pow(10, math.Floor(math.Log10(raw)))
	step := mag
	for _, m := range []float64{1, 2, 5, 10} {
		if m*mag >= raw {
			step = m * mag
			break
		}
	}
	var out []Tick
	for v := math.Ceil(lo/step) * step; v <= hi+step*1e-9; v += step {
		out = append(out, Tick{At: v, Label: format(v)})
	}
	return out
}

// niceMax rounds x up to a 1-2-5 value, at least min.
func niceMax(x, min float64) float64 {
	if !(x > min) {
		return min
	}
	mag := math.Pow(10, math.Floor(math.Log10(x)))
	for _, m := range []float64{1, 2, 5, 10} {
		if m*mag >= x {
			return m * mag
		}
	}
	return x
}

// logTicks returns ticks at powers of ten over [lo, hi].
func logTicks(lo, hi float64, format func(float64) string) []Tick {
	var out []Tick
	for e := math.Floor(math.Log10(lo)); e <= math.Ceil(math.Log10(hi)); e++ {
		v := math.Pow(10, e)
		if v >= lo*0.999 && v <= hi*1.001 {
			out = append(out, Tick{At: v, Label: format(v)})
		}
	}
	return out
}
