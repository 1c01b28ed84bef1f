// Package catalog owns projects, datasets, uploads and versions, their
// metadata in a bbolt file, the Parquet snapshot writer and reader, and the
// blob store interface under which snapshot files are kept.
//
// Ingest is a function of this package: it drives a source file through
// schema (parse, validate), anonymize (pseudonyms), quality (report) and the
// Parquet writer, and commits a new immutable version in one bbolt
// transaction after its files are durable. A crash between the two leaves an
// unreferenced blob, never a version without its files.
//
// A version's manifest is stored once, as the canonical bytes its commit
// made, under its snapshot id (their sha256), and always served as stored;
// its quality report sits beside it, named by its own sha256. migrate.go
// is the one place that reads the stored formats of earlier releases.
package catalog
