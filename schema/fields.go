package schema

import (
	"reflect"
	"strings"
	"unsafe"
)

// FieldSpec describes one field of schema v1. fieldTable is the one table
// of the schema's fields: their order (the Parquet column order of a
// snapshot, the CSV header order of an export), whether they are required
// or identifiers, the data dictionary's text and the JSON Schema's
// property, and how to read and set the field of an Event. The Parquet
// column's physical layout is the parquet tag of the Event field GoName.
// A new field is added to Event and to this table, and nowhere else.
type FieldSpec struct {
	Name       Field  // Parquet column, CSV header, JSON member
	GoName     string // the field of Event holding it
	Required   bool   // every event carries a value
	Identifier bool   // pseudonymized at ingest; see Field.Identifier
	Type       string // the data dictionary's type column
	Doc        string // the data dictionary's description

	// Desc is the property's description in the published JSON Schema
	// document. Its other members follow from the field: every property is
	// a string; occurred_at has the date-time format, event_type the enum of
	// EventTypes, and any other required field a minimum length of 1.
	Desc string

	// off is the offset in Event of a text field (a string, or a type
	// whose underlying type is string); text is false for occurred_at.
	// Set from GoName at init: offsets instead of accessor functions keep
	// an event on its caller's stack.
	off  uintptr
	text bool
}

func init() {
	typ := reflect.TypeFor[Event]()
	n := 0
	for i := range fieldTable {
		f := &fieldTable[i]
		sf, ok := typ.FieldByName(f.GoName)
		if !ok {
			panic("schema: the field table names Event." + f.GoName + ", which does not exist")
		}
		if sf.Type.Kind() == reflect.String {
			f.off, f.text = sf.Offset, true
			textOffsets[n] = sf.Offset
			n++
		}
	}
}

// textOffsets are the offsets of the text fields in schema order.
var textOffsets [TextFieldCount]uintptr

// str is the text field at offset off of e.
func str(e *Event, off uintptr) *string { return (*string)(unsafe.Add(unsafe.Pointer(e), off)) }

func (f *FieldSpec) get(e *Event) string {
	if !f.text {
		return e.OccurredAt.UTC().Format(occurredAtLayout)
	}
	return *str(e, f.off)
}

const dictString = "string (UTF-8)"

var fieldTable = [...]FieldSpec{
	{Name: FieldSite, GoName: "Site", Required: true, Type: dictString, Doc: "Partner site the event was recorded at.",
		Desc: "The partner site (clinic, hospital department, call centre) where the event happened."},
	{Name: FieldCaseID, GoName: "CaseID", Required: true, Identifier: true, Type: dictString, Doc: "The case (visit, call, ticket) the event belongs to.",
		Desc: "Identifier of the case (visit, call, ticket) the event belongs to. A pseudonym in snapshots."},
	{Name: FieldSubjectID, GoName: "SubjectID", Identifier: true, Type: dictString, Doc: "The person the case is about.",
		Desc: "Identifier of the person the case is about (patient, caller), when the site provides one. A pseudonym in snapshots."},
	{Name: FieldResourceID, GoName: "ResourceID", Identifier: true, Type: dictString, Doc: "The resource (staff member, room, line) serving the case.",
		Desc: "Identifier of the resource that served the case (staff member, desk, team, department). A pseudonym in snapshots."},
	{Name: FieldEventType, GoName: "Type", Required: true, Type: dictString, Doc: "What happened: one of the event types below.",
		Desc: "What happened: arrival (entered the system), enqueue (joined a queue), start (service began), complete (service ended), abandon (left a queue unserved), transfer (moved to another queue or site), departure (left the system)."},
	{Name: FieldActivity, GoName: "Activity", Type: dictString, Doc: "The activity or service step, as mapped by the profile.",
		Desc: "The site's name for the step or service (for example triage, lab test, billing)."},
	{Name: FieldQueue, GoName: "Queue", Type: dictString, Doc: "The queue the case was in.",
		Desc: "The queue or service line the case waited in or was served from."},
	{Name: FieldOccurredAt, GoName: "OccurredAt", Required: true, Type: "timestamp, microseconds, UTC (Parquet TIMESTAMP(MICROS, UTC))", Doc: "When the event happened.",
		Desc: "The instant the event happened, as an RFC 3339 date-time with an offset (UTC in snapshots)."},
	{Name: FieldPriority, GoName: "Priority", Type: dictString, Doc: "Priority or triage level, as mapped by the profile.",
		Desc: "The site's priority or urgency class of the case at this event."},
	{Name: FieldChannel, GoName: "Channel", Type: dictString, Doc: "How the case reached the service (walk-in, phone, ...).",
		Desc: "How the case reached the service (walk-in, phone, referral, web)."},
	{Name: FieldOutcome, GoName: "Outcome", Type: dictString, Doc: "Outcome of the case or step, as mapped by the profile.",
		Desc: "The site's outcome code for the case or step, when it has one."},
	{Name: FieldEventID, GoName: "EventID", Type: dictString, Doc: "The source system's id of the event, when it has one.",
		Desc: "The site's own identifier of the event row, when it has one; used to spot duplicates."},
	{Name: FieldInstanceID, GoName: "InstanceID", Identifier: true, Type: dictString, Doc: "One execution of an activity within its case: its start and its complete share it.",
		Desc: "Identifier of one activity instance within its case: the start and the complete of one execution of an activity share it, so overlapping executions of the same activity pair apart. A pseudonym in snapshots."},
}

