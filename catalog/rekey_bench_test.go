package catalog

import (
	"context"
	"fmt"
	"testing"
)

// BenchmarkCarry measures the re-key of a dataset after a rotation: each
// iteration rotates the project's key and appends one new event, so the
// version it makes rewrites every held file (the events/s figure is the
// dataset's events re-keyed per second).
// "append only" is the same append without a rotation, the baseline.
func BenchmarkCarry(b *testing.B) {
	for _, rotate := range []bool{true, false} {
		name := "rotate and append"
		if !rotate {
			name = "append only"
		}
		b.Run(name, func(b *testing.B) { benchCarry(b, rotate) })
	}
}

func benchCarry(b *testing.B, rotate bool) {
	const n = 100_000
	e := newEnv(b, nil)
	ctx := context.Background()
	e.dataset(b, "p", "d", nil)
	e.ingest(b, "p", "d", genCSV(genOpt{Seed: 1, N: n}), "big.csv")
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		b.StopTimer()
		if rotate {
			if _, err := e.s.RotateProjectKey(ctx, "p", "bench"); err != nil {
				b.Fatal(err)
			}
		}
		one := fmt.Sprintf("site,case_id,event_type,occurred_at\nnorth,extra-%d,arrival,2026-03-02T08:00:00Z\n", i)
		b.StartTimer()
		res := e.ingest(b, "p", "d", []byte(one), fmt.Sprintf("one-%d.csv", i))
		if res.Version == nil || res.Version.Manifest.Rows < n {
			b.Fatalf("version %+v", res.Version)
		}
	}
	b.ReportMetric(float64(n)*float64(b.N)/b.Elapsed().Seconds(), "events/s")
}
