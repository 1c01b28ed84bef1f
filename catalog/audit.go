package catalog

import (
	"bytes"
	"context"
	"encoding/binary"
	"encoding/hex"
	"encoding/json"
	"fmt"
	"io"
	"log/slog"
	"runtime"
	"strings"
	"sync"
	"time"

	bolt "go.etcd.io/bbolt"
)

// The audit trail is append-only: entries are written in the transaction
// of the change they record (so that a change and its entry commit or fail
// together), or, for reads and refusals (RecordAudit), through the audit
// journal, and nothing rewrites or deletes them. Keys are time-ordered:
// the entry's instant (Unix nanoseconds, big-endian) then the bucket's
// sequence, so a cursor walks the trail in time order and a time filter
// seeks straight to its start.
//
// Retention: entries are kept for the life of the catalog; flowcat never
// prunes them. An entry is about 280 bytes of JSON, so a catalog taking a
// thousand audited requests a day grows by about 100 MB a year. An
// operator who must bound it exports the trail (JSON Lines) to an archive.
//
// Entries name projects, datasets, versions, upload ids, token ids (jti),
// key ids and token subjects; never a token, a file name or an identifier
// value from the data.

// Actor is who does something: the subject and id (jti) of the token, its
// role, and the client's address. The server puts it in the request's
// context (WithActor); the catalog copies it into the audit entries the
// request writes.
type Actor struct {
	Subject string
	TokenID string
	Role    string
	From    string
}

type actorKey struct{}

// WithActor returns ctx carrying a.
func WithActor(ctx context.Context, a Actor) context.Context {
	return context.WithValue(ctx, actorKey{}, a)
}

// ActorFrom returns the actor ctx carries, if any.
func ActorFrom(ctx context.Context) (Actor, bool) {
	a, ok := ctx.Value(actorKey{}).(Actor)
	return a, ok
}

// Audit outcomes.
const (
	OutcomeOK     = "ok"     // the action happened
	OutcomeDenied = "denied" // refused: the token may not do it
)

// AuditEntry is one line of the catalog's audit trail.
type AuditEntry struct {
	// ID is the entry's key, hex: time-ordered, and the cursor of a page.
	ID      string    `json:"id"`
	At      time.Time `json:"at"`
	By      string    `json:"by"`            // token subject (or the command line's operator)
	TokenID string    `json:"jti,omitempty"` // the token's id, when by a token
	Role    string    `json:"role,omitempty"`
	From    string    `json:"from,omitempty"` // client address
	Action  string    `json:"action"`         // e.g. upload.accepted, version.publish, token.issue
	Project string    `json:"project,omitempty"`
	Dataset string    `json:"dataset,omitempty"` // the dataset's name within Project
	Target  string    `json:"target"`            // what was acted on
	Outcome string    `json:"outcome"`           // ok or denied
	Detail  string    `json:"detail,omitempty"`  // a reason, the fields changed
}

// maxAuditText bounds the target and detail of an entry (reasons are 500
// bytes at most; a denied request's path is clipped).
const maxAuditText = 600

// audit appends an entry for an action that happened, its project and
// dataset read from target ("project", "project/dataset...").
func audit(tx *bolt.Tx, now time.Time, by, action, target string) error {
	p, d := scopeOf(action, target)
	return appendAudit(tx, AuditEntry{At: now, By: by, Action: action, Project: p, Dataset: d, Target: target, Outcome: OutcomeOK})
}

// auditCtx is audit with the actor of ctx: its token id, role and address
// join the entry when its subject is by.
func auditCtx(ctx context.Context, tx *bolt.Tx, now time.Time, by, action, target string) error {
	p, d := scopeOf(action, target)
	return appendAudit(tx, withActor(ctx, AuditEntry{At: now, By: by, Action: action, Project: p, Dataset: d, Target: target, Outcome: OutcomeOK}))
}

func withActor(ctx context.Context, e AuditEntry) AuditEntry {
	if a, ok := ActorFrom(ctx); ok && (e.By == "" || e.By == a.Subject) {
		e.By, e.TokenID, e.Role, e.From = a.Subject, a.TokenID, a.Role, a.From
	}
	return e
}

