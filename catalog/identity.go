package catalog

import (
	"bytes"
	"context"
	"fmt"
	"hash/maphash"
	"strings"
	"time"

	"golang.org/x/text/language"
	"golang.org/x/text/message"

	bolt "go.etcd.io/bbolt"

	"github.com/flowcat-catalog/flowcat/schema"
)

// Identity says when two events are the same event, so that a version
// holds each event once.
type Identity string

// Event identities.
const (
	// IdentityContent: two events are the same when every field is equal
	// after pseudonymization, the instant (to the microsecond) included.
	// A re-sent event is recognised; a re-sent event with any field
	// changed is a new event, and the old one stays.
	IdentityContent Identity = "content"
	// IdentityEventID: two events are the same when their site and
	// event_id are equal; the profile declares the id stable
	// (fields.event_id.stable: true). A re-sent event with other content
	// is a change, settled by the dataset's ChangePolicy. Events without
	// an id fall back to their content.
	IdentityEventID Identity = "event_id"
)

// IdentityOf returns the event identity a profile gives its events.
func IdentityOf(p *schema.Profile) Identity {
	if m, ok := p.Fields[schema.FieldEventID]; ok && m.Stable && m.Column != "" {
		return IdentityEventID
	}
	return IdentityContent
}

// ChangePolicy says what an append does with an event whose stable
// event_id the latest version holds with other content.
type ChangePolicy string

// Change policies.
const (
	// ChangesRefuse rejects the upload, naming the lines and fields that
	// differ; nothing is stored. The default.
	ChangesRefuse ChangePolicy = "refuse"
	// ChangesCorrect takes the new content as a correction: the new
	// version holds it and no longer holds the old event.
	ChangesCorrect ChangePolicy = "correct"
)

// ParseChangePolicy returns the policy named s; empty means ChangesRefuse.
func ParseChangePolicy(s string) (ChangePolicy, error) {
	switch p := ChangePolicy(s); p {
	case "":
		return ChangesRefuse, nil
	case ChangesRefuse, ChangesCorrect:
		return p, nil
	}
	return "", fmt.Errorf("change policy %q: want refuse or correct: %w", truncate(s, 40), ErrInvalid)
}

// SetChangePolicy sets a dataset's change policy; uploads that start
// after it use the new one. An unknown policy fails with ErrInvalid, an
// unknown dataset with ErrNotFound.
func (s *Store) SetChangePolicy(ctx context.Context, project, dataset string, p ChangePolicy, by string) (*Dataset, error) {
	p, err := ParseChangePolicy(string(p))
	if err != nil {
		return nil, err
	}
	var d Dataset
	ref := project + "/" + dataset
	err = s.db.Update(func(tx *bolt.Tx) error {
		b := tx.Bucket(bucketDatasets)
		if err := getJSON(b, []byte(ref), &d, "dataset "+ref); err != nil {
			return err
		}
		if err := writableTx(tx, project, dataset); err != nil {
			return err
		}
		d.Changes = p
		if err := putJSON(b, []byte(ref), &d); err != nil {
			return err
		}
		return auditCtx(ctx, tx, s.opt.Now(), by, "dataset.changes", fmt.Sprintf("%s (%s)", ref, p))
	})
	if err != nil {
		return nil, err
	}
	s.opt.Logger.Info("dataset change policy set", "dataset", ref, "changes", p, "by", by)
	return &d, nil
}

// changePolicy is the dataset's policy, refuse when unset.
func (d *Dataset) changePolicy() ChangePolicy {
	if d.Changes == "" {
		return ChangesRefuse
	}
	return d.Changes
}

// DefaultIDWindow is how far apart in time an event and its changed
// re-send may lie and still be recognised as one event under a stable
// event_id (the same span quality uses to find reused ids).
const DefaultIDWindow = 24 * 3600 * 1e6 // microseconds

