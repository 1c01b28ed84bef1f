package server

import (
	"sync"

	"github.com/hashicorp/golang-lru/v2/simplelru"
)

// Bounds of the summaries kept for the next request.
const (
	summaryCacheBytes = 16 << 20 // all entries together
	summaryCacheEntry = 4 << 20  // a larger one is read (and decoded) per request
	summaryCacheCount = 64
)

// summaryCache keeps the stored summaries last served: as stored (gzip,
// for clients that take it) and decompressed (for the others, which would
// otherwise cost a decompression per request). Entries are keyed by the
// dataset, the version's number and its snapshot id (the answer's ETag),
// so a kept summary is the one stored with that snapshot. The zero value
// is ready; it holds at most summaryCacheBytes.
type summaryCache struct {
	mu    sync.Mutex
	lru   *simplelru.LRU[string, []byte]
	bytes int
}

func (c *summaryCache) get(key string) ([]byte, bool) {
	c.mu.Lock()
	defer c.mu.Unlock()
	if c.lru == nil {
		return nil, false
	}
	return c.lru.Get(key)
}

// put keeps b (which no one may change afterwards) under key, dropping the
// least recently served entries past the bound.
func (c *summaryCache) put(key string, b []byte) {
	if len(b) > summaryCacheEntry {
		return
	}
	c.mu.Lock()
	defer c.mu.Unlock()
	if c.lru == nil {
		c.lru, _ = simplelru.NewLRU(summaryCacheCount, func(_ string, v []byte) { c.bytes -= len(v) })
	}
	if c.lru.Contains(key) {
		return
	}
	c.lru.Add(key, b)
	c.bytes += len(b)
	for c.bytes > summaryCacheBytes {
		c.lru.RemoveOldest()
	}
}
