package synth

import (
	"io"
	"strconv"
	"time"
)

// CompletionsHeader is the header row of a NewCompletions CSV.
const CompletionsHeader = "site,case_id,event_type,activity,occurred_at"

// NewCompletions returns a reader of an invented completion-only log, as
// most hospital logs are: only the instant each step completed. It holds
// cases × perCase rows, grouped by case (the order many exports use): case
// i starts 30 s after case i-1 and completes a step every 6 hours, so
// every case spans days and cases overlap by the thousand. Its bytes are a
// pure function of its arguments; the reader holds one row at a time.
func NewCompletions(cases, perCase int64) io.Reader {
	return &completions{cases: cases, per: perCase}
}

type completions struct {
	cases, per int64
	i, k       int64
	header     bool
	buf        []byte
	off        int
}

var completionSteps = [...]string{"registration", "assessment", "lab", "imaging", "review", "treatment", "observation", "discharge"}

func (c *completions) Read(p []byte) (int, error) {
	for c.off == len(c.buf) {
		if !c.fill() {
			return 0, io.EOF
		}
	}
	n := copy(p, c.buf[c.off:])
	c.off += n
	return n, nil
}

func (c *completions) fill() bool {
	c.buf, c.off = c.buf[:0], 0
	if !c.header {
		c.header = true
		c.buf = append(c.buf, CompletionsHeader+"\n"...)
	}
	base := time.Date(2025, 1, 6, 0, 0, 0, 0, time.UTC).Unix()
	for len(c.buf) < streamChunk && c.i < c.cases {
		at := base + c.i*30 + c.k*6*3600
		c.buf = append(c.buf, "ward-"...)
		c.buf = strconv.AppendInt(c.buf, c.i%4, 10)
		c.buf = append(c.buf, ",V"...)
		c.buf = strconv.AppendInt(c.buf, c.i, 10)
		c.buf = append(c.buf, ",complete,"...)
		c.buf = append(c.buf, completionSteps[c.k%int64(len(completionSteps))]...)
		c.buf = append(c.buf, ',')
		c.buf = time.Unix(at, 0).UTC().AppendFormat(c.buf, time.RFC3339)
		c.buf = append(c.buf, '\n')
		if c.k++; c.k == c.per {
			c.k = 0
			c.i++
		}
	}
	return len(c.buf) > 0
}