// EventCounts says what became of an upload's valid events. Read =
// New + Held + Copies + Changed. Changed events are stored (replacing
// the old ones, Removed of them) under ChangesCorrect, and make the upload
// rejected under ChangesRefuse.
type EventCounts struct {
	Identity Identity `json:"identity"`
	Read     int64    `json:"read"`         // valid events in the upload
	New      int64    `json:"new"`          // events the latest version did not hold: stored
	Held     int64    `json:"already_held"` // events the latest version holds already: not stored again
	Copies   int64    `json:"copies"`       // exact copies of an earlier event of the same upload: stored once
	Changed  int64    `json:"changed"`      // held ids re-sent with other content
	Removed  int64    `json:"removed"`      // old events the corrections removed
	// ChangeWindow, when set, says that held events were looked for
	// within a narrower span than 24 h from some instant on.
	ChangeWindow *ChangeWindow `json:"change_window,omitempty"`
	// Sites holds the same counts per site (on uploads, not in lineage).
	Sites []SiteEventCounts `json:"sites,omitempty"`
}

// ChangeWindow says that an upload with stable event ids found more
// events within 24 h either way of its events (held ones, on an append,
// and its own whose id repeats) than fit its bound (Bytes,
// Options.ChangeWindowBytes) and looked at fewer: from its event at From
// on, an event's other content was looked for only Seconds either way.
// Exact re-sends and copies are still found (0 s looks at the instant
// itself); a change or conflict that moved an event's instant by more than
// Seconds may have been stored as a new event, the other kept.
type ChangeWindow struct {
	From    time.Time `json:"from"`
	Seconds float64   `json:"seconds"`
	Bytes   int64     `json:"bytes"`
}

// String says it in words: "changes looked for within 4h3m23s either
// way from 2026-01-05T00:00:00Z (the events kept reached 48 MiB)".
func (w *ChangeWindow) String() string {
	size := printer.Sprintf("%d bytes", w.Bytes)
	if w.Bytes >= 1<<20 {
		size = printer.Sprintf("%d MiB", w.Bytes>>20)
	}
	return fmt.Sprintf("changes looked for within %s either way from %s (the events kept reached %s)",
		time.Duration(w.Seconds*float64(time.Second)).Round(time.Second), w.From.Format(time.RFC3339), size)
}

// SiteEventCounts are one site's EventCounts.
type SiteEventCounts struct {
	Site    string `json:"site"`
	Read    int64  `json:"read"`
	New     int64  `json:"new"`
	Held    int64  `json:"already_held"`
	Copies  int64  `json:"copies"`
	Changed int64  `json:"changed"`
}

// HeldShare is the share of the read events that were already held.
func (c *SiteEventCounts) HeldShare() float64 {
	if c.Read == 0 {
		return 0
	}
	return float64(c.Held) / float64(c.Read)
}

var printer = message.NewPrinter(language.English)

// Sentence says what an upload did in one line, such as "v12: 41,003 new
// events, 287,110 already held, 0 changed"; version 0 means no version
// was made.
func (c *EventCounts) Sentence(version int) string {
	var b strings.Builder
	if version > 0 {
		fmt.Fprintf(&b, "v%d: ", version)
	}
	b.WriteString(printer.Sprintf("%d new %s, %d already held, %d changed", c.New, plural(c.New, "event", "events"), c.Held, c.Changed))
	if c.Removed > 0 {
		b.WriteString(printer.Sprintf(" (%d old %s replaced)", c.Removed, plural(c.Removed, "event", "events")))
	}
	if c.Copies > 0 {
		b.WriteString(printer.Sprintf(", %d %s within the file stored once", c.Copies, plural(c.Copies, "copy", "copies")))
	}
	if w := c.ChangeWindow; w != nil {
		b.WriteString("; " + w.String())
	}
	return b.String()
}

func plural(n int64, one, many string) string {
	if n == 1 {
		return one
	}
	return many
}

