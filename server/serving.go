package server

import (
	"sync"

	"github.com/hashicorp/golang-lru/v2/simplelru"
)

// Bounds of the plain summaries kept for clients that do not take gzip.
const (
	plainSummaryBytes = 16 << 20 // all entries together
	plainSummaryEntry = 4 << 20  // a larger summary is decoded per request
	plainSummaryCount = 64
)

// summaryCache keeps the plain JSON of the summaries last served to a
// client that does not take gzip. Summaries are stored gzip-compressed
// and sent as stored to a client that takes gzip; any other client would
// otherwise cost a decompression per request. Entries are keyed by the
// version's snapshot id (its ETag), so a kept summary is the one stored
// with that snapshot. The zero value is ready; it holds at most
// plainSummaryBytes.
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
	if len(b) > plainSummaryEntry {
		return
	}
	c.mu.Lock()
	defer c.mu.Unlock()
	if c.lru == nil {
		c.lru, _ = simplelru.NewLRU(plainSummaryCount, func(_ string, v []byte) { c.bytes -= len(v) })
	}
	if c.lru.Contains(key) {
		return
	}
	c.lru.Add(key, b)
	c.bytes += len(b)
	for c.bytes > plainSummaryBytes {
		c.lru.RemoveOldest()
	}
}
