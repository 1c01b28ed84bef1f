// Package quality owns the data-quality model of uploads: it observes the
// rejected rows and the accepted (pseudonymized) events of an upload and
// turns what it saw into counts, findings and sub-scores in the dimensions
// completeness, accuracy, consistency, currentness and uniqueness; it
// merges per-upload reports into version reports, builds trend points per
// site and raises drift alerts.
//
// An [Accumulator] sees each accepted event three times: in file order
// ([Accumulator.ObserveFileOrder], for the clock check), in time order
// ([Accumulator.Observe], after the ingest's sort) and grouped by case
// ([Accumulator.Event] and [Accumulator.Case], as an observer of the one
// per-case computation of package cases). It holds only bounded state:
// counters per site, a few sample locations per finding, the events of the
// current instant, the case in hand, the event ids of the last day and the
// open service intervals per resource. [Accumulator.Report] yields the [Report], whose JSON form
// is versioned by [ReportVersion] and documented in SCORING.md beside
// this file; [MergeReports] combines reports from their raw counts.
//
// An accumulator used as a case observer only (the per-case pass) holds
// case-level state of exact integers, which [Accumulator.MarshalBinary]
// encodes (a versioned format, "FCQS"), [Accumulator.UnmarshalBinary]
// decodes and [Accumulator.Merge] merges: the accumulators of disjoint
// sets of cases merge into the report one pass over their union gives,
// byte for byte, in any grouping and order (state.go says how).
//
// Samples name source lines, case pseudonyms, sites and times, never
// field values.
package quality
