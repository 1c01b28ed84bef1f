package catalog

import (
	"fmt"
	"math/rand/v2"
	"testing"
	"time"

	"github.com/flowcat-catalog/flowcat/schema"
)

// BenchmarkCaseOrder times the ordering of one buffer of a sorter by
// case (65,536 events, about 6 a case, case ids of pseudonyms' length):
// go test ./catalog -run '^$' -bench CaseOrder -count 5
func BenchmarkCaseOrder(b *testing.B) {
	const n = 1 << 16
	r := rand.New(rand.NewPCG(3, 4))
	s := newCaseSorter(b.TempDir(), n)
	var buf runBuf
	base := time.Date(2026, 1, 5, 0, 0, 0, 0, time.UTC)
	ids := make([]string, n/6)
	for i := range ids {
		ids[i] = fmt.Sprintf("%016x%010x", r.Uint64(), r.Uint64()>>24)
	}
	for i := range n {
		c := r.IntN(len(ids))
		e := schema.Event{Site: "north", CaseID: ids[c], Type: schema.Arrival,
			SubjectID: fmt.Sprintf("p%d", c), OccurredAt: base.Add(time.Duration(i) * time.Second), Line: int64(i + 2)}
		buf.add(&e, true)
	}
	keys := append([]caseKey(nil), buf.caseKeys...)
	var w spillWork
	for b.Loop() {
		copy(buf.caseKeys, keys)
		if _, err := s.order(&buf, &w); err != nil {
			b.Fatal(err)
		}
	}
}
