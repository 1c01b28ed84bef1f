package anonymize

import (
	"crypto/hmac"
	"crypto/sha256"
	"encoding/base32"
	"errors"
	"fmt"
	"strings"
	"testing"

	"github.com/flowcat-catalog/flowcat/schema"
)

// chainOf builds a Pseudonymizer of n generations with keys of bytes
// g, g+1, ... for generation g (1-based).
func chainOf(n int) *Pseudonymizer {
	p := &Pseudonymizer{buf: make([]byte, 0, 128)}
	for g := 1; g <= n; g++ {
		key := make([]byte, ProjectKeySize)
		for i := range key {
			key[i] = byte(g + i)
		}
		p.gens = append(p.gens, newGeneration("pk-gen"+string(rune('0'+g)), key))
	}
	return p
}

// TestChainScheme recomputes a generation-2 pseudonym from the formula in
// chain.go with crypto/hmac directly (RFC 2104 HMAC-SHA256, RFC 4648
// base32 in lower case without padding), independently of the package's
// own mac and buffers.
func TestChainScheme(t *testing.T) {
	p := chainOf(2)
	enc := func(key []byte, msg string) string {
		h := hmac.New(sha256.New, key)
		h.Write([]byte(msg))
		return strings.ToLower(strings.TrimRight(base32.StdEncoding.EncodeToString(h.Sum(nil)[:16]), "="))
	}
	k1, k2 := p.gens[0].key[:], p.gens[1].key[:]
	q := enc(k1, "flowcat/v1/case_id\x00C-1001")
	want := enc(k2, "flowcat/v1/rekey/case_id\x00"+q)
	if got := p.Pseudonym(schema.FieldCaseID, "C-1001"); got != want {
		t.Fatalf("generation 2: got %q, want %q", got, want)
	}
	if !IsPseudonym(want) {
		t.Fatalf("%q is not in pseudonym form", want)
	}
	one := chainOf(1)
	if got := one.Pseudonym(schema.FieldCaseID, "C-1001"); got != q {
		t.Fatalf("generation 1: got %q, want %q", got, q)
	}
}

// TestRekeyerCarries checks that carrying a stored pseudonym equals
// pseudonymizing its raw value under the newer chain, over one and two
// steps, per field, and that the generations differ.
func TestRekeyerCarries(t *testing.T) {
	p1, p2, p3 := chainOf(1), chainOf(2), chainOf(3)
	for _, f := range []schema.Field{schema.FieldCaseID, schema.FieldSubjectID, schema.FieldResourceID, schema.FieldInstanceID} {
		for _, raw := range []string{"C-1", "nurse 7", "ÄÖ-2024-000017"} {
			q1 := p1.Pseudonym(f, raw)
			q2 := p2.Pseudonym(f, raw)
			q3 := p3.Pseudonym(f, raw)
			if q1 == q2 || q2 == q3 || q1 == q3 {
				t.Fatalf("%s %q: generations share a pseudonym", f, raw)
			}
			r12, err := p2.Rekeyer("pk-gen1")
			if err != nil {
				t.Fatal(err)
			}
			if got, _ := r12.Pseudonym(f, q1); got != q2 {
				t.Errorf("%s: 1->2 carried %q, want %q", f, got, q2)
			}
			r13, _ := p3.Rekeyer("pk-gen1")
			r23, _ := p3.Rekeyer("pk-gen2")
			if got, _ := r13.Pseudonym(f, q1); got != q3 {
				t.Errorf("%s: 1->3 carried %q, want %q", f, got, q3)
			}
			if got, _ := r23.Pseudonym(f, q2); got != q3 {
				t.Errorf("%s: 2->3 carried %q, want %q", f, got, q3)
			}
			if r13.Steps() != 2 || r23.Steps() != 1 {
				t.Errorf("steps %d, %d", r13.Steps(), r23.Steps())
			}
		}
	}
	e := schema.Event{CaseID: "C-9", SubjectID: "", ResourceID: "R-1", InstanceID: "I-1"}
	old, cur := e, e
	p1.Apply(&old)
	p3.Apply(&cur)
	r, _ := p3.Rekeyer("pk-gen1")
	if err := r.Apply(&old); err != nil {
		t.Fatal(err)
	}
	if old != cur {
		t.Errorf("carried event %+v, want %+v", old, cur)
	}
	if _, err := p3.Rekeyer("pk-other"); err == nil {
		t.Error("a key id outside the chain was accepted")
	}
	if _, err := r.Pseudonym(schema.FieldCaseID, "C-9"); err == nil || strings.Contains(err.Error(), "C-9") {
		t.Errorf("a raw value to carry: got %v, want an error that does not repeat it", err)
	}
}

