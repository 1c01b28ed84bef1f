package anonymize

import (
	"crypto/hmac"
	"crypto/sha256"
	"encoding/base32"
	"encoding/binary"
	"fmt"
	"math/rand/v2"
	"strings"
	"testing"
	"time"

	"github.com/flowcat-catalog/flowcat/schema"
)

// TestMemoAnswersAsComputed draws 60,000 identifiers out of 30,000
// distinct ones (far more than a field's memory holds, so slots are
// overwritten and collide) across four fields, under chains of one and
// three generations, and checks every pseudonym and time shift against
// the scheme recomputed with crypto/hmac directly (RFC 2104 HMAC-SHA256,
// RFC 4648 base32 lower case without padding; formulas in pseudonym.go,
// chain.go and shift.go), with no memory involved.
func TestMemoAnswersAsComputed(t *testing.T) {
	mac := func(key []byte, msg string) []byte {
		h := hmac.New(sha256.New, key)
		h.Write([]byte(msg))
		return h.Sum(nil)
	}
	enc := func(b []byte) string {
		return strings.ToLower(strings.TrimRight(base32.StdEncoding.EncodeToString(b[:16]), "="))
	}
	fields := []schema.Field{schema.FieldCaseID, schema.FieldSubjectID, schema.FieldResourceID, schema.FieldInstanceID}
	for _, gens := range []int{1, 3} {
		p := chainOf(gens)
		rng := rand.New(rand.NewPCG(1, uint64(gens)))
		for i := range 60_000 {
			f := fields[rng.IntN(len(fields))]
			raw := fmt.Sprintf("id-%d", rng.IntN(30_000))
			root := enc(mac(p.gens[0].key[:], "flowcat/v1/"+string(f)+"\x00"+raw))
			want := root
			for _, g := range p.gens[1:] {
				want = enc(mac(g.key[:], "flowcat/v1/rekey/"+string(f)+"\x00"+want))
			}
			if got := p.Pseudonym(f, raw); got != want {
				t.Fatalf("generations %d, draw %d, %s %q: got %q, want %q", gens, i, f, raw, got, want)
			}
			if f != schema.FieldCaseID {
				continue
			}
			maxDays := []int{30, 365}[rng.IntN(2)]
			sum := mac(p.gens[0].key[:], "flowcat/v1/time-shift\x00"+root)
			wantShift := -time.Duration(binary.BigEndian.Uint64(sum[:8])%uint64(maxDays+1)) * 24 * time.Hour
			e := schema.Event{CaseID: raw}
			if got := p.ApplyShift(&e, maxDays); got != wantShift {
				t.Fatalf("generations %d, draw %d: shift of %q for %d days: got %v, want %v", gens, i, raw, maxDays, got, wantShift)
			}
			if e.CaseID != want {
				t.Fatalf("ApplyShift left case id %q, want %q", e.CaseID, want)
			}
		}
	}
}
