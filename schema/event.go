package schema

import (
	"crypto/sha256"
	"encoding/binary"
	"fmt"
	"strings"
	"time"
)

// Version is the version of the common service-event schema that this
// package implements. It is recorded in every snapshot manifest.
const Version = "1"

// EventType is what happened to a case at an instant.
type EventType string

// The event types of schema v1, in the order a case usually passes them.
const (
	Arrival   EventType = "arrival"   // the case entered the system
	Enqueue   EventType = "enqueue"   // the case joined a queue
	Start     EventType = "start"     // service began
	Complete  EventType = "complete"  // service ended
	Abandon   EventType = "abandon"   // the case left a queue unserved
	Transfer  EventType = "transfer"  // the case moved to another queue or site
	Departure EventType = "departure" // the case left the system
)

// EventTypes lists every valid event type in schema order.
var EventTypes = []EventType{Arrival, Enqueue, Start, Complete, Abandon, Transfer, Departure}

// Valid reports whether t is one of the schema's event types.
func (t EventType) Valid() bool {
	switch t {
	case Arrival, Enqueue, Start, Complete, Abandon, Transfer, Departure:
		return true
	}
	return false
}

// ParseEventType returns the event type named s, or an error.
func ParseEventType(s string) (EventType, error) {
	t := EventType(s)
	if !t.Valid() {
		return "", fmt.Errorf("unknown event type %q", s)
	}
	return t, nil
}

// Event is one row of the service-event schema v1: one thing that happened
// to one case at one instant. The struct tags give its Parquet layout:
// PLAIN or dictionary (RLE_DICTIONARY) encodings only, which every
// mainstream Parquet reader decodes (DEVELOPERS.md has the measurements);
// the identifier fields hold pseudonyms once an event has passed anonymize.
type Event struct {
	Site       string    `parquet:"site,dict" json:"site"`
	CaseID     string    `parquet:"case_id,dict" json:"case_id"`
	SubjectID  string    `parquet:"subject_id,optional,dict" json:"subject_id,omitempty"`
	ResourceID string    `parquet:"resource_id,optional,dict" json:"resource_id,omitempty"`
	Type       EventType `parquet:"event_type,dict" json:"event_type"`
	Activity   string    `parquet:"activity,optional,dict" json:"activity,omitempty"`
	Queue      string    `parquet:"queue,optional,dict" json:"queue,omitempty"`
	OccurredAt time.Time `parquet:"occurred_at,timestamp(microsecond:utc)" json:"occurred_at"`
	Priority   string    `parquet:"priority,optional,dict" json:"priority,omitempty"`
	Channel    string    `parquet:"channel,optional,dict" json:"channel,omitempty"`
	Outcome    string    `parquet:"outcome,optional,dict" json:"outcome,omitempty"`
	EventID    string    `parquet:"event_id,optional,plain" json:"event_id,omitempty"`
	// InstanceID names one activity instance within its case: the start
	// and the complete of one execution of an activity share it, so two
	// executions of one activity that overlap pair apart. An identifier
	// from the partner's system, pseudonymized like case_id.
	InstanceID string `parquet:"instance_id,optional,plain" json:"instance_id,omitempty"`

	// Attrs holds the values of the profile's event attributes
	// (Profile.EventAttributes order), generalized at ingest, joined by
	// NUL (JoinAttrs; no value holds one): "" is NULL, integers in
	// decimal, dates as YYYY-MM-DD. Empty for an event without attributes.
	// One string keeps Event comparable. The snapshot writer stores them as
	// typed columns after the schema's; they are not part of the event's
	// identity (DEVELOPERS.md, "Event attributes").
	Attrs string `parquet:"-" json:"-"`

	// Line is the 1-based line (CSV/TSV record start or JSON Lines line) of
	// the source file the event came from. It is not stored in snapshots.
	Line int64 `parquet:"-" json:"-"`

	// Row is the event's 0-based position in the snapshot file that holds
	// it: set by the snapshot reader, and by whatever writes the file as
	// it writes it. A snapshot keeps its upload's order among events of
	// one instant, so Row orders a case's events at one instant as the
	// partner's file had them (cases.Less). It is not stored.
	Row int64 `parquet:"-" json:"-"`
}

// JoinAttrs joins event attribute values into Event.Attrs.
func JoinAttrs(vals []string) string { return strings.Join(vals, "\x00") }

// AttrValue returns the i-th of e's n event attribute values ("" when
// NULL or absent).
func (e *Event) AttrValue(i int) string {
	s := e.Attrs
	for ; i > 0; i-- {
		j := strings.IndexByte(s, 0)
		if j < 0 {
			return ""
		}
		s = s[j+1:]
	}
	if j := strings.IndexByte(s, 0); j >= 0 {
		return s[:j]
	}
	return s
}

// Field names one column of the schema.
type Field string

