package synth

import (
	"bufio"
	"encoding/csv"
	"encoding/json"
	"fmt"
	"io"
	"slices"
	"strings"
	"time"

	"github.com/flowcat-catalog/flowcat/schema"
)

// row is one event of a night's export before it is written in the site's
// format.
type row struct {
	at      time.Time // true instant; the export is sorted by it
	v       *visit
	seq     int // position within the visit
	dup     int // 1 for a planted duplicate, sorted right after its original
	typ     schema.EventType
	code    string
	caseRef string
	step    string
	queue   string
	staff   string
	prio    string
	outcome string
	note    string
	stampAt time.Time // instant written; differs from at under clock skew
	badTS   bool
}

// rows turns the simulated visits into export rows, skipping event types
// the site has no code for.
func (g *day) rows(vs []*visit) []row {
	out := make([]row, 0, len(vs)*8)
	for _, v := range vs {
		seq := 0
		prio := ""
		add := func(t schema.EventType, at time.Time, step, queue, staff, outcome string) {
			code, ok := g.site.Codes[t]
			if !ok {
				return
			}
			r := row{at: at, stampAt: at, v: v, seq: seq, typ: t, code: code, caseRef: v.caseRef,
				step: step, queue: queue, staff: staff, prio: prio, outcome: outcome}
			if len(g.site.Notes) > 0 && g.rng.Float64() < g.site.NoteShare {
				r.note = g.site.Notes[g.rng.IntN(len(g.site.Notes))]
			}
			seq++
			out = append(out, r)
		}
		add(schema.Arrival, v.arrive, "", "", "", "")
		for i, s := range v.steps {
			act := &g.site.Steps[i]
			q := act.Queue
			if v.line != "" {
				q = v.line
			}
			add(schema.Enqueue, s.enq, act.Name, q, "", "")
			if !s.ok {
				add(schema.Abandon, v.abandonAt, act.Name, q, "", "")
				continue
			}
			add(schema.Start, s.start, act.Name, q, s.staff, "")
			if i == 0 {
				prio = v.priority
			}
			outcome := ""
			if i == len(v.steps)-1 && i == len(g.site.Steps)-1 {
				outcome = v.outcome
			}
			add(schema.Complete, s.end, act.Name, "", s.staff, outcome)
		}
		if !v.depart.IsZero() {
			add(schema.Departure, v.depart, "", "", "", "")
		}
	}
	return out
}

// plant adds or alters rows to plant one or two defects of each kind, each
// on its own served case, and counts them into counts.
func (g *day) plant(vs []*visit, rows []row, counts map[string]int) []row {
	var victims []*visit
	for _, v := range vs {
		if len(v.steps) > 0 && v.steps[0].ok {
			victims = append(victims, v)
		}
	}
	g.rng.Shuffle(len(victims), func(i, j int) { victims[i], victims[j] = victims[j], victims[i] })
	first := make(map[int]int, len(vs))
	for i := len(rows) - 1; i >= 0; i-- {
		first[rows[i].v.n] = i
	}
	find := func(v *visit, t schema.EventType) int {
		for i := first[v.n]; i < len(rows) && rows[i].v == v; i++ {
			if rows[i].typ == t {
				return i
			}
		}
		return -1
	}
	next := 0
	for _, kind := range DefectKinds {
		want := 1 + g.rng.IntN(2)
		for c := 0; c < want && next < len(victims); c++ {
			v := victims[next]
			next++
			s0 := v.steps[0]
			switch kind {
			case DefectUnknownCode:
				r := rows[find(v, schema.Start)]
				r.typ, r.code, r.note = "", g.site.UnknownCode, ""
				r.at = s0.start.Add(s0.end.Sub(s0.start) / 2)
				r.stampAt = r.at
				rows = append(rows, r)
			case DefectClockSkew:
				i := find(v, schema.Start)
				rows[i].stampAt = v.arrive.Add(-g.uniform([2]float64{2, 20}))
			case DefectDuplicate:
				r := rows[find(v, schema.Complete)]
				r.dup = 1
				rows = append(rows, r)
			case DefectEmptyCaseID:
				rows[find(v, schema.Complete)].caseRef = ""
			case DefectBadTimestamp:
				rows[find(v, schema.Arrival)].badTS = true
			}
			counts[kind]++
		}
	}
	return rows
}

