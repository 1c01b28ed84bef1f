package cli

import (
	"context"
	"io"
	"log/slog"
	"sync"
	"time"
)

// lineBuffer holds the server's log lines a moment and writes them
// together: serve logs a line per request, and a write(2) for each cost
// about a tenth of a small answer's CPU (DEVELOPERS.md, stop 39). Lines
// leave when logFlushBytes are waiting, logFlushDelay after the first
// waiting one, at once with a record of level warn or above
// (warnFlusher), and at Flush. It is safe for concurrent use.
type lineBuffer struct {
	mu    sync.Mutex
	w     io.Writer
	buf   []byte
	timer *time.Timer
	armed bool // a timed flush is due
}

// How long and how much a log line may wait.
const (
	logFlushDelay = 100 * time.Millisecond
	logFlushBytes = 32 << 10
)

func newLineBuffer(w io.Writer) *lineBuffer { return &lineBuffer{w: w} }

// Write keeps p (one record: slog's handlers write each in one call).
func (b *lineBuffer) Write(p []byte) (int, error) {
	b.mu.Lock()
	defer b.mu.Unlock()
	b.buf = append(b.buf, p...)
	if len(b.buf) >= logFlushBytes {
		return len(p), b.flushLocked()
	}
	if !b.armed {
		b.armed = true
		if b.timer == nil {
			b.timer = time.AfterFunc(logFlushDelay, func() { b.Flush() })
		} else {
			b.timer.Reset(logFlushDelay)
		}
	}
	return len(p), nil
}

// Flush writes what is waiting.
func (b *lineBuffer) Flush() error {
	b.mu.Lock()
	defer b.mu.Unlock()
	return b.flushLocked()
}

func (b *lineBuffer) flushLocked() error {
	if b.armed {
		b.armed = false
		b.timer.Stop()
	}
	if len(b.buf) == 0 {
		return nil
	}
	_, err := b.w.Write(b.buf)
	b.buf = b.buf[:0]
	if cap(b.buf) > 4*logFlushBytes {
		b.buf = nil // one long burst does not stay held
	}
	return err
}

// warnFlusher writes a record of level warn or above at once: a failure
// is seen when it happens, and is not lost with the process.
type warnFlusher struct {
	slog.Handler
	b *lineBuffer
}

func (h warnFlusher) Handle(ctx context.Context, r slog.Record) error {
	err := h.Handler.Handle(ctx, r)
	if r.Level >= slog.LevelWarn {
		if ferr := h.b.Flush(); err == nil {
			err = ferr
		}
	}
	return err
}

func (h warnFlusher) WithAttrs(as []slog.Attr) slog.Handler {
	return warnFlusher{h.Handler.WithAttrs(as), h.b}
}

func (h warnFlusher) WithGroup(name string) slog.Handler {
	return warnFlusher{h.Handler.WithGroup(name), h.b}
}
