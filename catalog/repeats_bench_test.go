package catalog

import (
	"fmt"
	"testing"
	"time"

	"github.com/flowcat-catalog/flowcat/schema"
)

// BenchmarkUploadIdentities records the content identities of 1M events
// (about 1 in 500 sent twice), as the read of a 1M-event upload does, and
// tests each once more, as the held filter does.
//
//	go test ./catalog -run '^$' -bench UploadIdentities -benchtime 3x
func BenchmarkUploadIdentities(b *testing.B) {
	const n = 1_000_000
	evs := make([]schema.Event, 4096)
	t0 := time.Date(2026, 1, 5, 0, 0, 0, 0, time.UTC)
	for b.Loop() {
		u := newUploadIdentities(IdentityContent)
		var buf []byte
		for i := range n {
			e := &evs[i%len(evs)]
			j := i
			if i%500 == 1 {
				j = i - 1
			}
			*e = schema.Event{Site: "north", CaseID: fmt.Sprint("c", j/5), Type: schema.Arrival,
				Activity: "triage", Queue: "q1", OccurredAt: t0.Add(time.Duration(j) * time.Second)}
			u.add(e)
			u.repeated(identityHash(u.seed, &buf, u.id, e))
		}
	}
}
