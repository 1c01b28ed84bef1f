package catalog

import (
	"bytes"
	"encoding/binary"
	"fmt"
	"math"

	bolt "go.etcd.io/bbolt"

	"github.com/flowcat-catalog/flowcat/anonymize"
	"github.com/flowcat-catalog/flowcat/catalog/blob"
	"github.com/flowcat-catalog/flowcat/quality"
	"github.com/flowcat-catalog/flowcat/schema"
)

// A version's report counts each rejected source row once: a nightly
// export that re-sends a week of days holding one broken row would
// otherwise count it seven times. Each upload that makes a version keeps,
// for each row it rejected, the row's key (a keyed digest of its text,
// anonymize.Pseudonymizer.RowKey: no raw value is kept), its line and its
// reason; when the version's report is merged, a file's rejected rows whose
// key an earlier upload of the version holds are left out of it
// (quality.LessRepeats).

// maxRejectedRowKeys bounds the rejected rows an upload identifies (about
// 40 bytes each in memory, 25 on disk); past it, further rejected rows of
// the upload count in every version as they did before identities
// (documented in quality/SCORING.md and the README's limits).
const maxRejectedRowKeys = 100_000

var (
	// bucketRejectedRows: dataset ref "/" upload seq -> the upload's rows.
	bucketRejectedRows = []byte("rejected_rows")
	// bucketRowKeys: dataset ref "/" row key, upload seq -> "" (which
	// uploads rejected a row).
	bucketRowKeys = []byte("rejected_row_keys")
)

// rejectedRow is one row an upload rejected.
type rejectedRow struct {
	key    [anonymize.RowKeyLen]byte
	line   int64
	reason schema.Reason
}

// rejectedRows are an upload's rejected rows, as identified.
type rejectedRows struct {
	rows []rejectedRow
}

// add keys and keeps one rejected row (rows the reader could not identify,
// and those past maxRejectedRowKeys, are not kept).
func (rr *rejectedRows) add(pz *anonymize.Pseudonymizer, rej *schema.Rejection) {
	if rr == nil || rej.Row.IsZero() || len(rr.rows) >= maxRejectedRowKeys {
		return
	}
	rr.rows = append(rr.rows, rejectedRow{key: pz.RowKey(rej.Row), line: rej.Line, reason: rej.Reason})
}

// encodeRejectedRows packs rows: per row its key, its line (uvarint), and
// its reason (uvarint length and bytes).
func encodeRejectedRows(rows []rejectedRow) []byte {
	b := make([]byte, 0, len(rows)*(anonymize.RowKeyLen+16))
	for _, r := range rows {
		b = append(b, r.key[:]...)
		b = binary.AppendUvarint(b, uint64(r.line))
		b = binary.AppendUvarint(b, uint64(len(r.reason)))
		b = append(b, r.reason...)
	}
	return b
}

func decodeRejectedRows(b []byte) ([]rejectedRow, error) {
	var out []rejectedRow
	for len(b) > 0 {
		var r rejectedRow
		if len(b) < anonymize.RowKeyLen {
			return nil, fmt.Errorf("rejected rows: truncated key")
		}
		copy(r.key[:], b)
		b = b[anonymize.RowKeyLen:]
		line, n := binary.Uvarint(b)
		if n <= 0 {
			return nil, fmt.Errorf("rejected rows: bad line")
		}
		b = b[n:]
		l, n := binary.Uvarint(b)
		if n <= 0 || uint64(len(b)-n) < l {
			return nil, fmt.Errorf("rejected rows: bad reason")
		}
		r.line, r.reason = int64(line), schema.Reason(b[n:n+int(l)])
		b = b[n+int(l):]
		out = append(out, r)
	}
	return out, nil
}

func rowKeyPrefix(ref string, key [anonymize.RowKeyLen]byte) []byte {
	k := make([]byte, 0, len(ref)+1+anonymize.RowKeyLen+4)
	k = append(k, ref...)
	k = append(k, '/')
	return append(k, key[:]...)
}

// putRejectedRows records, in tx, the rejected rows of the upload seq of
// dataset ref.
func putRejectedRows(tx *bolt.Tx, ref string, seq int, rr *rejectedRows) error {
	if rr == nil || len(rr.rows) == 0 {
		return nil
	}
	if err := tx.Bucket(bucketRejectedRows).Put(seqKey(ref, seq), encodeRejectedRows(rr.rows)); err != nil {
		return err
	}
	idx := tx.Bucket(bucketRowKeys)
	for _, r := range rr.rows {
		k := binary.BigEndian.AppendUint32(rowKeyPrefix(ref, r.key), uint32(seq))
		if err := idx.Put(k, nil); err != nil {
			return err
		}
	}
	return nil
}

// uploadsCounted are the uploads whose rejected rows a version of files
// counts: those of its files as uploaded (a rewritten file's report holds
// no rejected rows).
func uploadsCounted(files []FileEntry) map[int]bool {
	in := map[int]bool{}
	for _, f := range files {
		if f.DerivedFrom == nil && f.Upload.Seq() > 0 {
			in[f.Upload.Seq()] = true
		}
	}
	return in
}

// repeatsIn returns the rows of rows whose key an upload of in numbered
// below before rejected too.
func repeatsIn(tx *bolt.Tx, ref string, in map[int]bool, rows []rejectedRow, before int) quality.Repeats {
	var rp quality.Repeats
	c := tx.Bucket(bucketRowKeys).Cursor()
	for _, r := range rows {
		p := rowKeyPrefix(ref, r.key)
		for k, _ := c.Seek(p); k != nil && bytes.HasPrefix(k, p); k, _ = c.Next() {
			if len(k) != len(p)+4 {
				continue
			}
			if u := int(binary.BigEndian.Uint32(k[len(p):])); u < before && in[u] {
				rp.Add(r.reason, r.line)
				break
			}
		}
	}
	return rp
}

// repeatsOfUpload returns the rows of rr (the upload being committed)
// that an upload of files (a version's) rejected too.
func (s *Store) repeatsOfUpload(ref string, files []FileEntry, rr *rejectedRows) (quality.Repeats, error) {
	var rp quality.Repeats
	if rr == nil || len(rr.rows) == 0 {
		return rp, nil
	}
	err := s.db.View(func(tx *bolt.Tx) error {
		rp = repeatsIn(tx, ref, uploadsCounted(files), rr.rows, math.MaxInt32)
		return nil
	})
	return rp, err
}

// versionRepeats returns, per stored file of files (a version's, in any
// order), its upload's rejected rows that an earlier upload of the
// version rejected too. Only files as uploaded count (uploadsCounted);
// the upload being committed has its own (repeatsOfUpload).
func (s *Store) versionRepeats(ref string, files []FileEntry) (map[blob.ID]quality.Repeats, error) {
	in := uploadsCounted(files)
	out := map[blob.ID]quality.Repeats{}
	err := s.db.View(func(tx *bolt.Tx) error {
		for _, f := range files {
			seq := f.Upload.Seq()
			if f.DerivedFrom != nil || seq == 0 {
				continue
			}
			v := tx.Bucket(bucketRejectedRows).Get(seqKey(ref, seq))
			if v == nil {
				continue
			}
			rows, err := decodeRejectedRows(v)
			if err != nil {
				return fmt.Errorf("upload %d of %s: %w", seq, ref, err)
			}
			if rp := repeatsIn(tx, ref, in, rows, seq); rp.N() > 0 {
				out[f.SHA256] = rp
			}
		}
		return nil
	})
	return out, err
}
