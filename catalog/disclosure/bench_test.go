package disclosure

import (
	"fmt"
	"runtime"
	"testing"
)

// BenchmarkAnalyzer measures the report over a large population: b.N
// runs of 200,000 cases with three quasi-identifiers (age band, sex,
// postal prefix: 7 subsets measured) and one sensitive attribute, within
// an 8 MiB memory bound, so the class counts spill. It reports cases/s and
// the peak heap in use after the report.
//
//	go test ./catalog/disclosure -run '^$' -bench Analyzer -benchtime 1x
func BenchmarkAnalyzer(b *testing.B) {
	const cases = 200_000
	dir := b.TempDir()
	var peak uint64
	for b.Loop() {
		a := New(Options{Quasi: []string{"age", "sex", "zip"}, Sensitive: []string{"dx"}, K: 5, MaxRisk: 0.2, Dir: dir, Memory: 8 << 20})
		q, s := make([]string, 3), make([]string, 1)
		for i := range cases {
			q[0] = fmt.Sprintf("%02d-%02d", i%18*5, i%18*5+4)
			q[1] = []string{"F", "M"}[i%2]
			q[2] = fmt.Sprintf("%03d", (i*7919)%997)
			s[0] = fmt.Sprintf("D%d", i%13)
			if err := a.Add(q, s); err != nil {
				b.Fatal(err)
			}
		}
		if _, err := a.Report(); err != nil {
			b.Fatal(err)
		}
		var ms runtime.MemStats
		runtime.ReadMemStats(&ms)
		peak = max(peak, ms.HeapInuse)
		a.Close()
	}
	b.ReportMetric(float64(cases)*float64(b.N)/b.Elapsed().Seconds(), "cases/s")
	b.ReportMetric(float64(peak)/(1<<20), "heap-MiB")
}
