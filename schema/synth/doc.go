// Package synth generates realistic, fully invented service-event exports.
//
// It owns two generators:
//
//   - Scenario: an invented health network, Quillon Bay Health, whose partner
//     sites (a walk-in clinic and a nurse advice phone line) each write a
//     nightly export in their own format, with their own column names, event
//     codes and timestamp conventions, plus the YAML mapping profile that
//     brings that export into schema v1. Arrivals follow a non-homogeneous
//     Poisson process over the day (two peaks, weekday/weekend difference)
//     drawn by thinning; service times are lognormal; waits and abandonment
//     come from a multi-server first-come-first-served simulation with a
//     staffing level per hour. A few defects of known kinds are planted, and
//     their exact counts are returned, so that ingest and quality checks can
//     be tested against a known truth.
//   - NewStream: a fast, constant-memory CSV in the schema's own field names,
//     for ingest benchmarks of millions of events.
//
// Every output is a pure function of its seed. No organisation, person or
// identifier in the output is real. The package imports nothing of the
// project but schema.
package synth