// TestShiftStaysOnGenerationOne: rotating leaves every subject's time
// shift as it was, so stored times and new uploads agree.
func TestShiftStaysOnGenerationOne(t *testing.T) {
	p1, p3 := chainOf(1), chainOf(3)
	moved := 0
	for i := range 500 {
		raw := "S-" + string(rune('a'+i%26)) + string(rune('a'+i/26))
		a := schema.Event{SubjectID: raw, CaseID: "C"}
		b := a
		d1 := p1.ApplyShift(&a, 30)
		d3 := p3.ApplyShift(&b, 30)
		if d1 != d3 {
			t.Fatalf("subject %d: shift %v under generation 1, %v under 3", i, d1, d3)
		}
		if d1 != p1.TimeShift(a.SubjectID, 30) {
			t.Fatalf("ApplyShift differs from TimeShift of the generation-1 pseudonym")
		}
		if d1 != 0 {
			moved++
		}
		if b.SubjectID != p3.Pseudonym(schema.FieldSubjectID, raw) {
			t.Fatal("ApplyShift did not pseudonymize as Apply")
		}
	}
	if moved < 400 {
		t.Errorf("only %d of 500 subjects moved", moved)
	}
	// No subject: the case decides, in the case domain.
	a := schema.Event{CaseID: "C-77"}
	d := chainOf(2).ApplyShift(&a, 30)
	if want := p1.TimeShift(p1.Pseudonym(schema.FieldCaseID, "C-77"), 30); d != want {
		t.Errorf("case-keyed shift %v, want %v", d, want)
	}
}

func TestOpenKeyChain(t *testing.T) {
	mk, _ := GenerateMasterKey()
	k1, _ := NewProjectKey(mk, "ward")
	k2, _ := NewProjectKey(mk, "ward")
	p, err := OpenKeyChain(mk, "ward", []SealedKey{k1, k2})
	if err != nil {
		t.Fatal(err)
	}
	if p.KeyID() != k2.ID || p.Generation() != 2 {
		t.Fatalf("key id %s generation %d", p.KeyID(), p.Generation())
	}
	one, _ := OpenProjectKey(mk, "ward", k1)
	r, _ := p.Rekeyer(k1.ID)
	q, _ := r.Pseudonym(schema.FieldCaseID, one.Pseudonym(schema.FieldCaseID, "X"))
	if q != p.Pseudonym(schema.FieldCaseID, "X") {
		t.Error("the opened chain does not carry generation 1 to 2")
	}
	if _, err := OpenKeyChain(mk, "ward", []SealedKey{k1, k1}); !errors.Is(err, ErrMalformedKey) {
		t.Errorf("a repeated key: %v", err)
	}
	if _, err := OpenKeyChain(mk, "other", []SealedKey{k1, k2}); !errors.Is(err, ErrKeyMismatch) {
		t.Errorf("another project: %v", err)
	}
	if _, err := OpenKeyChain(mk, "ward", nil); !errors.Is(err, ErrMalformedKey) {
		t.Errorf("no key: %v", err)
	}
	if c := p.Clone(); c.Pseudonym(schema.FieldCaseID, "X") != p.Pseudonym(schema.FieldCaseID, "X") || c.KeyID() != p.KeyID() {
		t.Error("a clone differs")
	}
}

// BenchmarkChain measures a pseudonym under one and three generations
// and the carry of a stored event's four identifiers over two steps
// (what a re-key does per event).
func BenchmarkChain(b *testing.B) {
	for _, n := range []int{1, 3} {
		p := chainOf(n)
		b.Run(fmt.Sprintf("pseudonym/generations=%d", n), func(b *testing.B) {
			for i := 0; i < b.N; i++ {
				p.Pseudonym(schema.FieldCaseID, "CASE-0000123456")
			}
		})
	}
	p1, p3 := chainOf(1), chainOf(3)
	held := schema.Event{CaseID: "C-1", SubjectID: "S-1", ResourceID: "R-1", InstanceID: "I-1"}
	p1.Apply(&held)
	r, _ := p3.Rekeyer("pk-gen1")
	b.Run("rekey event/steps=2", func(b *testing.B) {
		b.ReportAllocs()
		for i := 0; i < b.N; i++ {
			e := held
			if err := r.Apply(&e); err != nil {
				b.Fatal(err)
			}
		}
	})
}

// TestRowKeyScheme recomputes a row key from its formula (pseudonym.go)
// with crypto/hmac and crypto/sha256 directly (RFC 2104 HMAC-SHA256):
// keyed by the chain's first generation, so a rotation keeps it, and
// different under another project's key.
func TestRowKeyScheme(t *testing.T) {
	d := schema.RowDigest(sha256.Sum256([]byte("V9,ARR,not a time,x,D9,40")))
	p1, p3 := chainOf(1), chainOf(3)
	h := hmac.New(sha256.New, p1.gens[0].key[:])
	h.Write([]byte("flowcat/v1/row\x00"))
	h.Write(d[:])
	var want [RowKeyLen]byte
	copy(want[:], h.Sum(nil))
	if got := p1.RowKey(d); got != want {
		t.Fatalf("row key %x, want %x", got, want)
	}
	if got := p3.RowKey(d); got != want {
		t.Fatalf("after two rotations the row key is %x, want %x", got, want)
	}
	other := chainOf(1)
	other.gens[0] = newGeneration("pk-other", make([]byte, ProjectKeySize))
	if other.RowKey(d) == want {
		t.Fatal("another project's key gives the same row key")
	}
}
