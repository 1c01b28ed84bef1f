package catalog

import (
	"sync"
	"sync/atomic"

	bolt "go.etcd.io/bbolt"
)

// metaDB is a Store's handle on its bbolt file. It offers read
// transactions and read-write transactions, nothing else, and counts the
// read-write ones as they end: the count is how answers read earlier are
// known to be still what is stored (readMemo). bbolt holds the file under
// an exclusive lock, so this process is its only writer and the count sees
// every write.
type metaDB struct {
	bolt   *bolt.DB
	writes atomic.Uint64
}

// View runs fn in a read transaction.
func (d *metaDB) View(fn func(*bolt.Tx) error) error { return d.bolt.View(fn) }

// Update runs fn in a read-write transaction and counts it once the
// transaction has ended, committed or not.
func (d *metaDB) Update(fn func(*bolt.Tx) error) error {
	defer d.writes.Add(1)
	return d.bolt.Update(fn)
}

// Close closes the file.
func (d *metaDB) Close() error { return d.bolt.Close() }

// readAt is the write count a read begins at: an answer read in a
// transaction begun after readAt was taken is at least as new as every
// write counted by then.
func (d *metaDB) readAt() uint64 { return d.writes.Load() }

// readMemo keeps answers read from the metadata file for the requests
// that repeat them (a token's standing, the version "latest" names),
// each tagged with the write count its read began at. An answer is
// handed out only while the count is unchanged: a write of any kind
// (publish, retract, revoke, an audit fold) empties the memo, so it never
// answers with less than what a read would. At most max answers are kept;
// when full, it starts again empty.
type readMemo[K comparable, V any] struct {
	max int
	mu  sync.Mutex
	at  uint64
	m   map[K]V
}

// get returns the answer kept for k if it was read at write count at.
func (r *readMemo[K, V]) get(at uint64, k K) (V, bool) {
	r.mu.Lock()
	defer r.mu.Unlock()
	if r.at != at || r.m == nil {
		var zero V
		return zero, false
	}
	v, ok := r.m[k]
	return v, ok
}

// put keeps v for k, read in a transaction begun after write count at was
// taken. An answer older than those kept is dropped; a newer one replaces
// them all.
func (r *readMemo[K, V]) put(at uint64, k K, v V) {
	r.mu.Lock()
	defer r.mu.Unlock()
	switch {
	case at < r.at:
		return
	case at > r.at || r.m == nil || len(r.m) >= r.max:
		r.at, r.m = at, make(map[K]V)
	}
	r.m[k] = v
}
