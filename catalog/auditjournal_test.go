package catalog

import (
	"context"
	"encoding/binary"
	"flag"
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"sync"
	"testing"
	"time"
)

// readAudit returns every entry of the trail, oldest first.
func readAudit(t *testing.T, s *Store) []AuditEntry {
	t.Helper()
	var out []AuditEntry
	if err := s.EachAudit(context.Background(), AuditFilter{Limit: MaxAuditPage}, func(e AuditEntry) error {
		out = append(out, e)
		return nil
	}); err != nil {
		t.Fatal(err)
	}
	return out
}

// downloadsIn counts the entries of action version.download by detail,
// failing on any detail seen twice.
func downloadsIn(t *testing.T, entries []AuditEntry) map[string]bool {
	t.Helper()
	seen := map[string]bool{}
	for _, e := range entries {
		if e.Action != "version.download" {
			continue
		}
		if seen[e.Detail] {
			t.Errorf("entry %q is in the trail twice", e.Detail)
		}
		seen[e.Detail] = true
	}
	return seen
}

func recordDownload(t testing.TB, s *Store, i int) {
	t.Helper()
	ctx := WithActor(context.Background(), Actor{Subject: "reader", TokenID: "jti-1", Role: "member", From: "127.0.0.1"})
	if err := s.RecordAudit(ctx, AuditEntry{Action: "version.download", Project: "p", Dataset: "d", Target: "p/d@1", Detail: fmt.Sprintf("file %04d", i)}); err != nil {
		t.Fatal(err)
	}
}

// The journal is invisible to readers: entries recorded through it read
// back whole, in time order, among the entries changes write directly.
// Entries of one instant (to the nanosecond) are ordered by their keys'
// sequence, which the fold gives journaled entries: the test's clock ticks.
func TestAuditJournalReadsAsBefore(t *testing.T) {
	var mu sync.Mutex
	at := time.Date(2026, 6, 1, 12, 0, 0, 0, time.UTC)
	e := newEnv(t, func(o *Options) {
		o.Now = func() time.Time {
			mu.Lock()
			defer mu.Unlock()
			at = at.Add(time.Millisecond)
			return at
		}
	})
	ctx := context.Background()
	for i := range 40 {
		recordDownload(t, e.s, i)
		if i == 20 {
			if _, err := e.s.CreateProject(ctx, "p", "", "admin"); err != nil {
				t.Fatal(err)
			}
		}
	}
	got := readAudit(t, e.s)
	if len(got) != 41 {
		t.Fatalf("%d entries, want 41 (40 downloads and the project's creation)", len(got))
	}
	for i := 1; i < len(got); i++ {
		if got[i].At.Before(got[i-1].At) || got[i].ID <= got[i-1].ID {
			t.Errorf("entry %d (%s, %s) before entry %d (%s, %s)", i, got[i].At, got[i].ID, i-1, got[i-1].At, got[i-1].ID)
		}
	}
	if got[21].Action != "project.create" {
		t.Errorf("entry 21 is %s, want project.create between download 20 and 21", got[21].Action)
	}
	d := got[0]
	if d.By != "reader" || d.TokenID != "jti-1" || d.Role != "member" || d.From != "127.0.0.1" || d.Outcome != OutcomeOK || d.Detail != "file 0000" || d.ID == "" {
		t.Errorf("first download read back as %+v", d)
	}
	// Read again (nothing pending): the same trail.
	if again := readAudit(t, e.s); len(again) != len(got) || again[40].ID != got[40].ID {
		t.Errorf("a second read gives %d entries", len(again))
	}
	// Closed and reopened: the same trail, and the journal is empty.
	e.open(t, nil)
	if again := readAudit(t, e.s); len(again) != len(got) {
		t.Errorf("after reopening: %d entries, want %d", len(again), len(got))
	}
	if j := e.s.audits.j; j.pending() != 0 {
		t.Errorf("%d bytes left unfolded after reopening", j.pending())
	}
}

// auditChild records downloads into the store, folds half way (a reader
// of the trail), records more, says so and waits to be killed.
func auditChild(s *Store) {
	for i := range 300 {
		if i == 150 {
			if _, _, err := s.AuditPage(context.Background(), AuditFilter{Limit: 1}); err != nil {
				os.Exit(20)
			}
		}
		ctx := WithActor(context.Background(), Actor{Subject: "reader"})
		if err := s.RecordAudit(ctx, AuditEntry{Action: "version.download", Target: "p/d@1", Detail: fmt.Sprintf("file %04d", i)}); err != nil {
			os.Exit(21)
		}
	}
	os.Stdout.WriteString("recorded\n")
	select {}
}

// A process killed after RecordAudit returned keeps every entry, once:
// those folded before the kill and those only in the journal. A torn
// append at the end (a kill in the middle of a write) is cut on reopening.
func TestAuditJournalSurvivesKill(t *testing.T) {
	e := newEnv(t, nil)
	e.s.Close()
	e.s = nil
	cmd := crashChildCmd(t, e, "audit")
	startChildUntil(t, cmd, "recorded")
	if err := cmd.Process.Kill(); err != nil {
		t.Fatal(err)
	}
	cmd.Wait()

	// A torn record after the last whole one: a length and checksum
	// whose payload never reached the file.
	jpath := e.dbPath + "-audit"
	f, err := os.OpenFile(jpath, os.O_WRONLY|os.O_APPEND, 0)
	if err != nil {
		t.Fatal(err)
	}
	torn := binary.LittleEndian.AppendUint32(nil, 200)
	torn = binary.LittleEndian.AppendUint32(torn, 0xdeadbeef)
	torn = append(torn, `{"id":"","at":"2026`...)
	if _, err := f.Write(torn); err != nil {
		t.Fatal(err)
	}
	f.Close()

	e.open(t, nil)
	seen := downloadsIn(t, readAudit(t, e.s))
	if len(seen) != 300 {
		t.Fatalf("%d downloads in the trail after the kill, want 300", len(seen))
	}
	// The journal goes on after the cut.
	for i := 300; i < 305; i++ {
		recordDownload(t, e.s, i)
	}
	e.open(t, nil)
	if seen := downloadsIn(t, readAudit(t, e.s)); len(seen) != 305 {
		t.Errorf("%d downloads after five more and a reopening, want 305", len(seen))
	}
}

