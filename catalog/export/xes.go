package export

import (
	"bufio"
	"context"
	"encoding/xml"
	"fmt"
	"io"
	"slices"
	"strconv"
	"strings"

	"github.com/flowcat-catalog/flowcat/catalog"
	"github.com/flowcat-catalog/flowcat/schema"
)

// XESOptions describe the version WriteXES writes, for the log's own
// attributes.
type XESOptions struct {
	Dataset    string // "project/dataset"
	Version    int
	SnapshotID string
	// RunEvents bounds the events the sort by case holds in memory
	// before it spills a run (default 65,536).
	RunEvents int
}

// XESLifecycle is the lifecycle:transition WriteXES writes for each event
// type: the standard lifecycle model's transitions (IEEE 1849-2016's
// lifecycle extension, from memory of the standard) where one means the
// same, "unknown" where none does. The event type itself is written too,
// as the attribute event_type.
var XESLifecycle = map[schema.EventType]string{
	schema.Arrival:   "unknown",
	schema.Enqueue:   "schedule",
	schema.Start:     "start",
	schema.Complete:  "complete",
	schema.Abandon:   "withdraw",
	schema.Transfer:  "unknown",
	schema.Departure: "unknown",
}

// xesExtensions are the standard extensions WriteXES uses, with their
// names and URIs as IEEE 1849-2016 gives them (from memory).
var xesExtensions = [][3]string{
	{"Concept", "concept", "http://www.xes-standard.org/concept.xesext"},
	{"Time", "time", "http://www.xes-standard.org/time.xesext"},
	{"Lifecycle", "lifecycle", "http://www.xes-standard.org/lifecycle.xesext"},
	{"Organizational", "org", "http://www.xes-standard.org/org.xesext"},
}

// WriteXES writes the events of files that pass f as an XES log (IEEE
// 1849-2016): one trace per case, its concept:name the case's pseudonym,
// its events in time order, each with concept:name (the activity, when
// there is one), lifecycle:transition (XESLifecycle), time:timestamp (UTC,
// microseconds), org:resource (the resource pseudonym) and the other
// fields of the schema under their own names (site, event_type,
// subject_id, queue, priority, channel, outcome, event_id), then its event
// attributes under their names, typed by xesType (a null one left out).
// Traces come in
// case order; the bytes depend only on the events. Events are sorted by
// case on disk in src.TempDir, so memory stays bounded by opt.RunEvents.
// A value holding a character XML cannot carry (a control character other
// than tab, LF or CR) is written with U+FFFD in its place.
func WriteXES(ctx context.Context, w io.Writer, src Source, files []catalog.FileEntry, f Filter, opt XESOptions) (Stats, error) {
	attrs, err := exportAttributes(files, f)
	if err != nil {
		return Stats{}, err
	}
	cs := catalog.NewCaseSorter(src.TempDir, opt.RunEvents)
	defer cs.Close()
	st, err := Events(ctx, src, files, f, func(e *schema.Event) error { return cs.Add(e) })
	if err != nil {
		return st, err
	}
	bw := bufio.NewWriterSize(w, 64<<10)
	x := &xesWriter{w: bw, attrs: attrs}
	x.raw(`<?xml version="1.0" encoding="UTF-8"?>` + "\n")
	x.raw(`<log xes.version="1849-2016" xes.features="" xmlns="http://www.xes-standard.org/">` + "\n")
	for _, e := range xesExtensions {
		x.raw(`  <extension name="` + e[0] + `" prefix="` + e[1] + `" uri="` + e[2] + `"/>` + "\n")
	}
	x.raw(`  <global scope="event">` + "\n")
	x.attr("    ", "string", "lifecycle:transition", "complete")
	x.raw("  </global>\n")
	x.attr("  ", "string", "concept:name", opt.Dataset+"@"+strconv.Itoa(opt.Version))
	x.attr("  ", "string", "dataset", opt.Dataset)
	x.attr("  ", "int", "version", strconv.Itoa(opt.Version))
	x.attr("  ", "string", "snapshot_id", opt.SnapshotID)
	open := false
	var last string
	n := 0
	err = cs.Finish(func(e *schema.Event) error {
		if n++; n%4096 == 0 {
			if err := ctx.Err(); err != nil {
				return err
			}
		}
		if !open || e.CaseID != last {
			if open {
				x.raw("  </trace>\n")
			}
			x.raw("  <trace>\n")
			x.attr("    ", "string", "concept:name", e.CaseID)
			open, last = true, e.CaseID
		}
		x.event(e)
		return x.err
	})
	if err != nil {
		return st, err
	}
	if open {
		x.raw("  </trace>\n")
	}
	x.raw("</log>\n")
	if x.err != nil {
		return st, x.err
	}
	return st, bw.Flush()
}