// occurredAtLayout is the text form of occurred_at (Event.Value): RFC 3339
// with microseconds, in UTC.
const occurredAtLayout = "2006-01-02T15:04:05.000000Z"

// FieldSpecs returns the field table, in schema order; the caller gets its
// own copy.
func FieldSpecs() []FieldSpec { return append([]FieldSpec(nil), fieldTable[:]...) }

// Spec returns f's entry of the field table, or nil for a name that is not
// a field.
func (f Field) Spec() *FieldSpec {
	for i := range fieldTable {
		if fieldTable[i].Name == f {
			return &fieldTable[i]
		}
	}
	return nil
}

// fieldNames lists the table's names, in order.
func fieldNames() []Field {
	out := make([]Field, len(fieldTable))
	for i := range fieldTable {
		out[i] = fieldTable[i].Name
	}
	return out
}

// CloneStrings gives e's text fields (every field of the table but
// occurred_at, and Attrs) strings of their own, for an event read into
// buffers its reader reuses.
func (e *Event) CloneStrings() {
	e.CloneTexts()
	e.Attrs = strings.Clone(e.Attrs)
}

// CloneTexts gives e's text fields (every field of the table but
// occurred_at) strings of their own and leaves Attrs as it is, for a
// reader that joins Attrs into a new string already (JoinAttrs).
func (e *Event) CloneTexts() {
	for _, off := range textOffsets {
		p := str(e, off)
		*p = strings.Clone(*p)
	}
}

// TextFieldCount is the number of text fields of schema v1: every field
// but occurred_at.
const TextFieldCount = len(fieldTable) - 1

// Texts returns the values of e's text fields (every field but
// occurred_at) in schema order: what hashes and equality of events cover
// besides the instant. Arrays compare with ==.
func (e *Event) Texts() (t [TextFieldCount]string) {
	for i, off := range textOffsets {
		t[i] = *str(e, off)
	}
	return t
}

// SameFields reports whether a and b are equal in every field of the
// table, the instant compared to the microsecond; Attrs, Line and Row are
// not schema fields.
func SameFields(a, b *Event) bool {
	return a.OccurredAt.UnixMicro() == b.OccurredAt.UnixMicro() && a.Texts() == b.Texts()
}

// Get returns the text value of this field of e (as Event.Value).
func (f *FieldSpec) Get(e *Event) string { return f.get(e) }

// Set sets this field of e from text (as Event.SetValue); it does nothing
// for occurred_at.
func (f *FieldSpec) Set(e *Event, v string) {
	if f.text {
		*str(e, f.off) = v
	}
}

// IdentifierSpecs returns the table's entries of the identifier fields
// (Field.Identifier), in schema order: what pseudonymization covers.
func IdentifierSpecs() []FieldSpec {
	var out []FieldSpec
	for _, f := range fieldTable {
		if f.Identifier {
			out = append(out, f)
		}
	}
	return out
}