// The fields of schema v1.
const (
	FieldSite       Field = "site"
	FieldCaseID     Field = "case_id"
	FieldSubjectID  Field = "subject_id"
	FieldResourceID Field = "resource_id"
	FieldEventType  Field = "event_type"
	FieldActivity   Field = "activity"
	FieldQueue      Field = "queue"
	FieldOccurredAt Field = "occurred_at"
	FieldPriority   Field = "priority"
	FieldChannel    Field = "channel"
	FieldOutcome    Field = "outcome"
	FieldEventID    Field = "event_id"
	FieldInstanceID Field = "instance_id"
)

// Fields lists every field in schema order (the field table's).
var Fields = fieldNames()

// Required reports whether every event must carry a value for f.
func (f Field) Required() bool {
	s := f.Spec()
	return s != nil && s.Required
}

// Identifier reports whether f holds an identifier that is pseudonymized at
// ingest and whose raw value must never appear in storage, logs or errors.
// instance_id is one: a partner's activity-instance id is a record number
// of its own system (an order, an appointment), which links back to the
// person as readily as a case id does; pairing needs only equality.
func (f Field) Identifier() bool {
	s := f.Spec()
	return s != nil && s.Identifier
}

// Value returns the text value of field f of e; occurred_at is formatted as
// RFC 3339 with microseconds in UTC (every event has one: the zero
// time.Time is 0001-01-01T00:00:00Z, a valid instant).
func (e *Event) Value(f Field) string {
	if s := f.Spec(); s != nil {
		return s.get(e)
	}
	return ""
}

// SetValue sets field f of e from text; occurred_at cannot be set this way
// because its parsing depends on a profile (see Profile).
func (e *Event) SetValue(f Field, v string) {
	if s := f.Spec(); s != nil {
		s.Set(e, v)
	}
}

// Reason is a stable code for why a row was rejected. Codes are part of
// the report format: never rename one.
type Reason string

// Row rejection reasons.
const (
	ReasonMissingRequired  Reason = "missing_required"  // a required field is empty
	ReasonUnknownCode      Reason = "unknown_code"      // a coded value has no mapping and no default
	ReasonBadTimestamp     Reason = "bad_timestamp"     // occurred_at does not parse
	ReasonNonexistentLocal Reason = "nonexistent_local" // wall-clock time skipped by a daylight-saving change
	ReasonAmbiguousLocal   Reason = "ambiguous_local"   // wall-clock time repeated by a daylight-saving change
	ReasonFieldCount       Reason = "field_count"       // the row has a different number of fields than the header
	ReasonMalformedRow     Reason = "malformed_row"     // the row cannot be parsed (bad quoting, bad JSON), or repeats the header
	ReasonBadValue         Reason = "bad_value"         // a value has the wrong type (e.g. a JSON object)
)

// Rejection says why one source row was not accepted. Message and Text
// never hold the raw value of an identifier column.
type Rejection struct {
	Line    int64  `json:"line"`             // 1-based source line
	Column  string `json:"column,omitempty"` // source column name, when one is at fault
	Field   Field  `json:"field,omitempty"`  // schema field, when one is at fault
	Reason  Reason `json:"reason"`
	Message string `json:"message"`
	// Text is the offending value as read (trimmed, clipped to 40 bytes),
	// for a non-identifier field only: the unknown code, the timestamp
	// that does not parse. It is left empty when the value holds one of
	// the row's own identifier values (a column slip; see Reader).
	Text string `json:"text,omitempty"`
	// Row identifies the rejected row by its source text (see RowDigest);
	// zero when the reader could not tell it. Never encoded.
	Row RowDigest `json:"-"`
}

// RowDigest is the SHA-256 of a rejected row's source text, so that the
// same broken row sent again in a later file can be told from another:
// over the record's fields for CSV and TSV (each prefixed by its length,
// so quoting does not matter), over the line for JSON Lines and for a CSV
// line that does not parse, over the event's mapped values and its own
// attributes for XES. It is a digest of raw values, identifiers among
// them: it stays in memory, and what is stored of it is keyed first
// (anonymize.Pseudonymizer.RowKey).
type RowDigest [32]byte

// IsZero reports whether d is the zero digest (row not identified).
func (d RowDigest) IsZero() bool { return d == RowDigest{} }

// digestFields is the RowDigest of a record's fields.
func digestFields(rec []string) RowDigest {
	h := sha256.New()
	var n [binary.MaxVarintLen64]byte
	for _, f := range rec {
		h.Write(n[:binary.PutUvarint(n[:], uint64(len(f)))])
		h.Write([]byte(f))
	}
	var d RowDigest
	h.Sum(d[:0])
	return d
}

func (r Rejection) String() string {
	s := fmt.Sprintf("line %d", r.Line)
	if r.Column != "" {
		s += fmt.Sprintf(", column %q", r.Column)
	}
	if r.Field != "" {
		s += fmt.Sprintf(" (%s)", r.Field)
	}
	return s + ": " + string(r.Reason) + ": " + r.Message
}
