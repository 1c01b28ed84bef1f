package anonymize

import (
	"encoding/base32"
	"hash/maphash"

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

// Pseudonymizer computes the pseudonyms of one project key chain: the
// project's key generations, oldest first (see OpenKeyChain). With one
// generation (a project never rotated) a pseudonym is the HMAC of the raw
// value; each later generation adds one keyed step over the previous
// generation's pseudonym (chain.go). It reuses one HMAC state per
// generation and its buffers between calls, so it is not safe for
// concurrent use: give each goroutine its own (see Clone).
type Pseudonymizer struct {
	gens []*generation // oldest first; gens[0] pseudonymizes raw values
	buf  []byte
	out  [PseudonymLen]byte

	// memos remember recent identifiers' pseudonyms per field (memo.go).
	memos []fieldMemo
	seed  maphash.Seed
}

// generation is one key of a project's chain.
type generation struct {
	id  string
	key [ProjectKeySize]byte
	mac *mac
}

func newGeneration(id string, key []byte) *generation {
	g := &generation{id: id}
	copy(g.key[:], key)
	g.mac = newMAC(g.key[:])
	return g
}

func newPseudonymizer(id string, key []byte) *Pseudonymizer {
	return &Pseudonymizer{gens: []*generation{newGeneration(id, key)}, buf: make([]byte, 0, 128)}
}

// KeyID returns the id of the project's current key (its newest
// generation), as in SealedKey.ID: the key id a version made with p
// carries.
func (p *Pseudonymizer) KeyID() string { return p.gens[len(p.gens)-1].id }

// Generation returns the number of the current key generation, 1 for a
// project never rotated.
func (p *Pseudonymizer) Generation() int { return len(p.gens) }

// Clone returns an independent Pseudonymizer with the same keys, for use
// from another goroutine.
func (p *Pseudonymizer) Clone() *Pseudonymizer {
	c := &Pseudonymizer{buf: make([]byte, 0, 128)}
	for _, g := range p.gens {
		c.gens = append(c.gens, newGeneration(g.id, g.key[:]))
	}
	return c
}

// Pseudonym returns the pseudonym of raw in the domain of field f under
// the current generation. Under generation 1 it is the first 16 bytes of
// HMAC-SHA256(project key, "flowcat/v1/" + f + "\x00" + raw) in
// lower-case unpadded base32, 26 characters; each later generation g
// replaces the pseudonym q of generation g-1 by the same encoding of
// HMAC-SHA256(key g, "flowcat/v1/rekey/" + f + "\x00" + q). An empty raw
// gives "".
func (p *Pseudonymizer) Pseudonym(f schema.Field, raw string) string {
	if raw == "" {
		return ""
	}
	return p.remembered(f, raw).final
}

// root puts the generation-1 pseudonym of raw into p.out.
func (p *Pseudonymizer) root(f schema.Field, raw string) {
	b := append(p.buf[:0], domainPrefix...)
	b = append(b, f...)
	b = append(b, 0)
	b = append(b, raw...)
	sum := p.gens[0].mac.compute(b)
	clear(b) // the buffer held a raw identifier
	p.buf = b[:0]
	pseudoEncoding.Encode(p.out[:], sum[:pseudoBytes])
}

// Apply replaces e's identifier fields (the schema's field table says
// which: case_id, subject_id, resource_id, instance_id) by their
// pseudonyms, in place; empty fields stay empty. Applying it twice
// pseudonymizes the pseudonyms: call it once per event.
func (p *Pseudonymizer) Apply(e *schema.Event) {
	for i := range identifierFields {
		f := &identifierFields[i]
		f.Set(e, p.Pseudonym(f.Name, f.Get(e)))
	}
}

// identifierFields are the schema's identifier fields, in schema order.
var identifierFields = schema.IdentifierSpecs()

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

// RowKeyLen is the length of a RowKey.
const RowKeyLen = 16

// RowKey is what the catalog stores to tell a rejected row sent again:
// the first 16 bytes of HMAC-SHA256(first key of the chain,
// "flowcat/v1/row\x00" + d), d being the SHA-256 of the row's source
// text (schema.RowDigest). Keyed by the chain's first generation, like
// every pseudonym's root, it stays the same after a key rotation; without
// the key it cannot be tested against a guessed row.
func (p *Pseudonymizer) RowKey(d schema.RowDigest) [RowKeyLen]byte {
	b := append(p.buf[:0], domainPrefix+"row\x00"...)
	b = append(b, d[:]...)
	sum := p.gens[0].mac.compute(b)
	clear(b)
	p.buf = b[:0]
	var k [RowKeyLen]byte
	copy(k[:], sum)
	return k
}
