package anonymize

import (
	"encoding/base32"

	"github.com/flowcat-catalog/flowcat/schema"
)

// PseudonymLen is the length of every non-empty pseudonym: 128 bits in
// unpadded base32.
const PseudonymLen = 26

// pseudoBytes is how much of the HMAC output a pseudonym keeps.
const pseudoBytes = 16

// domainPrefix starts every pseudonym message; "v1" versions the scheme.
const domainPrefix = "flowcat/v1/"

// pseudoEncoding is RFC 4648 base32 in lower case, without padding.
var pseudoEncoding = base32.NewEncoding("abcdefghijklmnopqrstuvwxyz234567").WithPadding(base32.NoPadding)

// Pseudonymizer computes the pseudonyms of one project key. It reuses one
// HMAC state and buffers between calls, so it is not safe for concurrent
// use: give each goroutine its own (see Clone).
type Pseudonymizer struct {
	id  string
	key [ProjectKeySize]byte
	mac *mac
	buf []byte
	out [PseudonymLen]byte
}

func newPseudonymizer(id string, key []byte) *Pseudonymizer {
	p := &Pseudonymizer{id: id, buf: make([]byte, 0, 128)}
	copy(p.key[:], key)
	p.mac = newMAC(p.key[:])
	return p
}

// KeyID returns the id of the project key, as in SealedKey.ID.
func (p *Pseudonymizer) KeyID() string { return p.id }

// Clone returns an independent Pseudonymizer with the same key, for use from
// another goroutine.
func (p *Pseudonymizer) Clone() *Pseudonymizer { return newPseudonymizer(p.id, p.key[:]) }

// Pseudonym returns the pseudonym of raw in the domain of field f: the first
// 16 bytes of HMAC-SHA256(project key, "flowcat/v1/" + f + "\x00" + raw) in
// lower-case unpadded base32, 26 characters. An empty raw gives "".
func (p *Pseudonymizer) Pseudonym(f schema.Field, raw string) string {
	if raw == "" {
		return ""
	}
	b := append(p.buf[:0], domainPrefix...)
	b = append(b, f...)
	b = append(b, 0)
	b = append(b, raw...)
	sum := p.mac.compute(b)
	clear(b) // the buffer held a raw identifier
	p.buf = b[:0]
	pseudoEncoding.Encode(p.out[:], sum[:pseudoBytes])
	return string(p.out[:])
}

// Apply replaces e's identifier fields (CaseID, SubjectID, ResourceID,
// InstanceID) by their pseudonyms, in place; empty fields stay empty.
// Applying it twice pseudonymizes the pseudonyms: call it once per event.
func (p *Pseudonymizer) Apply(e *schema.Event) {
	e.CaseID = p.Pseudonym(schema.FieldCaseID, e.CaseID)
	e.SubjectID = p.Pseudonym(schema.FieldSubjectID, e.SubjectID)
	e.ResourceID = p.Pseudonym(schema.FieldResourceID, e.ResourceID)
	e.InstanceID = p.Pseudonym(schema.FieldInstanceID, e.InstanceID)
}

// IsPseudonym reports whether s has the form of a pseudonym: 26 characters
// of the lower-case base32 alphabet. It cannot tell which key made it.
func IsPseudonym(s string) bool {
	if len(s) != PseudonymLen {
		return false
	}
	for i := 0; i < len(s); i++ {
		c := s[i]
		if !(c >= 'a' && c <= 'z' || c >= '2' && c <= '7') {
			return false
		}
	}
	// 26 characters carry 130 bits: the last holds the final 3 bits of the
	// 128 and 2 zero bits, so its alphabet index is a multiple of 4.
	last := s[PseudonymLen-1]
	idx := int(last - 'a')
	if last <= '7' {
		idx = int(last-'2') + 26
	}
	return idx%4 == 0
}
