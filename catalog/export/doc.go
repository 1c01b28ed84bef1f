// Package export owns what leaves the catalog for researchers: the events of
// a version streamed in one deterministic order (Events), filtered by time
// window, site, queue, event type and activity, with row groups and files
// skipped by their statistics; that stream written as one Parquet file
// (WriteParquet) or as RFC 4180 CSV (WriteCSV); a reproducible bundle of a
// version's snapshot files with its manifest, data dictionary, README,
// checksums and citation (WriteBundle, Citation); and the content
// difference of two versions (Diff).
//
// Every writer is deterministic: the same version and request give the same
// bytes, so an export can be checked against a checksum taken earlier.
//
// # Order
//
// Events come sorted by occurred_at and, at equal instants, by the other
// fields in schema order compared as strings (see Compare). Snapshot files
// are sorted by (occurred_at, source line), so each file's run of events
// at one instant is sorted by content as it is read; the files are then
// merged k-way.
//
// # Memory
//
// A pass holds, per open file, one batch of decoded rows (batchRows), the
// current run of equal-instant events of that file, and the Parquet
// reader's page buffers (one page per column). At most MaxOpenFiles files
// are open at once: a version with more files is merged in stages, each
// stage merging up to MaxOpenFiles inputs into a temporary zstd Parquet
// file in the system temp dir (removed afterwards). Memory is therefore
// bounded by MaxOpenFiles x (batch + largest equal-instant run + pages),
// independent of the version's size.
package export