type xesWriter struct {
	w     *bufio.Writer
	err   error
	attrs []catalog.AttributeColumn
}

func (x *xesWriter) raw(s string) {
	if x.err == nil {
		_, x.err = x.w.WriteString(s)
	}
}

// attr writes one attribute element; xml.EscapeText escapes quotes too,
// so its output is safe inside an XML attribute value.
func (x *xesWriter) attr(indent, typ, key, value string) {
	if x.err != nil {
		return
	}
	x.raw(indent + "<" + typ + ` key="`)
	if x.err == nil {
		x.err = xml.EscapeText(x.w, []byte(key))
	}
	x.raw(`" value="`)
	if x.err == nil {
		x.err = xml.EscapeText(x.w, []byte(value))
	}
	x.raw(`"/>` + "\n")
}

func (x *xesWriter) event(e *schema.Event) {
	const in = "      "
	x.raw("    <event>\n")
	if e.Activity != "" {
		x.attr(in, "string", "concept:name", e.Activity)
	}
	x.attr(in, "string", "lifecycle:transition", XESLifecycle[e.Type])
	x.attr(in, "date", "time:timestamp", e.OccurredAt.UTC().Format("2006-01-02T15:04:05.000000Z07:00"))
	if e.ResourceID != "" {
		x.attr(in, "string", "org:resource", e.ResourceID)
	}
	x.attr(in, "string", "site", e.Site)
	x.attr(in, "string", "event_type", string(e.Type))
	// concept:instance: the activity instance (the schema's instance_id,
	// a pseudonym, where the schema has that field).
	if v := e.Value(xesInstanceField); v != "" {
		x.attr(in, "string", "concept:instance", v)
	}
	// Every other field, in schema order, under its own name.
	for _, f := range xesPlainFields {
		if v := e.Value(f); v != "" {
			x.attr(in, "string", string(f), v)
		}
	}
	for i, a := range x.attrs {
		if v := e.AttrValue(i); v != "" {
			x.attr(in, xesType(a.Type), a.Name, xesValue(a.Type, v))
		}
	}
	x.raw("    </event>\n")
}

// xesInstanceField is the schema field of the activity instance, which
// XES calls concept:instance.
const xesInstanceField = schema.Field("instance_id")

// XESProfile is the mapping profile that reads WriteXES's output back into
// schema v1: every field from the attribute WriteXES writes it to
// (instance_id from concept:instance where the schema has the field).
var XESProfile = xesProfile()

func xesProfile() string {
	var b strings.Builder
	b.WriteString("# Reads flowcat's own XES export (catalog/export.WriteXES) back into schema v1.\nformat: xes\nfields:\n")
	for _, f := range schema.Fields {
		key, ok := xesKeys[f]
		if !ok {
			key = string(f)
		}
		fmt.Fprintf(&b, "  %s: %q\n", f, key)
	}
	return b.String()
}

// xesKeys are the fields WriteXES writes under a key of a standard XES
// extension (IEEE 1849-2016, recalled from memory: concept, lifecycle, org,
// time); case_id is the
// trace's concept:name. Every other field is an event attribute under its
// own name.
var xesKeys = map[schema.Field]string{
	schema.FieldCaseID:     "trace/concept:name",
	schema.FieldResourceID: "org:resource",
	schema.FieldActivity:   "concept:name",
	schema.FieldOccurredAt: "time:timestamp",
	xesInstanceField:       "concept:instance",
}

// xesPlainFields are the fields an XES event carries under their own
// names after the ones event writes first (site and event_type), in schema
// order.
var xesPlainFields = slices.DeleteFunc(slices.Clone(schema.Fields), func(f schema.Field) bool {
	_, std := xesKeys[f]
	return std || f == schema.FieldSite || f == schema.FieldEventType
})
