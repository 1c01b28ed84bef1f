package catalog

import (
	"bytes"
	"encoding/json"
	"fmt"
	"maps"
	"slices"
	"sync"

	lru "github.com/hashicorp/golang-lru/v2"
	bolt "go.etcd.io/bbolt"
)

// memoVersions bounds how many decoded version records a Store keeps
// (least recently used first out); a record is about a kilobyte.
const memoVersions = 1024

// memoManifests bounds how many decoded manifests a Store keeps, and
// memoManifestBytes the stored size of one it keeps: a manifest grows with
// its version's files (about 400 bytes a file), so the memory holds at
// most a few MiB. Decoding the manifest was the main cost of a download's
// lookups.
const (
	memoManifests     = 32
	memoManifestBytes = 128 << 10
)

// decodedMemo keeps decoded JSON records (version records, manifests)
// beside the stored bytes they were decoded from. A record read again is
// compared byte for byte with what is stored now and, only if equal,
// handed out as a deep copy: a changed record (published, retracted,
// migrated) is decoded afresh, so the memory can never answer with
// anything but what is stored. Reading a version record is the main cost
// of a request for a stored summary. A nil memo only decodes.
type decodedMemo[T cloner[T]] struct {
	size     int // records kept, least recently used first out
	maxBytes int // a record stored in more bytes is not kept; 0: no bound
	once     sync.Once
	c        *lru.Cache[string, memoEntry[T]]
}

// cloner is a record type with a deep copy.
type cloner[T any] interface{ clone() T }

type memoEntry[T any] struct {
	raw []byte
	x   T
}

func newDecodedMemo[T cloner[T]](size, maxBytes int) *decodedMemo[T] {
	return &decodedMemo[T]{size: size, maxBytes: maxBytes}
}

// decode returns the record stored under key as raw.
func (m *decodedMemo[T]) decode(key, raw []byte) (T, error) {
	var x T
	if m == nil {
		err := json.Unmarshal(raw, &x)
		return x, err
	}
	m.once.Do(func() { m.c, _ = lru.New[string, memoEntry[T]](m.size) })
	if e, ok := m.c.Get(string(key)); ok && bytes.Equal(e.raw, raw) {
		return e.x.clone(), nil
	}
	if err := json.Unmarshal(raw, &x); err != nil {
		return x, fmt.Errorf("catalog: %s: %w", key, err)
	}
	if m.maxBytes == 0 || len(raw) <= m.maxBytes {
		m.c.Add(string(key), memoEntry[T]{raw: bytes.Clone(raw), x: x.clone()})
	}
	return x, nil
}

// get decodes the record under key of b, or ErrNotFound naming what.
func (m *decodedMemo[T]) get(b *bolt.Bucket, key []byte, what string) (T, error) {
	raw := b.Get(key)
	if raw == nil {
		var x T
		return x, fmt.Errorf("%s: %w", what, ErrNotFound)
	}
	return m.decode(key, raw)
}

// clone is a deep copy of a version record (its manifest is not part of
// the record and is not copied). TestVersionCloneIsDeep fails when a
// field that holds a reference is added and not copied here.
func (v Version) clone() Version {
	c := v
	c.PublishedAt = clonePtr(v.PublishedAt)
	c.RetractedAt = clonePtr(v.RetractedAt)
	c.RiskOverride = clonePtr(v.RiskOverride)
	c.Quality.Score = clonePtr(v.Quality.Score)
	if v.Scores != nil {
		c.Scores = maps.Clone(v.Scores)
		for k, s := range c.Scores {
			c.Scores[k] = clonePtr(s)
		}
	}
	c.Events = v.Events.clone()
	return c
}

// clone is a deep copy of c; nil for nil.
func (c *EventCounts) clone() *EventCounts {
	if c == nil {
		return nil
	}
	x := *c
	x.Sites = slices.Clone(c.Sites)
	if c.ChangeWindow != nil {
		w := *c.ChangeWindow
		x.ChangeWindow = &w
	}
	return &x
}

// withManifestClone is a deep copy of v with a deep copy of its manifest.
func (v *Version) withManifestClone() *Version {
	c := v.clone()
	if v.Manifest != nil {
		m := v.Manifest.clone()
		c.Manifest = &m
	}
	return &c
}

func clonePtr[T any](p *T) *T {
	if p == nil {
		return nil
	}
	x := *p
	return &x
}

// clone is a deep copy of a manifest. TestManifestCloneIsDeep fails when
// a field that holds a reference is added and not copied here.
func (m Manifest) clone() Manifest {
	c := m
	l := &c.Lineage
	l.From, l.To = clonePtr(m.Lineage.From), clonePtr(m.Lineage.To)
	l.Sites = slices.Clone(m.Lineage.Sites)
	l.Events = m.Lineage.Events.clone()
	c.Files = slices.Clone(m.Files)
	for i := range c.Files {
		f := &c.Files[i]
		f.DerivedFrom = clonePtr(f.DerivedFrom)
		if f.Attributes != nil {
			a := slices.Clone(*f.Attributes)
			f.Attributes = &a
		}
	}
	c.CaseTable = clonePtr(m.CaseTable)
	c.Uploads = slices.Clone(m.Uploads)
	if m.Quality != nil {
		q := *m.Quality
		q.Score = clonePtr(q.Score)
		c.Quality = &q
	}
	if m.CaseAttributes != nil {
		t := *m.CaseAttributes
		t.Columns = slices.Clone(t.Columns)
		c.CaseAttributes = &t
	}
	c.Disclosure = clonePtr(m.Disclosure)
	return c
}