// sortRows orders rows by instant; ties keep visit and event order, and a
// planted duplicate follows its original.
func sortRows(rows []row) {
	slices.SortFunc(rows, func(a, b row) int {
		if c := a.at.Compare(b.at); c != 0 {
			return c
		}
		if a.v.n != b.v.n {
			return a.v.n - b.v.n
		}
		if a.seq != b.seq {
			return a.seq - b.seq
		}
		return a.dup - b.dup
	})
}

// strftimeToGo converts the strftime-style directives the profiles use into
// a Go reference layout.
func strftimeToGo(layout string) (string, error) {
	var b strings.Builder
	for i := 0; i < len(layout); i++ {
		c := layout[i]
		if c != '%' {
			b.WriteByte(c)
			continue
		}
		i++
		if i == len(layout) {
			return "", fmt.Errorf("layout %q: trailing %%: %w", layout, ErrFormat)
		}
		switch layout[i] {
		case 'Y':
			b.WriteString("2006")
		case 'y':
			b.WriteString("06")
		case 'm':
			b.WriteString("01")
		case 'd':
			b.WriteString("02")
		case 'H':
			b.WriteString("15")
		case 'M':
			b.WriteString("04")
		case 'S':
			b.WriteString("05")
		case '%':
			b.WriteByte('%')
		default:
			return "", fmt.Errorf("layout %q: directive %%%c: %w", layout, layout[i], ErrFormat)
		}
	}
	return b.String(), nil
}

// zeroStamp is how a broken device writes "no time": the layout with every
// digit zero, which no calendar accepts.
func zeroStamp(goLayout string) string {
	return strings.Map(func(r rune) rune {
		if r >= '0' && r <= '9' {
			return '0'
		}
		return r
	}, goLayout)
}

// callRecord is one line of the phone line's JSON Lines export.
type callRecord struct {
	Call        string `json:"call"`
	Caller      string `json:"caller"`
	Nurse       string `json:"nurse,omitempty"`
	What        string `json:"what"`
	TS          string `json:"ts"`
	Line        string `json:"line,omitempty"`
	Channel     string `json:"channel,omitempty"`
	Disposition string `json:"disposition,omitempty"`
}

// walkinHeader is the column set of a "csv" export.
var walkinHeader = []string{"VisitRef", "PatientRef", "Step", "StaffRef", "EvCode", "Stamp", "Area", "Triage", "Note"}

// write writes rows in the site's format: "csv" exports use the clinic's
// column set, "jsonl" exports the phone line's keys.
func (g *day) write(w io.Writer, rows []row) error {
	bw := bufio.NewWriterSize(w, 64<<10)
	layout := time.RFC3339
	bad := "0000-00-00T00:00:00Z"
	if g.site.Layout != "" {
		l, err := strftimeToGo(g.site.Layout)
		if err != nil {
			return err
		}
		layout, bad = l, zeroStamp(l)
	}
	stamp := func(r *row) string {
		if r.badTS {
			return bad
		}
		return r.stampAt.In(g.loc).Format(layout)
	}
	switch g.site.Format {
	case "csv":
		cw := csv.NewWriter(bw)
		if g.site.Delimiter != 0 {
			cw.Comma = g.site.Delimiter
		}
		if err := cw.Write(walkinHeader); err != nil {
			return err
		}
		for i := range rows {
			r := &rows[i]
			rec := []string{r.caseRef, r.v.subject, r.step, r.staff, r.code, stamp(r), r.queue, r.prio, r.note}
			if err := cw.Write(rec); err != nil {
				return err
			}
		}
		cw.Flush()
		if err := cw.Error(); err != nil {
			return err
		}
	case "jsonl":
		enc := json.NewEncoder(bw)
		enc.SetEscapeHTML(false)
		for i := range rows {
			r := &rows[i]
			rec := callRecord{Call: r.caseRef, Caller: r.v.subject, Nurse: r.staff, What: r.code,
				TS: stamp(r), Line: r.v.line, Channel: r.v.channel, Disposition: r.outcome}
			if err := enc.Encode(&rec); err != nil {
				return err
			}
		}
	default:
		return fmt.Errorf("site format %q: %w", g.site.Format, ErrFormat)
	}
	return bw.Flush()
}
