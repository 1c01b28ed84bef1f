// Package quality owns the per-upload quality report: it observes the
// accepted events of an upload (after pseudonymization) and its rejected
// rows, and turns what it saw into counts, findings and sub-scores.
//
// An [Accumulator] is fed one file at a time in time order (the ingest's
// sorted merge guarantees this) and holds only bounded state: counters,
// a few sample locations per finding, the events of the current instant
// (for exact duplicates) and a small record per recently active case (for
// order checks within a case). Accumulators of the files of one version
// merge into one, and [Accumulator.Report] yields the [Report], whose JSON
// form is versioned by [ReportVersion]. How scores are computed is written
// in SCORING.md beside this file and on [Report].
//
// Samples name source lines and case pseudonyms, never field values.
package quality
