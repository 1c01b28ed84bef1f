package anonymize

import (
	"encoding/binary"
	"time"

	"github.com/flowcat-catalog/flowcat/schema"
)

// shiftDomain separates time-shift offsets from pseudonyms under the same
// project key.
const shiftDomain = "flowcat/v1/time-shift\x00"

// TimeShift returns the offset by which every event time of one subject
// is moved: a whole number of days in [-maxDays, 0], taken from
// HMAC-SHA256(project key, "flowcat/v1/time-shift" + "\x00" + subject),
// where subject is the subject's generation-1 pseudonym and the key is
// generation 1's: a rotation of the project's key (chain.go) leaves every
// offset as it was, so times already stored stay right and a subject's
// events keep one offset across generations. The same subject always gets
// the same offset, so intervals within a subject are kept exactly; without
// the key the offset cannot be recomputed. Times only move back, so a
// shifted event never lands after its upload (which would take it out of
// summaries as "later than upload"). maxDays <= 0 gives 0.
func (p *Pseudonymizer) TimeShift(subject string, maxDays int) time.Duration {
	if maxDays <= 0 || subject == "" {
		return 0
	}
	b := append(p.buf[:0], shiftDomain...)
	b = append(b, subject...)
	sum := p.gens[0].mac.compute(b)
	p.buf = b[:0]
	// 64 bits reduced modulo maxDays+1 (at most 3661): the bias is below
	// 2^-50, nothing a reader of the data could use.
	span := uint64(maxDays + 1)
	days := -int64(binary.BigEndian.Uint64(sum[:8]) % span)
	return time.Duration(days) * 24 * time.Hour
}

// ApplyShift pseudonymizes e as Apply does and returns the time shift of
// its subject (its case when it names no subject), derived as TimeShift
// says from the generation-1 pseudonym, whatever the current generation.
// It does not move e's times; the caller applies the offset.
func (p *Pseudonymizer) ApplyShift(e *schema.Event, maxDays int) time.Duration {
	var d time.Duration
	if maxDays > 0 {
		raw, f := e.SubjectID, schema.FieldSubjectID
		if raw == "" {
			raw, f = e.CaseID, schema.FieldCaseID
		}
		if raw != "" {
			d = p.shiftOf(p.remembered(f, raw), maxDays)
		}
	}
	p.Apply(e)
	return d
}
