package catalog

import (
	"encoding/binary"
	"encoding/json"
	"errors"
	"fmt"
	"hash/crc32"
	"io"
	"os"
	"path/filepath"
	"sync"

	bolt "go.etcd.io/bbolt"
)

// The audit journal holds RecordAudit's entries (downloads, exports,
// refused requests) from the moment they are recorded until they are
// folded into the audit bucket. A group of entries costs one append and
// one fsync(2) there, where a bbolt commit costs its pages and two
// fdatasyncs; a fold moves many groups into the bucket in one commit.
// Each entry is durable before RecordAudit returns, as before, and every
// reader of the trail folds first, so the trail reads the same.
//
// The file, beside the bbolt file (its path plus "-audit"), is a header
// (auditJournalMagic, then the generation as a big-endian uint64) and
// records: the payload's length and its CRC-32C (Castagnoli), both
// little-endian uint32, then the payload, the entry's JSON (no ID: the
// fold gives it its key). The bucket's meta holds, under
// "audit_journal", the generation and offset folded so far, written in
// the fold's own transaction, so that a crash before or after a fold
// folds each entry once. After a fold that leaves the file over
// auditJournalRotate bytes, a new empty file of the next generation
// replaces it (written, synced and renamed over it): a generation other
// than the folded one is read from its start.
//
// Reopening folds what an earlier run left and cuts a torn last record
// (an append a crash interrupted: its callers had no answer). A journal
// that fails to append or sync is not written again: the entries go to
// the bucket in a transaction each, as they did before the journal.
const (
	auditJournalMagic  = "flowcat-audit-j1"
	auditJournalHeader = len(auditJournalMagic) + 8
	// auditJournalFoldAt is the size of unfolded records at which the
	// group that reaches it folds them (some 900 entries).
	auditJournalFoldAt = 256 << 10
	// auditJournalRotate is the size past which a fold starts a new file.
	auditJournalRotate = 1 << 20
	// auditJournalMaxPending bounds what waits to be folded (in the file
	// and as entries in memory) when folds fail: past it, groups go to
	// the bucket directly, and fail with it.
	auditJournalMaxPending = 4 << 20
	// maxAuditRecord bounds one record's payload when the journal is read
	// back; an entry's text fields are clipped far below it.
	maxAuditRecord = 64 << 10
)

var (
	auditJournalMeta = []byte("audit_journal")
	castagnoli       = crc32.MakeTable(crc32.Castagnoli)
)

type auditJournal struct {
	mu     sync.Mutex
	path   string
	f      *os.File
	gen    uint64
	end    int64 // bytes appended and synced
	folded int64 // records before this offset are in the bucket
	broken error // the append that failed; nothing is appended since
	// appendFailing and foldFailing are set while the groups' appends or
	// folds fail (each told once).
	appendFailing, foldFailing bool
	buf                        []byte
	// unfolded are the entries of the records from folded to end, so a
	// fold does not read them back.
	unfolded []AuditEntry
}

// openAuditJournal opens (creating if needed) the journal of the bbolt
// file at dbPath and folds into db the records an earlier run left.
func openAuditJournal(db *metaDB, dbPath string) (*auditJournal, error) {
	j := &auditJournal{path: dbPath + "-audit"}
	var metaGen uint64
	var metaOff int64
	if err := db.View(func(tx *bolt.Tx) error {
		if v := tx.Bucket(bucketMeta).Get(auditJournalMeta); len(v) == 16 {
			metaGen, metaOff = binary.BigEndian.Uint64(v), int64(binary.BigEndian.Uint64(v[8:]))
		}
		return nil
	}); err != nil {
		return nil, err
	}
	f, err := os.OpenFile(j.path, os.O_RDWR, 0)
	if errors.Is(err, os.ErrNotExist) {
		if err := j.create(metaGen + 1); err != nil {
			return nil, err
		}
		return j, nil
	}
	if err != nil {
		return nil, fmt.Errorf("audit journal: %w", err)
	}
	j.f = f
	var hdr [auditJournalHeader]byte
	if _, err := io.ReadFull(f, hdr[:]); err != nil || string(hdr[:len(auditJournalMagic)]) != auditJournalMagic {
		f.Close()
		return nil, fmt.Errorf("audit journal %s: not a journal of this release (its header does not read %q)", j.path, auditJournalMagic)
	}
	j.gen = binary.BigEndian.Uint64(hdr[len(auditJournalMagic):])
	j.folded = int64(auditJournalHeader)
	if j.gen == metaGen && metaOff >= j.folded {
		j.folded = metaOff
	}
	// Read the records not folded, up to the last whole one; a torn last
	// one is cut.
	end, err := j.scan(j.folded, func(p []byte) error {
		var e AuditEntry
		if err := json.Unmarshal(p, &e); err != nil {
			return fmt.Errorf("audit journal %s: a record at or after offset %d does not decode: %w", j.path, j.folded, err)
		}
		j.unfolded = append(j.unfolded, e)
		return nil
	})
	if err != nil {
		f.Close()
		return nil, err
	}
	if fi, err := f.Stat(); err == nil && fi.Size() > end {
		if err := f.Truncate(end); err != nil {
			f.Close()
			return nil, fmt.Errorf("audit journal: %w", err)
		}
	}
	j.end = end
	if err := j.fold(db); err != nil {
		f.Close()
		return nil, err
	}
	return j, nil
}

