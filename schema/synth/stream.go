package synth

import (
	"io"
	"math"
	"math/rand/v2"
	"strconv"
	"time"

	"github.com/flowcat-catalog/flowcat/schema"
)

// StreamFields are the columns of a NewStream CSV: the schema's fields in
// schema order but instance_id (the stream's services pair by activity).
var StreamFields = func() []schema.Field {
	var fs []schema.Field
	for _, f := range schema.Fields {
		if f != schema.FieldInstanceID {
			fs = append(fs, f)
		}
	}
	return fs
}()

// StreamHeader is the header row of a NewStream CSV: StreamFields.
var StreamHeader = func() string {
	s := ""
	for i, f := range StreamFields {
		if i > 0 {
			s += ","
		}
		s += string(f)
	}
	return s
}()

// streamEpoch is the instant the benchmark stream starts: 2026-01-05T00:00:00Z.
const streamEpoch = 1767571200

// Stream tuning. Cases arrive at a constant average rate, so by Little's law
// the number of cases open at once is about arrival rate x mean case length
// (12 s between cases, under an hour per case: a few hundred), whatever n is.
const (
	streamGapMs     = 12_000  // mean time between case arrivals
	streamLateShare = 0.1     // share of rows written late: small local disorder
	streamJitterMs  = 60_000  // a late row is written up to this much after its time
	streamWaitMs    = 720_000 // mean wait in the first queue (12 min)
	streamWait2Ms   = 480_000 // mean wait in the second queue (8 min)
	streamChunk     = 60 << 10
)

type streamSite struct {
	code     string
	queue    string
	acts     [2]uint8
	res0, nr int
	channels []string
}

var (
	streamSites = [3]streamSite{
		{code: "qb-walkin", queue: "walkin", acts: [2]uint8{0, 1}, res0: 0, nr: 16, channels: []string{"walk-in"}},
		{code: "qb-nurseline", queue: "phone", acts: [2]uint8{2, 0}, res0: 16, nr: 14, channels: []string{"phone", "phone", "phone", "callback"}},
		{code: "qb-imaging", queue: "diagnostics", acts: [2]uint8{3, 4}, res0: 30, nr: 10, channels: []string{"referral"}},
	}
	streamActs     = [5]string{"triage", "consult", "advice", "imaging", "reporting"}
	streamPrio     = [8]string{"1", "2", "3", "3", "4", "4", "4", "5"}
	streamOutcomes = [4]string{"home", "home", "referred", "admitted"}
	streamTypes    = [7]string{string(schema.Arrival), string(schema.Enqueue), string(schema.Start),
		string(schema.Complete), string(schema.Abandon), string(schema.Transfer), string(schema.Departure)}
	streamResources = func() (a [40]string) {
		for i := range a {
			a[i] = "S-" + pad(1000+i*37, 4)
		}
		return a
	}()
)

const (
	tArrival = iota
	tEnqueue
	tStart
	tComplete
	tAbandon
	tTransfer
	tDeparture
)

const none = 0xff

// pend is one generated event waiting in the emission heap.
type pend struct {
	key    int64 // emission order (ms): true time plus jitter
	at     int64 // occurred_at, ms since streamEpoch
	caseNo int64
	subj   int64
	seq    uint8
	typ    uint8
	site   uint8
	act    uint8 // none: no activity
	res    uint8 // none: no resource
	prio   uint8
	chn    uint8
	out    uint8 // none: no outcome
	queue  bool
}

// stream generates the benchmark CSV on the fly.
type stream struct {
	rng      *rand.Rand
	n, done  int64
	header   bool
	buf      []byte
	off      int
	heap     []pend
	clock    int64 // ms of the next case arrival
	nextCase int64
	nextSubj int64
	day      int64 // day number of dayStr
	dayStr   []byte
	gapMs    float64 // mean time between case arrivals
}

// NewStream returns a reader of n events as CSV in the schema's own field
// names (header StreamHeader), RFC 3339 UTC timestamps, rows in time order
// up to a small local disorder (a tenth of the rows are written up to a
// minute late). Cases (about n/6) arrive at a
// constant average rate across three sites and last minutes to hours;
// about n/15 subjects, 40 resources, 5 activities and 3 queues. The reader
// holds a small buffer and the few hundred cases open at once, whatever n
// is, and its bytes are a pure function of seed and n. The last cases may
// be cut short: the stream ends after exactly n rows.
func NewStream(seed uint64, n int64) io.Reader { return NewStreamRate(seed, n, 0) }

