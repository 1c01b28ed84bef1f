package schema

import (
	"testing"
	"time"
)

// BenchmarkCompareContent compares two events equal in every text field
// but the last (the worst case) and two that differ in case_id.
func BenchmarkCompareContent(b *testing.B) {
	at := time.Date(2024, 1, 1, 8, 0, 0, 0, time.UTC)
	x := Event{Site: "north-clinic", CaseID: "c-000123", SubjectID: "s-77", ResourceID: "desk-4", Type: Start,
		Activity: "triage", Queue: "main", OccurredAt: at, Priority: "2", Channel: "walk-in", Outcome: "seen", EventID: "e-1", InstanceID: "i-1"}
	y := x
	y.InstanceID = "i-2"
	z := x
	z.CaseID = "c-000124"
	b.Run("last", func(b *testing.B) {
		for range b.N {
			if CompareContent(&x, &y) >= 0 {
				b.Fatal("order")
			}
		}
	})
	b.Run("case", func(b *testing.B) {
		for range b.N {
			if CompareContent(&x, &z) >= 0 {
				b.Fatal("order")
			}
		}
	})
}