// Sentence says what became of an upload in one line: for an accepted
// one its counts ("v12: 41,003 new events, 287,110 already held, 0
// changed"), for a duplicate the version that already holds its events;
// empty for a rejected or failed upload, whose error says why.
func (u *Upload) Sentence() string {
	switch {
	case u.Status == UploadAccepted && u.Events != nil:
		return u.Events.Sentence(u.Version)
	case u.Status != UploadDuplicate:
		return ""
	case u.Version == 0:
		return "nothing to store, and the dataset has no version yet"
	case u.Events == nil:
		return fmt.Sprintf("v%d already holds this file: the same bytes were sent before; nothing stored", u.Version)
	}
	rejected := ""
	if r := u.Report; r != nil && r.Rows.Rejected > 0 {
		rejected = printer.Sprintf("; %d %s rejected", r.Rows.Rejected, plural(r.Rows.Rejected, "row", "rows")) + u.RejectedNote()
	}
	return fmt.Sprintf("v%d already holds every event: %s%s; nothing stored", u.Version, u.Events.Sentence(0), rejected)
}

// RejectedNote says, after a count of rejected rows, how many of them an
// upload of the version rejected before (RejectedBefore); "" for none.
func (u *Upload) RejectedNote() string {
	switch n := u.RejectedBefore; {
	case n == 0:
		return ""
	case n == 1 && u.Report != nil && u.Report.Rows.Rejected == 1:
		return " (rejected before: sent again)"
	case u.Report != nil && n == u.Report.Rows.Rejected:
		return " (all rejected before: sent again)"
	default:
		return printer.Sprintf(" (%d of them rejected before: sent again)", n)
	}
}

// appendIdentity appends to b what makes e itself under id: its site and
// event id, or (content identity, or no id) its window record, every text
// field and the instant. Equal identities append equal bytes.
func appendIdentity(b []byte, id Identity, e *schema.Event) []byte {
	if id == IdentityEventID && e.EventID != "" {
		b = append(b, 1)
		b = append(b, e.Site...)
		b = append(b, 0)
		return append(b, e.EventID...)
	}
	return appendWindowRecord(append(b, 2), e)
}

// identityHash hashes e's identity under id (appendIdentity) with seed;
// buf is scratch space.
func identityHash(seed maphash.Seed, buf *[]byte, id Identity, e *schema.Event) uint64 {
	*buf = appendIdentity((*buf)[:0], id, e)
	return maphash.Bytes(seed, *buf)
}

// identityHashRec is identityHash of e, whose window record
// (appendWindowRecord) rec is at hand: a content identity's bytes are a
// mark and that record, copied rather than built again.
func identityHashRec(seed maphash.Seed, buf *[]byte, id Identity, e *schema.Event, rec []byte) uint64 {
	if id == IdentityEventID && e.EventID != "" {
		return identityHash(seed, buf, id, e)
	}
	*buf = append(append((*buf)[:0], 2), rec...)
	return maphash.Bytes(seed, *buf)
}

// sameIdentityRecord reports whether an event kept in a window, as its
// window record r (held.go), and e, whose record is rec, are one event
// under id: the same site and event_id where the kept one has an
// event_id, else the same content.
func sameIdentityRecord(id Identity, r []byte, e *schema.Event, rec []byte) bool {
	if id == IdentityEventID {
		if eid := windowText(r, windowEventID); eid != "" {
			return eid == e.EventID && windowText(r, windowSite) == e.Site
		}
	}
	return sameContent(r, rec)
}

// sameContent reports whether two window records (appendWindowRecord,
// held.go) hold events equal in every schema field, as schema.SameFields
// says: the instant to the microsecond; the source line is not a field.
func sameContent(r, rec []byte) bool { return bytes.Equal(r, rec) }

// differingFields lists, in schema order, the fields in which a and b
// differ.
func differingFields(a, b *schema.Event) []schema.Field {
	var out []schema.Field
	for _, f := range schema.Fields {
		if f == schema.FieldOccurredAt {
			if a.OccurredAt.UnixMicro() != b.OccurredAt.UnixMicro() {
				out = append(out, f)
			}
			continue
		}
		if a.Value(f) != b.Value(f) {
			out = append(out, f)
		}
	}
	return out
}