// NewStreamRate is NewStream with cases arriving at perHour cases an hour
// on average (0 means the default, 300 an hour); the cases open at once
// grow with the rate, by Little's law.
func NewStreamRate(seed uint64, n int64, perHour float64) io.Reader {
	gap := float64(streamGapMs)
	if perHour > 0 {
		gap = 3_600_000 / perHour
	}
	return &stream{
		rng:   rand.New(rand.NewPCG(seed, 0x5eed_57e3)),
		n:     n,
		buf:   make([]byte, 0, streamChunk+1024),
		day:   -1,
		heap:  make([]pend, 0, 4096),
		gapMs: gap,
	}
}

// Read implements io.Reader.
func (s *stream) Read(p []byte) (int, error) {
	if s.off == len(s.buf) {
		if !s.fill() {
			return 0, io.EOF
		}
	}
	n := copy(p, s.buf[s.off:])
	s.off += n
	return n, nil
}

// WriteTo implements io.WriterTo, so io.Copy skips one copy of every byte.
func (s *stream) WriteTo(w io.Writer) (int64, error) {
	var total int64
	for {
		if s.off == len(s.buf) && !s.fill() {
			return total, nil
		}
		n, err := w.Write(s.buf[s.off:])
		total += int64(n)
		s.off += n
		if err != nil {
			return total, err
		}
	}
}

// fill refills the buffer with whole rows; false when the stream is done.
func (s *stream) fill() bool {
	s.buf, s.off = s.buf[:0], 0
	if !s.header {
		s.header = true
		s.buf = append(s.buf, StreamHeader...)
		s.buf = append(s.buf, '\n')
	}
	for len(s.buf) < streamChunk && s.done < s.n {
		if len(s.heap) > 0 && s.heap[0].key <= s.clock {
			e := s.pop()
			s.row(&e)
			s.done++
			continue
		}
		s.newCase()
	}
	return len(s.buf) > 0
}

func (s *stream) expMs(mean float64) int64 { return int64(s.rng.ExpFloat64() * mean) }

// serviceMs draws a lognormal service time: median 10 min, sdlog 0.5.
func (s *stream) serviceMs() int64 {
	return int64(math.Exp(math.Log(600_000) + 0.5*s.rng.NormFloat64()))
}

// newCase draws one case arriving at the clock, pushes all its events and
// advances the clock to the next arrival.
func (s *stream) newCase() {
	r := s.rng
	a := s.clock
	s.clock += s.expMs(s.gapMs) + 1

	c := s.nextCase
	s.nextCase++
	var subj int64
	if s.nextSubj == 0 || r.Float64() < 0.4 {
		subj = s.nextSubj
		s.nextSubj++
	} else {
		subj = r.Int64N(s.nextSubj)
	}
	site := uint8(0)
	if u := r.Float64(); u >= 0.8 {
		site = 2
	} else if u >= 0.4 {
		site = 1
	}
	ss := &streamSites[site]
	base := pend{caseNo: c, subj: subj, site: site, act: none, res: none, out: none,
		prio: uint8(r.IntN(len(streamPrio))), chn: uint8(r.IntN(len(ss.channels)))}
	seq := uint8(0)
	push := func(t uint8, at int64, act, res, out uint8, queue bool) {
		e := base
		e.typ, e.at, e.act, e.res, e.out, e.queue, e.seq = t, at, act, res, out, queue, seq
		e.key = at
		if r.Float64() < streamLateShare {
			e.key += r.Int64N(streamJitterMs)
		}
		seq++
		s.push(e)
	}
	resource := func() uint8 { return uint8(ss.res0 + r.IntN(ss.nr)) }

	push(tArrival, a, none, none, none, false)
	enq := a + r.Int64N(180_000)
	push(tEnqueue, enq, ss.acts[0], none, none, true)
	wait := s.expMs(streamWaitMs)
	path := r.Float64()
	if path < 0.10 {
		ab := enq + wait
		push(tAbandon, ab, ss.acts[0], none, none, true)
		push(tDeparture, ab+r.Int64N(60_000), none, none, 4, false)
		return
	}
	st := enq + wait
	res := resource()
	push(tStart, st, ss.acts[0], res, none, true)
	end := st + s.serviceMs()
	push(tComplete, end, ss.acts[0], res, none, false)
	if path >= 0.65 {
		enq2 := end + r.Int64N(120_000)
		push(tEnqueue, enq2, ss.acts[1], none, none, true)
		st2 := enq2 + s.expMs(streamWait2Ms)
		res2 := resource()
		push(tStart, st2, ss.acts[1], res2, none, true)
		end = st2 + s.serviceMs()
		push(tComplete, end, ss.acts[1], res2, none, false)
	}
	push(tDeparture, end+60_000+r.Int64N(540_000), none, none, uint8(r.IntN(len(streamOutcomes))), false)
}

