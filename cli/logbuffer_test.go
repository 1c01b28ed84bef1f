package cli

import (
	"bytes"
	"encoding/json"
	"fmt"
	"log/slog"
	"strings"
	"sync"
	"testing"
	"time"
)

// lockedBuffer is a bytes.Buffer safe for the flush timer's goroutine.
type lockedBuffer struct {
	mu     sync.Mutex
	b      bytes.Buffer
	writes int
}

func (l *lockedBuffer) Write(p []byte) (int, error) {
	l.mu.Lock()
	defer l.mu.Unlock()
	l.writes++
	return l.b.Write(p)
}

func (l *lockedBuffer) String() string {
	l.mu.Lock()
	defer l.mu.Unlock()
	return l.b.String()
}

// TestLineBuffer: info lines wait (at most logFlushDelay) and leave
// together, whole and in order; a warning leaves at once with what came
// before it; Flush writes the rest; lines from many goroutines are never
// cut into each other (each decodes as JSON).
func TestLineBuffer(t *testing.T) {
	out := &lockedBuffer{}
	lb := newLineBuffer(out)
	log := slog.New(warnFlusher{slog.NewJSONHandler(lb, nil), lb})
	log.Info("request", "n", 1)
	log.Info("request", "n", 2)
	if out.String() != "" {
		t.Fatalf("info lines written at once: %q", out.String())
	}
	deadline := time.Now().Add(5 * time.Second)
	for strings.Count(out.String(), "\n") < 2 {
		if time.Now().After(deadline) {
			t.Fatal("info lines not written after the flush delay")
		}
		time.Sleep(10 * time.Millisecond)
	}
	if out.writes != 1 {
		t.Errorf("two lines in %d writes, want 1", out.writes)
	}
	log.Info("request", "n", 3)
	log.With("part", "x").Warn("failed", "n", 4)
	if s := out.String(); !strings.Contains(s, `"n":3`) || !strings.Contains(s, `"n":4`) || strings.Index(s, `"n":3`) > strings.Index(s, `"n":4`) {
		t.Fatalf("a warning did not leave at once after the line before it:\n%s", s)
	}

	var wg sync.WaitGroup
	for g := range 8 {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for i := range 2000 {
				log.Info("request", "g", g, "i", i, "pad", strings.Repeat("x", i%300))
			}
		}()
	}
	wg.Wait()
	if err := lb.Flush(); err != nil {
		t.Fatal(err)
	}
	lines := strings.Split(strings.TrimSuffix(out.String(), "\n"), "\n")
	if len(lines) != 4+8*2000 {
		t.Fatalf("%d lines, want %d", len(lines), 4+8*2000)
	}
	last := map[float64]float64{}
	for _, l := range lines[4:] {
		var m map[string]any
		if err := json.Unmarshal([]byte(l), &m); err != nil {
			t.Fatalf("a line cut or joined: %v: %.80q", err, l)
		}
		g, i := m["g"].(float64), m["i"].(float64)
		if prev, ok := last[g]; ok && i != prev+1 {
			t.Fatalf("goroutine %v: line %v after %v", g, i, prev)
		}
		last[g] = i
	}
	if fmt.Sprint(len(last)) != "8" {
		t.Errorf("lines of %d goroutines", len(last))
	}
}
