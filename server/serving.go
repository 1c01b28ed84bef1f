package server

import (
	"net/http"
	"strconv"
	"sync"

	"github.com/hashicorp/golang-lru/v2/simplelru"
	"github.com/labstack/echo/v4"
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

// connKey is the request context's key of its connection (set by the
// http.Server of HTTPServer).
type connKey struct{}

// sendStored answers with b, stored JSON, and its Content-Length. An
// answer of at most oneSendMax bytes is sent whole (oneSend).
func sendStored(c echo.Context, b []byte) error {
	c.Response().Header().Set(echo.HeaderContentLength, strconv.Itoa(len(b)))
	if len(b) <= oneSendMax {
		defer oneSend(c)()
	}
	return c.Blob(http.StatusOK, echo.MIMEApplicationJSON, b)
}

// oneSendMax is the largest answer oneSend holds back: past one loopback
// segment (64 KiB) the header's own segment is a small share, and holding
// back measured slower (DEVELOPERS.md, stop 35).
const oneSendMax = 64 << 10

// oneSend holds back the answer a handler writes until it is whole, so
// that its header and body leave in one write rather than as net/http's
// buffer (4 KiB: the header and the body's first bytes) and then the
// rest: half the sends, segments and wake-ups for a small stored summary
// (sendConn). Call the function it returns when the answer is written: it
// flushes and sends. Without a connection of Listener in the request's
// context (HTTPServer puts it there), such as a TLS one, it does nothing.
func oneSend(c echo.Context) func() {
	conn, _ := c.Request().Context().Value(connKey{}).(*sendConn)
	if conn == nil {
		return func() {}
	}
	conn.hold()
	return func() {
		http.NewResponseController(c.Response().Writer).Flush() //nolint:errcheck // writes fail on the connection, seen by net/http
		conn.release()                                          //nolint:errcheck // as the flush: net/http sees the failed connection
	}
}
