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