// create starts a new, empty journal file of generation gen, replacing
// the current one, and makes it durable.
func (j *auditJournal) create(gen uint64) error {
	tmp := j.path + ".new"
	f, err := os.OpenFile(tmp, os.O_RDWR|os.O_CREATE|os.O_TRUNC, 0o600)
	if err != nil {
		return fmt.Errorf("audit journal: %w", err)
	}
	hdr := binary.BigEndian.AppendUint64([]byte(auditJournalMagic), gen)
	if _, err = f.Write(hdr); err == nil {
		err = f.Sync()
	}
	if err == nil {
		err = os.Rename(tmp, j.path)
	}
	if err == nil {
		err = syncDir(filepath.Dir(j.path))
	}
	if err != nil {
		f.Close()
		os.Remove(tmp)
		return fmt.Errorf("audit journal: %w", err)
	}
	if j.f != nil {
		j.f.Close()
	}
	j.f, j.gen = f, gen
	j.end, j.folded = int64(len(hdr)), int64(len(hdr))
	return nil
}

func syncDir(dir string) error {
	d, err := os.Open(dir)
	if err != nil {
		return err
	}
	defer d.Close()
	return d.Sync()
}

// scan reads the records from off and calls fn with each payload; it returns the offset after the last whole record. Records end
// at the file's end or at the first one whose length or checksum does not
// hold (a torn append).
func (j *auditJournal) scan(off int64, fn func([]byte) error) (int64, error) {
	fi, err := j.f.Stat()
	if err != nil {
		return 0, fmt.Errorf("audit journal: %w", err)
	}
	r := io.NewSectionReader(j.f, off, fi.Size()-off)
	var hdr [8]byte
	var payload []byte
	for {
		if _, err := io.ReadFull(r, hdr[:]); err != nil {
			return off, nil // the end, or a torn header
		}
		n := binary.LittleEndian.Uint32(hdr[:4])
		if n == 0 || n > maxAuditRecord {
			return off, nil
		}
		if cap(payload) < int(n) {
			payload = make([]byte, n)
		}
		payload = payload[:n]
		if _, err := io.ReadFull(r, payload); err != nil || crc32.Checksum(payload, castagnoli) != binary.LittleEndian.Uint32(hdr[4:]) {
			return off, nil
		}
		if err := fn(payload); err != nil {
			return off, err
		}
		off += 8 + int64(n)
	}
}

// append writes the group's entries as one write and syncs it. On an
// error the journal is not written again.
func (j *auditJournal) append(group []*auditWait) error {
	if j.broken != nil {
		return j.broken
	}
	if j.pending() >= auditJournalMaxPending {
		return fmt.Errorf("audit journal: %d bytes not folded into the catalog (folds fail)", j.pending())
	}
	b := j.buf[:0]
	for _, w := range group {
		p, err := json.Marshal(auditRecordOf(w.e))
		if err != nil {
			return err
		}
		if len(p) > maxAuditRecord {
			return fmt.Errorf("audit journal: an entry of %d bytes, over %d", len(p), maxAuditRecord)
		}
		b = binary.LittleEndian.AppendUint32(b, uint32(len(p)))
		b = binary.LittleEndian.AppendUint32(b, crc32.Checksum(p, castagnoli))
		b = append(b, p...)
	}
	j.buf = b
	_, err := j.f.WriteAt(b, j.end)
	if err == nil {
		err = j.f.Sync() // fsync(2)
	}
	if err != nil {
		// What reached the file is not trusted after a failed write or
		// sync; cut it if that still works, and stop appending.
		j.f.Truncate(j.end)
		j.broken = fmt.Errorf("audit journal: %w", err)
		return j.broken
	}
	j.end += int64(len(b))
	for _, w := range group {
		j.unfolded = append(j.unfolded, w.e)
	}
	return nil
}

// auditRecordOf is e as the journal keeps it: everything but the ID, with
// the clipping and defaults appendAudit applies.
func auditRecordOf(e AuditEntry) AuditEntry {
	e.ID = ""
	e.At = e.At.UTC()
	return e
}

// pending is the size of the records not yet folded.
func (j *auditJournal) pending() int64 { return j.end - j.folded }

// fold moves the records not yet folded into the audit bucket, with the
// journal's new folded offset, in one transaction; then, past
// auditJournalRotate bytes, starts a new file. The caller holds j.mu.
func (j *auditJournal) fold(db *metaDB) error {
	if j.end > j.folded {
		err := db.Update(func(tx *bolt.Tx) error {
			for _, e := range j.unfolded {
				if err := appendAudit(tx, e); err != nil {
					return err
				}
			}
			return tx.Bucket(bucketMeta).Put(auditJournalMeta, j.mark())
		})
		if err != nil {
			return fmt.Errorf("audit journal: folding: %w", err)
		}
		j.folded = j.end
		clear(j.unfolded)
		j.unfolded = j.unfolded[:0]
	}
	if j.end > auditJournalRotate && j.broken == nil {
		return j.create(j.gen + 1)
	}
	return nil
}

// mark is the journal's place as the meta key holds it: the generation
// and the offset folded up to, big-endian.
func (j *auditJournal) mark() []byte {
	return binary.BigEndian.AppendUint64(binary.BigEndian.AppendUint64(nil, j.gen), uint64(j.end))
}

// foldNow folds what is pending, for a reader of the trail.
func (j *auditJournal) foldNow(db *metaDB) error {
	if j == nil {
		return nil
	}
	j.mu.Lock()
	defer j.mu.Unlock()
	return j.fold(db)
}

// close folds what is pending and closes the file.
func (j *auditJournal) close(db *metaDB) error {
	if j == nil {
		return nil
	}
	j.mu.Lock()
	defer j.mu.Unlock()
	err := j.fold(db)
	if j.f != nil {
		err = errors.Join(err, j.f.Close())
		j.f = nil
	}
	return err
}