// row appends one CSV row for e.
func (s *stream) row(e *pend) {
	b := s.buf
	ss := &streamSites[e.site]
	b = append(b, ss.code...)
	b = append(b, ",c"...)
	b = strconv.AppendInt(b, e.caseNo, 10)
	b = append(b, ",p"...)
	b = strconv.AppendInt(b, e.subj, 10)
	b = append(b, ',')
	if e.res != none {
		b = append(b, streamResources[e.res]...)
	}
	b = append(b, ',')
	b = append(b, streamTypes[e.typ]...)
	b = append(b, ',')
	if e.act != none {
		b = append(b, streamActs[e.act]...)
	}
	b = append(b, ',')
	if e.queue {
		b = append(b, ss.queue...)
	}
	b = append(b, ',')
	b = s.stamp(b, e.at)
	b = append(b, ',')
	b = append(b, streamPrio[e.prio]...)
	b = append(b, ',')
	b = append(b, ss.channels[e.chn]...)
	b = append(b, ',')
	switch {
	case e.out == 4:
		b = append(b, "left-unseen"...)
	case e.out != none:
		b = append(b, streamOutcomes[e.out]...)
	}
	b = append(b, ",e"...)
	b = strconv.AppendInt(b, e.caseNo, 10)
	b = append(b, '.')
	b = strconv.AppendInt(b, int64(e.seq), 10)
	b = append(b, '\n')
	s.buf = b
}

// stamp appends the RFC 3339 UTC form of ms since the epoch, caching the
// date part.
func (s *stream) stamp(b []byte, ms int64) []byte {
	sec := streamEpoch + ms/1000
	d := sec / 86400
	if d != s.day {
		s.day = d
		s.dayStr = time.Unix(d*86400, 0).UTC().AppendFormat(s.dayStr[:0], "2006-01-02T")
	}
	b = append(b, s.dayStr...)
	r := sec % 86400
	b = two(b, r/3600)
	b = append(b, ':')
	b = two(b, r/60%60)
	b = append(b, ':')
	b = two(b, r%60)
	return append(b, 'Z')
}

func two(b []byte, v int64) []byte { return append(b, byte('0'+v/10), byte('0'+v%10)) }

func before(a, b *pend) bool {
	if a.key != b.key {
		return a.key < b.key
	}
	if a.caseNo != b.caseNo {
		return a.caseNo < b.caseNo
	}
	return a.seq < b.seq
}

// push and pop keep s.heap a binary min-heap by emission order, moving a
// hole instead of swapping.
func (s *stream) push(e pend) {
	s.heap = append(s.heap, e)
	h := s.heap
	i := len(h) - 1
	for i > 0 {
		p := (i - 1) / 2
		if !before(&e, &h[p]) {
			break
		}
		h[i] = h[p]
		i = p
	}
	h[i] = e
}

func (s *stream) pop() pend {
	h := s.heap
	top := h[0]
	last := len(h) - 1
	e := h[last]
	h = h[:last]
	s.heap = h
	if last == 0 {
		return top
	}
	i := 0
	for {
		m := 2*i + 1
		if m >= len(h) {
			break
		}
		if r := m + 1; r < len(h) && before(&h[r], &h[m]) {
			m = r
		}
		if !before(&h[m], &e) {
			break
		}
		h[i] = h[m]
		i = m
	}
	h[i] = e
	return top
}
