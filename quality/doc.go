// Package quality owns the data-quality model of uploads: it observes the
// rejected rows and the accepted (pseudonymized) events of an upload and
// turns what it saw into counts, findings and sub-scores in the dimensions
// completeness, accuracy, consistency, currentness and uniqueness; it
// merges per-upload reports into version reports, builds trend points per
// site and raises drift alerts.
//
// An [Accumulator] sees each accepted event twice, in file order
// ([Accumulator.ObserveFileOrder], for the clock check) and then in time
// order ([Accumulator.Observe], after the ingest's sort), and holds only
// bounded state: counters per site, a few sample locations per finding,
// the events of the current instant, a record per case active within the
// horizon, the event ids of the last day and the open service intervals
// per resource. [Accumulator.Report] yields the [Report], whose JSON form
// is versioned by [ReportVersion] and documented in SCORING.md beside
// this file; [MergeReports] combines reports from their raw counts.
//
// Samples name source lines, case pseudonyms, sites and times, never
// field values.
package quality