// scopeOf reads the project and dataset an entry is about from its
// target, for actions on projects, datasets, versions and uploads.
func scopeOf(action, target string) (project, dataset string) {
	kind, _, _ := strings.Cut(action, ".")
	switch kind {
	case "project", "dataset", "version", "upload", "profile":
	default:
		return "", ""
	}
	ref, _, _ := strings.Cut(target, " ")
	ref, _, _ = strings.Cut(ref, "@")
	p, rest, _ := strings.Cut(ref, "/")
	d, _, _ := strings.Cut(rest, "/")
	if kind == "project" {
		return p, ""
	}
	return p, d
}

func clip(s string) string {
	if len(s) <= maxAuditText {
		return s
	}
	return s[:maxAuditText] + "..."
}

// appendAudit writes e under the next time-ordered key.
func appendAudit(tx *bolt.Tx, e AuditEntry) error {
	b := tx.Bucket(bucketAudit)
	seq, err := b.NextSequence()
	if err != nil {
		return err
	}
	k := make([]byte, 16)
	binary.BigEndian.PutUint64(k, uint64(e.At.UnixNano()))
	binary.BigEndian.PutUint64(k[8:], seq)
	e.ID = hex.EncodeToString(k)
	e.At = e.At.UTC()
	e.Target, e.Detail = clip(e.Target), clip(e.Detail)
	if e.Outcome == "" {
		e.Outcome = OutcomeOK
	}
	return putJSON(b, k, e)
}

// RecordAudit appends e to the trail, with the actor of ctx; ID and, when
// zero, At are set here. The server records reads (downloads, exports)
// and refused requests through it; changes are audited by the catalog
// methods that make them.
func (s *Store) RecordAudit(ctx context.Context, e AuditEntry) error {
	if e.Action == "" {
		return fmt.Errorf("audit: an action is required: %w", ErrInvalid)
	}
	if e.At.IsZero() {
		e.At = s.opt.Now()
	}
	e = withActor(ctx, e)
	return s.audits.record(s.db, e)
}

// auditGroup commits RecordAudit's entries in groups, one append to the
// audit journal and one fsync (auditjournal.go; without a journal that
// works, one transaction) for the entries that arrived while the previous
// group was committing: a download is audited before its first byte is sent, and
// one commit each would bound a server's downloads to its disk's fsyncs
// a second. A lone entry is committed at once, with no wait for company.
// Each caller returns once its own entry is committed, or with the error
// of the transaction that held it.
type auditGroup struct {
	mu      sync.Mutex
	pending []*auditWait
	busy    bool // a leader is committing; the next one is woken by it
	// j, when open, takes the groups (auditjournal.go); log tells of a
	// fold that failed (its entries stay in the journal, durable).
	j   *auditJournal
	log *slog.Logger
}

type auditWait struct {
	e    AuditEntry
	done chan auditDone
}

type auditDone struct {
	err  error
	lead bool // commit the pending group (this entry among them)
}

func (g *auditGroup) record(db *metaDB, e AuditEntry) error {
	w := &auditWait{e: e, done: make(chan auditDone, 1)}
	g.mu.Lock()
	g.pending = append(g.pending, w)
	lead := !g.busy
	g.busy = true
	g.mu.Unlock()
	if !lead {
		if d := <-w.done; !d.lead {
			return d.err
		}
	}
	g.gather()
	g.mu.Lock()
	group := g.pending
	g.pending = nil
	g.mu.Unlock()
	if testHookAuditGroup != nil {
		testHookAuditGroup(len(group))
	}
	err := g.commit(db, group)
	for _, x := range group {
		if x != w {
			x.done <- auditDone{err: err}
		}
	}
	// Hand the lead to the first entry that came during the commit, so
	// that no caller commits for others for longer than one group.
	g.mu.Lock()
	if len(g.pending) > 0 {
		g.pending[0].done <- auditDone{lead: true}
	} else {
		g.busy = false
	}
	g.mu.Unlock()
	return err
}

// gather lets the goroutines ready to run before the leader (requests a
// moment from their own entries) join its group: it yields while the
// group grows, at most auditGatherYields times. Yielding waits for no
// timer: a lone entry is committed after one yield that finds nothing
// else to run. Under wrk's 16 connections downloading one file, groups
// went from 3.9 to 8.2 entries a sync (DEVELOPERS.md, stop 36).
func (g *auditGroup) gather() {
	n := 0
	for i := range auditGatherYields {
		g.mu.Lock()
		m := len(g.pending)
		g.mu.Unlock()
		if i > 0 && m == n {
			return
		}
		n = m
		runtime.Gosched()
	}
}

// testHookAuditGroup, when set by a test, is told each group's size.
var testHookAuditGroup func(int)

// auditGatherYields bounds the leader's yields before it commits.
const auditGatherYields = 4

