// Package summary owns the operational summary of a dataset version: counts,
// arrival profiles, waiting, patience, service times, length of stay,
// occupancy and offered load, computed in one streaming pass over the
// time-ordered events of each uploaded file.
//
// An [Accumulator] observes the events of one file and serializes compactly
// ([Accumulator.MarshalBinary]); a version's summary is the [Accumulator.Merge]
// of its files' accumulators, so a nightly append never re-reads the past.
// Every statistic is computed at [Accumulator.Summary] time from state that
// merges exactly (integer counts, exact value maps, log-bucketed sketches,
// 128-bit sums), so the result does not depend on the order of merges.
//
// The case-level part merges too: the accumulators of disjoint sets of
// cases, each fed by its own per-case pass with its process observer
// beside it ([Accumulator.Process]), merge into the summary of one pass
// over their union, byte for byte, process views included (their caps
// keep the keys of lowest rank, so the choice is order-free). To keep a
// group of cases' state: make an accumulator with the version's options,
// pass it and a.Process() to the case pass as observers, and store
// MarshalBinary's bytes (format 5); to combine, Merge the decoded group
// states and the files' event-level states into one accumulator, then
// SetCounts. SUMMARY.md describes the formats and the limits.
//
// The pure statistics behind it are exported so they can be checked
// directly: [Quantile7], [KaplanMeier], [GreenwoodLogCI], [LognormalFit],
// [KSDistance] and [PoissonExactCI]. SUMMARY.md documents every field of
// [Summary], its formula and its unit.
//
// The package is free of storage and HTTP; it imports nothing of the project
// but schema.
package summary
