package catalog

import (
	"testing"
)

// BenchmarkSnapshotWrite writes one snapshot file of 200,000 invented
// events (fixtureEvents, event ids cut to 12 bytes) through the snapshot
// writer, as ingest does, in row groups of the store's default size: the
// time per event of the Parquet write path alone.
//
//	go test ./catalog -run '^$' -bench SnapshotWrite -count 3
func BenchmarkSnapshotWrite(b *testing.B) {
	evs := fixtureEvents(200_000, 9)
	for i := range evs {
		if len(evs[i].EventID) > 12 {
			evs[i].EventID = evs[i].EventID[:12]
		}
	}
	dir := b.TempDir()
	var size int64
	for b.Loop() {
		sw, err := newSnapshotWriter(dir, 1<<16, "k-bench")
		if err != nil {
			b.Fatal(err)
		}
		for i := range evs {
			if err := sw.Write(&evs[i]); err != nil {
				b.Fatal(err)
			}
		}
		if _, size, err = sw.Finish(); err != nil {
			b.Fatal(err)
		}
		sw.Remove()
	}
	b.ReportMetric(float64(b.Elapsed().Nanoseconds())/float64(b.N)/float64(len(evs)), "ns/event")
	b.ReportMetric(float64(size)/float64(len(evs)), "bytes/event")
}