// commit makes a group durable: appended to the journal, folding it into
// the bucket when enough is pending, or, without a journal that works, in
// a transaction of its own.
func (g *auditGroup) commit(db *metaDB, group []*auditWait) error {
	if j := g.j; j != nil {
		// A failing append or fold is told once, until one succeeds again.
		j.mu.Lock()
		err := j.append(group)
		if err != nil && !j.appendFailing {
			g.log.Error("audit journal: append failed; audit entries go to the catalog one transaction each", "err", err)
		}
		j.appendFailing = err != nil
		if err == nil && j.pending() >= auditJournalFoldAt {
			ferr := j.fold(db)
			if ferr != nil && !j.foldFailing {
				g.log.Error("audit journal: fold failed; its entries stay in the journal and later folds retry", "err", ferr)
			}
			j.foldFailing = ferr != nil
		}
		j.mu.Unlock()
		if err == nil {
			return nil
		}
	}
	return db.Update(func(tx *bolt.Tx) error {
		for _, x := range group {
			if err := appendAudit(tx, x.e); err != nil {
				return err
			}
		}
		return nil
	})
}

// AuditFilter selects audit entries. Zero fields select everything.
type AuditFilter struct {
	From, To time.Time // half-open [From, To) on At
	Subject  string    // exact
	// Action is an action ("version.publish") or, ending in ".", a kind
	// of actions ("token.").
	Action  string
	Project string
	Dataset string // within Project
	Outcome string
	// After is the ID of the last entry of the previous page.
	After string
	// Limit bounds a page (default DefaultAuditPage, at most MaxAuditPage).
	Limit int
}

// Audit pages.
const (
	DefaultAuditPage = 100
	MaxAuditPage     = 1000
)

func (f AuditFilter) match(e *AuditEntry) bool {
	switch {
	case f.Subject != "" && e.By != f.Subject:
		return false
	case f.Action != "" && !(e.Action == f.Action || strings.HasSuffix(f.Action, ".") && strings.HasPrefix(e.Action, f.Action)):
		return false
	case f.Project != "" && e.Project != f.Project:
		return false
	case f.Dataset != "" && e.Dataset != f.Dataset:
		return false
	case f.Outcome != "" && e.Outcome != f.Outcome:
		return false
	case !f.To.IsZero() && !e.At.Before(f.To):
		return false
	}
	return true
}

// Validate checks a filter, setting the default limit.
func (f *AuditFilter) Validate() error {
	if f.Limit == 0 {
		f.Limit = DefaultAuditPage
	}
	if f.Limit < 1 || f.Limit > MaxAuditPage {
		return fmt.Errorf("audit: limit %d: want 1 to %d: %w", f.Limit, MaxAuditPage, ErrInvalid)
	}
	if f.After != "" {
		if k, err := hex.DecodeString(f.After); err != nil || len(k) != 16 {
			return fmt.Errorf("audit: after %q: want the id of an entry (32 hex digits): %w", f.After, ErrInvalid)
		}
	}
	if !f.From.IsZero() && !f.To.IsZero() && !f.To.After(f.From) {
		return fmt.Errorf("audit: from is not before to: %w", ErrInvalid)
	}
	if f.Dataset != "" && f.Project == "" {
		return fmt.Errorf("audit: a dataset filter needs the project: %w", ErrInvalid)
	}
	return nil
}

// AuditPage returns one page of the entries f selects, oldest first, and
// the ID to pass as After for the next page ("" after the last).
func (s *Store) AuditPage(ctx context.Context, f AuditFilter) ([]AuditEntry, string, error) {
	if err := f.Validate(); err != nil {
		return nil, "", err
	}
	if err := s.audits.j.foldNow(s.db); err != nil {
		return nil, "", err
	}
	out := []AuditEntry{}
	next := ""
	err := s.db.View(func(tx *bolt.Tx) error {
		c := tx.Bucket(bucketAudit).Cursor()
		var k, v []byte
		switch {
		case f.After != "":
			after, _ := hex.DecodeString(f.After)
			k, v = c.Seek(after)
			if k != nil && bytes.Equal(k, after) {
				k, v = c.Next()
			}
		case !f.From.IsZero():
			k, v = c.Seek(binary.BigEndian.AppendUint64(nil, uint64(f.From.UnixNano())))
		default:
			k, v = c.First()
		}
		var toKey []byte
		if !f.To.IsZero() {
			toKey = binary.BigEndian.AppendUint64(nil, uint64(f.To.UnixNano()))
		}
		for ; k != nil; k, v = c.Next() {
			if toKey != nil && bytes.Compare(k[:8], toKey) >= 0 {
				break
			}
			var e AuditEntry
			if err := json.Unmarshal(v, &e); err != nil {
				return fmt.Errorf("audit: entry %x: %w", k, err)
			}
			if e.ID == "" { // entries written before entries carried their id
				e.ID = hex.EncodeToString(k)
			}
			if e.Outcome == "" {
				e.Outcome = OutcomeOK
			}
			if e.Project == "" && e.Dataset == "" {
				e.Project, e.Dataset = scopeOf(e.Action, e.Target)
			}
			if !f.From.IsZero() && e.At.Before(f.From) || !f.match(&e) {
				continue
			}
			if len(out) == f.Limit {
				next = out[len(out)-1].ID
				return nil
			}
			out = append(out, e)
		}
		return nil
	})
	if err != nil {
		return nil, "", err
	}
	return out, next, nil
}

