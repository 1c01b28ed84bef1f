package anonymize

import (
	"fmt"

	"github.com/flowcat-catalog/flowcat/schema"
)

// A project's pseudonym key rotates by generations. Generation 1 turns raw
// identifiers into pseudonyms; each later generation g turns the pseudonym
// q of generation g-1 into
//
//	base32lower( first 16 bytes of HMAC-SHA256(key g, "flowcat/v1/rekey/" || field || 0x00 || q) )
//
// so that data stored under an older generation can be carried to the
// newest one without its raw values (which are never stored), and a raw
// value sent after the rotation gets the same pseudonym as the carried
// data. Whoever holds only older keys cannot compute or test a pseudonym
// of the newest generation: that needs the newest key. The older keys are
// still needed for every new upload (its raw values go through the whole
// chain), so they stay sealed beside the newest for as long as the project
// takes uploads.

// rekeyPrefix starts every chain step's message; it differs from
// domainPrefix so a step can never equal a generation-1 pseudonym.
const rekeyPrefix = "flowcat/v1/rekey/"

// step replaces the pseudonym in p.out by its image under generation g.
func (p *Pseudonymizer) step(g *generation, f schema.Field) {
	b := append(p.buf[:0], rekeyPrefix...)
	b = append(b, f...)
	b = append(b, 0)
	b = append(b, p.out[:]...)
	sum := g.mac.compute(b)
	p.buf = b[:0]
	pseudoEncoding.Encode(p.out[:], sum[:pseudoBytes])
}

// Rekeyer carries pseudonyms of one older generation to the current one.
// Like its Pseudonymizer it is not safe for concurrent use.
type Rekeyer struct {
	p    *Pseudonymizer
	from int // index of the generation the pseudonyms are of
}

// Rekeyer returns the Rekeyer from the generation whose key id is from
// to p's current generation. It fails when from is not in p's chain.
func (p *Pseudonymizer) Rekeyer(from string) (*Rekeyer, error) {
	for i, g := range p.gens {
		if g.id == from {
			return &Rekeyer{p: p.Clone(), from: i}, nil
		}
	}
	return nil, fmt.Errorf("project key %q is not a generation of the chain of %s", truncID(from), p.KeyID())
}

// Steps returns how many generations the Rekeyer crosses; 0 means its
// pseudonyms are already current.
func (r *Rekeyer) Steps() int { return len(r.p.gens) - 1 - r.from }

// Pseudonym returns the current-generation pseudonym of q, a pseudonym of
// field f under the Rekeyer's older generation. An empty q gives "". A q
// that is not in pseudonym form (IsPseudonym) cannot have been made by a
// key and is an error: stored data must hold only pseudonyms.
func (r *Rekeyer) Pseudonym(f schema.Field, q string) (string, error) {
	if q == "" || r.Steps() == 0 {
		return q, nil
	}
	if !IsPseudonym(q) {
		return "", fmt.Errorf("rekey %s: a value that is not a pseudonym", f)
	}
	copy(r.p.out[:], q)
	for _, g := range r.p.gens[r.from+1:] {
		r.p.step(g, f)
	}
	return string(r.p.out[:]), nil
}

// Apply carries e's identifier fields (as Pseudonymizer.Apply names them)
// to the current generation, in place.
func (r *Rekeyer) Apply(e *schema.Event) error {
	for i := range identifierFields {
		f := &identifierFields[i]
		q, err := r.Pseudonym(f.Name, f.Get(e))
		if err != nil {
			return err
		}
		f.Set(e, q)
	}
	return nil
}