// Many concurrent entries fold as they pass auditJournalFoldAt and the
// file starts anew past auditJournalRotate: every entry is in the trail
// once, and the file stays small.
func TestAuditJournalFoldsAndRotates(t *testing.T) {
	e := newEnv(t, nil)
	const writers, each = 8, 700
	var wg sync.WaitGroup
	for w := range writers {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for i := range each {
				recordDownload(t, e.s, w*each+i)
			}
		}()
	}
	wg.Wait()
	j := e.s.audits.j
	j.mu.Lock()
	gen, end := j.gen, j.end
	j.mu.Unlock()
	if gen < 2 {
		t.Errorf("journal generation %d after %d entries: it never started anew", gen, writers*each)
	}
	if end > auditJournalRotate+auditJournalFoldAt+maxAuditRecord {
		t.Errorf("journal of %d bytes", end)
	}
	if seen := downloadsIn(t, readAudit(t, e.s)); len(seen) != writers*each {
		t.Errorf("%d downloads in the trail, want %d", len(seen), writers*each)
	}
}

// A journal file that is not one (its header does not match) stops the
// catalog from opening, naming the file, rather than losing entries.
func TestAuditJournalBadHeader(t *testing.T) {
	e := newEnv(t, nil)
	e.s.Close()
	e.s = nil
	if err := os.WriteFile(e.dbPath+"-audit", []byte("not a journal at all, just text"), 0o600); err != nil {
		t.Fatal(err)
	}
	_, err := Open(e.dbPath, e.blobs, e.options(nil))
	if err == nil || !strings.Contains(err.Error(), e.dbPath+"-audit") {
		t.Fatalf("Open with a damaged journal: %v; want an error naming the file", err)
	}
}

var writeAuditJournal = flag.Bool("write-audit-journal", false, "rewrite testdata/auditjournal/catalog.db-audit from this build")

// The journal's format is stored bytes: a journal left unfolded by this
// release (testdata/auditjournal, three entries written by 0d2ccf7, then
// copied before the catalog closed) is read by today's code.
func TestAuditJournalFormatKept(t *testing.T) {
	fixture := filepath.Join("testdata", "auditjournal", "catalog.db-audit")
	e := newEnv(t, nil)
	if *writeAuditJournal {
		for i := range 3 {
			recordDownload(t, e.s, i)
		}
		b, err := os.ReadFile(e.dbPath + "-audit")
		if err != nil {
			t.Fatal(err)
		}
		if err := os.MkdirAll(filepath.Dir(fixture), 0o755); err != nil {
			t.Fatal(err)
		}
		if err := os.WriteFile(fixture, b, 0o644); err != nil {
			t.Fatal(err)
		}
		return
	}
	e.s.Close()
	e.s = nil
	b, err := os.ReadFile(fixture)
	if err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(e.dbPath+"-audit", b, 0o600); err != nil {
		t.Fatal(err)
	}
	e.open(t, nil)
	got := readAudit(t, e.s)
	if len(got) != 3 {
		t.Fatalf("%d entries from the stored journal, want 3", len(got))
	}
	for i, g := range got {
		want := AuditEntry{ID: g.ID, At: time.Date(2026, 6, 1, 12, 0, 0, 0, time.UTC), By: "reader", TokenID: "jti-1", Role: "member", From: "127.0.0.1",
			Action: "version.download", Project: "p", Dataset: "d", Target: "p/d@1", Outcome: OutcomeOK, Detail: fmt.Sprintf("file %04d", i)}
		if g != want {
			t.Errorf("entry %d: %+v, want %+v", i, g, want)
		}
	}
}

// When folds fail (here: the bbolt file is closed under the store), the
// journal takes entries up to auditJournalMaxPending, each durable, and
// then refuses them with the bucket's own error: memory stays bounded and
// no answered entry is lost; a store opened afterwards folds them all.
func TestAuditJournalBoundedWhenFoldsFail(t *testing.T) {
	e := newEnv(t, nil)
	s := e.s
	if err := s.db.Close(); err != nil {
		t.Fatal(err)
	}
	ctx := WithActor(context.Background(), Actor{Subject: "reader"})
	answered := 0
	var refused error
	for i := 0; i < 100_000; i++ {
		refused = s.RecordAudit(ctx, AuditEntry{Action: "version.download", Target: "p/d@1", Detail: fmt.Sprintf("file %06d", i)})
		if refused != nil {
			break
		}
		answered++
	}
	if refused == nil {
		t.Fatal("100000 entries taken with every fold failing")
	}
	j := s.audits.j
	if j.pending() > auditJournalMaxPending+maxAuditRecord || len(j.unfolded) != answered {
		t.Errorf("%d bytes and %d entries pending after %d answered", j.pending(), len(j.unfolded), answered)
	}
	if answered < 1000 {
		t.Errorf("only %d entries answered before the refusal", answered)
	}
	j.f.Close()
	e.s = nil
	e.open(t, nil)
	if seen := downloadsIn(t, readAudit(t, e.s)); len(seen) != answered {
		t.Errorf("%d downloads in the trail, want the %d answered", len(seen), answered)
	}
}