// AuditNewest returns the newest entries f selects (f.After is not used),
// newest first, at most f.Limit, and whether older ones exist: a view's
// "latest activity". It reads the trail backwards, so it stops as soon as
// the page is full.
func (s *Store) AuditNewest(ctx context.Context, f AuditFilter) ([]AuditEntry, bool, error) {
	f.After = ""
	if err := f.Validate(); err != nil {
		return nil, false, err
	}
	if err := s.audits.j.foldNow(s.db); err != nil {
		return nil, false, err
	}
	out := []AuditEntry{}
	more := false
	err := s.db.View(func(tx *bolt.Tx) error {
		c := tx.Bucket(bucketAudit).Cursor()
		k, v := c.Last()
		if !f.To.IsZero() {
			toKey := binary.BigEndian.AppendUint64(nil, uint64(f.To.UnixNano()))
			if k, v = c.Seek(toKey); k == nil {
				k, v = c.Last()
			}
			for k != nil && bytes.Compare(k[:8], toKey) >= 0 {
				k, v = c.Prev()
			}
		}
		for n := 0; k != nil; k, v = c.Prev() {
			if n++; n&1023 == 0 {
				if err := ctx.Err(); err != nil {
					return err
				}
			}
			var e AuditEntry
			if err := json.Unmarshal(v, &e); err != nil {
				return fmt.Errorf("audit: entry %x: %w", k, err)
			}
			if e.ID == "" {
				e.ID = hex.EncodeToString(k)
			}
			if e.Outcome == "" {
				e.Outcome = OutcomeOK
			}
			if e.Project == "" && e.Dataset == "" {
				e.Project, e.Dataset = scopeOf(e.Action, e.Target)
			}
			if !f.From.IsZero() && e.At.Before(f.From) {
				break
			}
			if !f.match(&e) {
				continue
			}
			if len(out) == f.Limit {
				more = true
				break
			}
			out = append(out, e)
		}
		return nil
	})
	if err != nil {
		return nil, false, err
	}
	return out, more, nil
}

// EachAudit calls fn with every entry f selects, oldest first, reading a
// page at a time (f.Limit is the page size), so that memory and the read
// transaction stay small however long the trail.
func (s *Store) EachAudit(ctx context.Context, f AuditFilter, fn func(AuditEntry) error) error {
	for {
		page, next, err := s.AuditPage(ctx, f)
		if err != nil {
			return err
		}
		for _, e := range page {
			if err := fn(e); err != nil {
				return err
			}
		}
		if next == "" {
			return nil
		}
		if err := ctx.Err(); err != nil {
			return err
		}
		f.After = next
	}
}

// Audit returns the whole audit trail, oldest first.
func (s *Store) Audit(ctx context.Context) ([]AuditEntry, error) {
	var out []AuditEntry
	err := s.EachAudit(ctx, AuditFilter{Limit: MaxAuditPage}, func(e AuditEntry) error {
		out = append(out, e)
		return nil
	})
	return out, err
}

// WriteAuditJSONL writes the entries f selects to w as JSON Lines (one
// JSON object per line, RFC 8259 text separated by "\n"), oldest first.
func (s *Store) WriteAuditJSONL(ctx context.Context, w io.Writer, f AuditFilter) (int, error) {
	n := 0
	enc := json.NewEncoder(w)
	err := s.EachAudit(ctx, f, func(e AuditEntry) error {
		n++
		return enc.Encode(e)
	})
	return n, err
}
