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

// versionMemo keeps decoded version records beside the stored bytes they
// were decoded from. A record read again is compared byte for byte with
// what is stored now and, only if equal, handed out as a deep copy: a
// changed record (published, retracted, migrated) is decoded afresh, so
// the memory can never answer with anything but what is stored. Reading
// a version record is the main cost of a request for a stored summary.
type versionMemo struct {
	once sync.Once
	c    *lru.Cache[string, memoVersion]
}

type memoVersion struct {
	raw []byte
	v   Version
}

// decode returns the version record stored under key as raw.
func (m *versionMemo) decode(key, raw []byte) (Version, error) {
	m.once.Do(func() { m.c, _ = lru.New[string, memoVersion](memoVersions) })
	if e, ok := m.c.Get(string(key)); ok && bytes.Equal(e.raw, raw) {
		return e.v.clone(), nil
	}
	var v Version
	if err := json.Unmarshal(raw, &v); err != nil {
		return Version{}, fmt.Errorf("catalog: %s: %w", key, err)
	}
	m.c.Add(string(key), memoVersion{raw: bytes.Clone(raw), v: v.clone()})
	return v, nil
}

// get decodes the version record under key of b, or ErrNotFound naming
// what.
func (m *versionMemo) get(b *bolt.Bucket, key []byte, what string) (Version, error) {
	raw := b.Get(key)
	if raw == nil {
		return Version{}, fmt.Errorf("%s: %w", what, ErrNotFound)
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
	if v.Events != nil {
		e := *v.Events
		e.Sites = slices.Clone(v.Events.Sites)
		c.Events = &e
	}
	return c
}

func clonePtr[T any](p *T) *T {
	if p == nil {
		return nil
	}
	x := *p
	return &x
}

// memoManifests bounds how many decoded manifests a Store keeps (least
// recently used first out), and memoManifestBytes the stored size of one
// it keeps: a manifest grows with its version's files (about 400 bytes a
// file), so the memory holds at most a few MiB.
const (
	memoManifests     = 32
	memoManifestBytes = 128 << 10
)

// manifestMemo keeps decoded manifests beside the stored bytes they were
// decoded from, as versionMemo keeps version records: a manifest read
// again is compared byte for byte with what is stored and handed out as a
// deep copy. A manifest is stored once under its snapshot id, the SHA-256
// of its bytes, and never changes; the comparison keeps the memory honest
// even so. Decoding the manifest was the main cost of a download's
// lookups.
type manifestMemo struct {
	once sync.Once
	c    *lru.Cache[string, memoManifest]
}

type memoManifest struct {
	raw []byte
	m   Manifest
}

// decode returns the manifest stored under key as raw; a nil memo only
// decodes.
func (m *manifestMemo) decode(key string, raw []byte) (Manifest, error) {
	if m == nil {
		var man Manifest
		err := json.Unmarshal(raw, &man)
		return man, err
	}
	m.once.Do(func() { m.c, _ = lru.New[string, memoManifest](memoManifests) })
	if e, ok := m.c.Get(key); ok && bytes.Equal(e.raw, raw) {
		return e.m.clone(), nil
	}
	var man Manifest
	if err := json.Unmarshal(raw, &man); err != nil {
		return Manifest{}, err
	}
	if len(raw) <= memoManifestBytes {
		m.c.Add(key, memoManifest{raw: bytes.Clone(raw), m: man.clone()})
	}
	return man, nil
}

// clone is a deep copy of a manifest. TestManifestCloneIsDeep fails when
// a field that holds a reference is added and not copied here.
func (m Manifest) clone() Manifest {
	c := m
	l := &c.Lineage
	l.From, l.To = clonePtr(m.Lineage.From), clonePtr(m.Lineage.To)
	l.Sites = slices.Clone(m.Lineage.Sites)
	if m.Lineage.Events != nil {
		e := *m.Lineage.Events
		e.Sites = slices.Clone(e.Sites)
		l.Events = &e
	}
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
