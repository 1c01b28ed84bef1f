// Package anonymize owns keys and pseudonyms: the master key of a catalog
// server, the per-project keys sealed under it, and the keyed pseudonyms that
// replace the identifier fields of schema.Event (case_id, subject_id,
// resource_id) before anything is stored.
//
// # Keys
//
// A MasterKey is 32 random bytes held by the server operator (a file of mode
// 0600 or an environment variable), never stored in the catalog. Each project
// has its own random 256-bit project key. The catalog stores only a SealedKey:
// the project key encrypted with AES-256-GCM under a key derived from the
// master key, with the project name and the key id as additional data, so a
// sealed key copied into another project, or opened under another master key,
// fails with ErrKeyMismatch instead of yielding wrong pseudonyms. MasterKey.ID
// is a short fingerprint (a keyed hash, not the key) so a server can say which
// master key it expects without revealing it.
//
// # Pseudonyms
//
// A pseudonym is
//
//	base32lower( first 16 bytes of HMAC-SHA256(projectKey, "flowcat/v1/" || field || 0x00 || raw) )
//
// where field is the schema field name (e.g. "case_id"), HMAC is RFC 2104 and
// base32lower is the RFC 4648 base32 alphabet in lower case
// ("abcdefghijklmnopqrstuvwxyz234567") without padding: always 26 characters.
// An empty raw value stays empty, so a missing identifier stays missing.
//
// Why a keyed HMAC and not a plain hash: identifiers such as medical record
// numbers or ticket numbers come from small, guessable spaces; an unkeyed hash
// of them can be reversed by hashing every candidate. Without the project key
// nobody can compute or test a pseudonym, and two projects (different keys)
// cannot be joined on pseudonyms.
//
// Why one domain per field: the same text may be a case number in one column
// and a staff number in another. Separate domains make their pseudonyms
// unrelated, so equal pseudonyms across fields do not leak that the raw values
// were equal. The 0x00 separator cannot occur in a field name, so
// (field, raw) pairs map to distinct messages.
//
// Why 128 bits: by the birthday bound, the probability that any two of n
// distinct identifiers share a pseudonym is at most about n²/2^129. For
// n = 10^9 identifiers that is 10^18 / 6.8·10^38 ≈ 1.5·10^-21, negligible,
// while 26 characters stay short in Parquet dictionaries and exports.
//
// # Pseudonymized data is still personal data
//
// Pseudonyms are stable: every event of a case carries the same pseudonym, so
// a case's path, timing and site can still be followed and, joined with other
// knowledge, may single out a person. Whoever holds the project key (through
// the master key) can recompute the pseudonym of a known identifier and find
// that person's events. Snapshots produced here are therefore pseudonymized,
// not anonymous, personal data and must be protected as such.
package anonymize
