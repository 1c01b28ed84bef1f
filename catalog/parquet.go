package catalog

import (
	"encoding/json"
	"fmt"
	"io"
	"reflect"
	"slices"
	"strconv"
	"strings"
	"sync"
	"time"
	"unsafe"

	"github.com/parquet-go/parquet-go"
	"github.com/parquet-go/parquet-go/format"

	"github.com/flowcat-catalog/flowcat/catalog/blob"
	"github.com/flowcat-catalog/flowcat/schema"
)

// snapshotWriter writes one snapshot Parquet file to a temporary path while
// hashing it, through an EventWriter with every column.
type snapshotWriter struct {
	*tempTable
	w     *EventWriter
	batch *batches[schema.Event] // written on another goroutine
	rows  int64
	min   time.Time
	max   time.Time
}

// snapshotBatches is how many batches of 1024 events wait for the
// snapshot writer (see batches).
const snapshotBatches = 4

// derivedFrom, when not empty, is written into the file's metadata: a file
// rewritten by replace-window thus never has the bytes of another file.
func newSnapshotWriter(dir string, rowGroupRows int64, keyID string, derivedFrom ...string) (*snapshotWriter, error) {
	return newAttrSnapshotWriter(dir, rowGroupRows, keyID, nil, derivedFrom...)
}

// newAttrSnapshotWriter is newSnapshotWriter of a file with event
// attribute columns attrs (none: the file is as it was before event
// attributes existed, byte for byte).
func newAttrSnapshotWriter(dir string, rowGroupRows int64, keyID string, ac *AttributeColumns, derivedFrom ...string) (*snapshotWriter, error) {
	attrs := ac.Columns()
	t, err := newTempTable(dir, "snapshot-*.parquet", "parquet")
	if err != nil {
		return nil, err
	}
	sw := &snapshotWriter{tempTable: t}
	kv := []KeyValue{{"flowcat.pseudonym_key_id", keyID}}
	for _, d := range derivedFrom {
		kv = append(kv, KeyValue{"flowcat.derived_from", d})
	}
	if len(attrs) > 0 {
		kv = append(kv, KeyValue{"flowcat.event_attributes", eventAttributesMeta(attrs)})
	}
	sw.w = NewEventWriter(t.out(), schema.Fields, EventWriterOptions{RowGroupRows: rowGroupRows, Metadata: kv, Attrs: attrs})
	sw.batch = newBatches(1024, snapshotBatches, sw.w.WriteEvents)
	return sw, nil
}

// Write appends e; events must come in occurred_at order.
func (sw *snapshotWriter) Write(e *schema.Event) error {
	if sw.rows == 0 {
		sw.min = e.OccurredAt
	}
	sw.max = e.OccurredAt
	sw.rows++
	return sw.batch.add(*e)
}

// Finish completes the file and makes it durable; it returns the file's id
// and size. The caller then hands the file to a blob.Store.
func (sw *snapshotWriter) Finish() (blob.ID, int64, error) {
	if err := sw.batch.close(); err != nil {
		return blob.ID{}, 0, err
	}
	if err := sw.w.Close(); err != nil {
		return blob.ID{}, 0, err
	}
	return sw.done()
}

// Remove closes and deletes the temporary file.
func (sw *snapshotWriter) Remove() {
	sw.batch.close()
	sw.drop()
}

// EventWriterOptions tune an EventWriter.
type EventWriterOptions struct {
	RowGroupRows int64      // rows per row group; required
	Metadata     []KeyValue // key-value metadata, after flowcat.schema_version, in this order

	// Attrs are event attribute columns written after cols, in this order
	// (Event.Attrs holds their values).
	Attrs []AttributeColumn

	schema *parquet.Schema // for the encodings benchmark: replaces eventSchemaOf(cols)
}

// EventWriter is the one Parquet writer of events, for snapshots, export
// staging files and exports: rows of a subset of the schema's columns, in
// the field table's order (schema/fields.go; the Parquet layout of each
// is the tag of its Event field), then event attribute columns, through
// the one columnWriter (fileOptions: zstd pages, bounded row groups, a
// created_by that names no build or time, so that the same events always
// give the same bytes); row groups record occurred_at as their sorting
// column when the file holds it.
//
// Each column's values are taken from the events through the field
// table, with their own definition levels: an empty optional field is
// NULL, never "" (parquet-go's writer of Go structs, given "optional"
// non-pointer fields, takes some empty strings for values in v0.32.0, see
// DEVELOPERS.md; this writer does not go through it).
type EventWriter struct {
	specs []*schema.FieldSpec // the columns, in file order
	attrs []AttributeColumn
	cw    *columnWriter
	held  []schema.Event // rows not yet written: less than a batch
	cur   []schema.Event // the rows being written
	fill  fillFunc
}

// NewEventWriter returns a writer of cols to w.
func NewEventWriter(w io.Writer, cols []schema.Field, opt EventWriterOptions) *EventWriter {
	sch := opt.schema
	if sch == nil {
		sch = eventSchemaOf(cols, opt.Attrs)
	}
	s := fileSettings{RowGroupRows: opt.RowGroupRows, Metadata: opt.Metadata}
	if slices.Contains(cols, schema.FieldOccurredAt) {
		// Rows come in occurred_at order (ties in an order of their own).
		s.SortedBy = string(schema.FieldOccurredAt)
	}
	ew := &EventWriter{attrs: opt.Attrs, cw: newColumnWriter(w, sch, s), held: make([]schema.Event, 0, writeBatch)}
	for _, c := range cols {
		ew.specs = append(ew.specs, c.Spec())
	}
	ew.fill = ew.values
	return ew
}

// Write appends e; e may be reused once Write returns.
func (ew *EventWriter) Write(e *schema.Event) error {
	ew.held = append(ew.held, *e)
	if len(ew.held) == cap(ew.held) {
		return ew.flush()
	}
	return nil
}

// WriteEvents appends evs, as Write of each would; evs may be reused
// once it returns. Whole batches are written straight from evs.
func (ew *EventWriter) WriteEvents(evs []schema.Event) error {
	for len(ew.held) > 0 && len(evs) > 0 {
		if err := ew.Write(&evs[0]); err != nil {
			return err
		}
		evs = evs[1:]
	}
	if n := len(evs) / writeBatch * writeBatch; n > 0 {
		if err := ew.write(evs[:n]); err != nil {
			return err
		}
		evs = evs[n:]
	}
	ew.held = append(ew.held, evs...)
	return nil
}

func (ew *EventWriter) flush() error {
	err := ew.write(ew.held)
	clear(ew.held)
	ew.held = ew.held[:0]
	return err
}

func (ew *EventWriter) write(evs []schema.Event) error {
	if len(evs) == 0 {
		return nil
	}
	ew.cur = evs
	err := ew.cw.write(len(evs), ew.fill)
	ew.cur = nil
	return err
}

// values is the fillFunc of the events being written.
func (ew *EventWriter) values(dst []parquet.Value, col, i, j int) ([]parquet.Value, error) {
	evs := ew.cur[i:j]
	if col >= len(ew.specs) {
		a := col - len(ew.specs)
		for k := range evs {
			s := evs[k].AttrValue(a)
			if s == "" {
				dst = append(dst, parquet.NullValue().Level(0, 0, col))
				continue
			}
			v, err := attrValue(ew.attrs[a].Type, s)
			if err != nil {
				// Values were checked at ingest: this is a program fault, and
				// the message names the column, never the value.
				return dst, fmt.Errorf("parquet: event attribute %s: %w", ew.attrs[a].Name, err)
			}
			dst = append(dst, v.Level(0, 1, col))
		}
		return dst, nil
	}
	// A column buffer reads only the definition level of a value (and a
	// required column's not even that), so values of required columns and
	// NULLs are left at level 0 without Level, which parquet-go does not
	// inline.
	switch sp := ew.specs[col]; {
	case sp.Name == schema.FieldOccurredAt:
		for k := range evs {
			dst = append(dst, parquet.Int64Value(evs[k].OccurredAt.UnixMicro()))
		}
	case sp.Required:
		for k := range evs {
			dst = append(dst, bytesValue(sp.Get(&evs[k])))
		}
	default:
		for k := range evs {
			if s := sp.Get(&evs[k]); s == "" {
				dst = append(dst, parquet.Value{})
			} else {
				dst = append(dst, bytesValue(s).Level(0, 1, col))
			}
		}
	}
	return dst, nil
}

// Close writes the rows held and the footer; it does not close the
// underlying writer.
func (ew *EventWriter) Close() error {
	if err := ew.flush(); err != nil {
		return err
	}
	return ew.cw.close()
}

// attrValue is the Parquet value of one event attribute value of type t
// (its stored text form: decimal integers, YYYY-MM-DD dates).
func attrValue(t schema.AttrType, v string) (parquet.Value, error) {
	switch t {
	case schema.TypeInteger:
		n, err := strconv.ParseInt(v, 10, 64)
		if err != nil {
			return parquet.Value{}, fmt.Errorf("not a whole number")
		}
		return parquet.Int64Value(n), nil
	case schema.TypeDate:
		d, err := time.Parse(time.DateOnly, v)
		if err != nil {
			return parquet.Value{}, fmt.Errorf("not a date")
		}
		return parquet.Int32Value(int32(d.Unix() / 86400)), nil
	}
	return bytesValue(v), nil
}

// attrText is the stored text form of a non-null attribute value read
// from a column of type t.
func attrText(t schema.AttrType, v parquet.Value) string {
	switch t {
	case schema.TypeInteger:
		return strconv.FormatInt(v.Int64(), 10)
	case schema.TypeDate:
		return time.Unix(int64(v.Int32())*86400, 0).UTC().Format(time.DateOnly)
	}
	return string(v.ByteArray())
}

var (
	eventType   = reflect.TypeFor[schema.Event]()
	schemaCache sync.Map // column list -> *parquet.Schema
)

// eventSchemaOf is the Parquet schema of a file of the schema's columns
// cols followed by one optional column per event attribute: each field's
// column is the one its field table entry names (the tag of its Event
// field: node type, logical type, encoding, optionality), so every file
// has the snapshots' layout; attribute codes and age bands are
// dictionary-encoded strings, integers INT64, dates DATE, as in the case
// attribute table (attrNode).
func eventSchemaOf(cols []schema.Field, attrs []AttributeColumn) *parquet.Schema {
	key := fmt.Sprint(cols)
	if len(attrs) == 0 {
		if s, ok := schemaCache.Load(key); ok {
			return s.(*parquet.Schema)
		}
	}
	var fields []reflect.StructField
	for _, c := range cols {
		sf, ok := eventType.FieldByName(c.Spec().GoName)
		if !ok {
			panic("parquet: no Event field for " + string(c))
		}
		fields = append(fields, reflect.StructField{Name: sf.Name, Type: sf.Type, Tag: sf.Tag})
	}
	for i, a := range attrs {
		f := reflect.StructField{Name: fmt.Sprintf("Attr%d", i), Type: reflect.TypeFor[*string](), Tag: reflect.StructTag(`parquet:"` + a.Name + `,dict"`)}
		switch a.Type {
		case schema.TypeInteger:
			f.Type, f.Tag = reflect.TypeFor[*int64](), reflect.StructTag(`parquet:"`+a.Name+`"`)
		case schema.TypeDate:
			f.Type, f.Tag = reflect.TypeFor[*int32](), reflect.StructTag(`parquet:"`+a.Name+`,date"`)
		}
		fields = append(fields, f)
	}
	s := parquet.SchemaOf(reflect.New(reflect.StructOf(fields)).Elem().Interface())
	if len(attrs) == 0 {
		schemaCache.Store(key, s)
	}
	return s
}

// bytesValue wraps s without copying: the writer copies values into its
// column buffers before WriteRowValues returns, and strings are immutable.
func bytesValue(s string) parquet.Value {
	return parquet.ByteArrayValue(unsafe.Slice(unsafe.StringData(s), len(s)))
}

// eventAttributesMeta is the file metadata naming its event attribute
// columns with their types, roles and rules: the manifest's entry, as
// JSON, so that a file read alone says what its extra columns are.
func eventAttributesMeta(attrs []AttributeColumn) string {
	b, err := json.Marshal(attrs)
	if err != nil {
		panic("parquet: event attributes: " + err.Error()) // strings only
	}
	return string(b)
}

// ReadSnapshot calls fn for every event of a snapshot Parquet file, in file
// order, with its event attributes in Attrs (the file's columns after the
// schema's, in file order). The event passed to fn is only valid during
// the call.
func ReadSnapshot(r io.ReaderAt, size int64, fn func(*schema.Event) error) error {
	return readFile(r, size, "parquet", 1024, func(f *parquet.File) (*EventReader, error) {
		var opts []parquet.ReaderOption
		if hasEventAttrs(f.Schema()) {
			// Read with the file's schema, so that the rows hold the
			// attribute columns too (the Go type's would drop them).
			opts = append(opts, f.Schema())
		}
		return NewEventReader(parquet.NewGenericReader[schema.Event](f, opts...))
	}, fn)
}

// readFile is the one reader of a whole stored Parquet file (snapshots,
// case tables): it calls fn for every row of T, in file order, read
// through the RowReader open makes of the file, bufRows at a time. Errors
// begin with what.
func readFile[T any](r io.ReaderAt, size int64, what string, bufRows int, open func(*parquet.File) (*RowReader[T], error), fn func(*T) error) error {
	f, err := parquet.OpenFile(r, size)
	if err != nil {
		return fmt.Errorf("%s: %w", what, err)
	}
	rr, err := open(f)
	if err != nil {
		return err
	}
	defer rr.Close()
	buf := make([]T, bufRows)
	for {
		n, err := rr.Read(buf)
		for i := range buf[:n] {
			if ferr := fn(&buf[i]); ferr != nil {
				return ferr
			}
		}
		if err == io.EOF {
			return nil
		}
		if err != nil {
			return fmt.Errorf("%s: %w", what, err)
		}
	}
}

// RowReader decodes rows of T (snapshot events, case table rows) from
// Parquet. Every reader of stored rows goes through it: parquet-go turns a
// TIMESTAMP into a time.Time by way of int64 nanoseconds, which hold only
// the instants of 1677-09-21 to 2262-04-11, while the instants flowcat
// stores span the years 0001-9999 in microseconds; RowReader takes each
// time.Time or *time.Time field of T (top level) that a TIMESTAMP column
// feeds from the column's stored value instead.
type RowReader[T any] struct {
	r     *parquet.GenericReader[T]
	times []timeColumn
	rows  []parquet.Row
	attrs []attrColumn // events: the event attribute columns
	vals  []string
	event *parquet.Schema // events with attributes: the schema rows are cut to
	cut   parquet.Row
}

// attrColumn is one event attribute column of a snapshot file.
type attrColumn struct {
	col int
	typ schema.AttrType
}

// hasEventAttrs reports whether a snapshot file's schema has event
// attribute columns.
func hasEventAttrs(sch *parquet.Schema) bool { return len(eventAttrColumns(sch)) > 0 }

// eventAttrColumns finds the leaf columns of sch that are not schema
// fields, in column order: a snapshot's event attributes, when its first
// columns are the schema's, in order (as eventSchemaOf writes them); nil
// for any other file. Their types follow from the Parquet types the writer
// gives them.
func eventAttrColumns(sch *parquet.Schema) []attrColumn {
	cols := sch.Columns()
	if len(cols) <= len(schema.Fields) {
		return nil
	}
	for i, f := range schema.Fields {
		if len(cols[i]) != 1 || cols[i][0] != string(f) {
			// Not a snapshot with attributes (a case table, say): read
			// as before, through the event's own schema.
			return nil
		}
	}
	var out []attrColumn
	for i, path := range cols {
		if len(path) != 1 || slices.Contains(schema.Fields, schema.Field(path[0])) {
			continue
		}
		leaf, ok := sch.Lookup(path...)
		if !ok {
			continue
		}
		typ := schema.TypeCode
		if lt := leaf.Node.Type().LogicalType(); lt != nil {
			if _, ok := lt.Value.(*format.DateType); ok {
				typ = schema.TypeDate
			}
		}
		if leaf.Node.Type().Kind() == parquet.Int64 {
			typ = schema.TypeInteger
		}
		out = append(out, attrColumn{col: i, typ: typ})
	}
	return out
}

// EventReader reads the events of a snapshot file or row group.
type EventReader = RowReader[schema.Event]

// timeColumn maps one TIMESTAMP leaf column to a field of the row type.
type timeColumn struct {
	col   int
	field int  // index of the struct field
	ptr   bool // *time.Time
	unit  time.Duration
}

// NewEventReader reads events through r (from parquet.NewGenericReader or
// NewGenericRowGroupReader); it fails when r's schema has no occurred_at
// column.
func NewEventReader(r *parquet.GenericReader[schema.Event]) (*EventReader, error) {
	if _, ok := r.Schema().Lookup(string(schema.FieldOccurredAt)); !ok {
		r.Close()
		return nil, fmt.Errorf("parquet: the file has no %s column", schema.FieldOccurredAt)
	}
	rr := NewRowReader(r)
	rr.attrs = eventAttrColumns(r.Schema())
	if len(rr.attrs) > 0 {
		// r reads with the file's schema: its first columns must be the
		// event's, in order, so that rows cut to them reconstruct events.
		cols := r.Schema().Columns()
		for i, f := range schema.Fields {
			if i >= len(cols) || len(cols[i]) != 1 || cols[i][0] != string(f) {
				r.Close()
				return nil, fmt.Errorf("parquet: event attribute columns before the schema's %s column", f)
			}
		}
		rr.event = eventSchema
	}
	return rr, nil
}

// eventSchema is schema.Event's Parquet schema.
var eventSchema = parquet.SchemaOf(schema.Event{})

// NewEventRowGroupReader reads the events of one row group of a snapshot
// file, event attributes included (see ReadSnapshot).
func NewEventRowGroupReader(rg parquet.RowGroup) (*EventReader, error) {
	var opts []parquet.ReaderOption
	if hasEventAttrs(rg.Schema()) {
		opts = append(opts, rg.Schema())
	}
	return NewEventReader(parquet.NewGenericRowGroupReader[schema.Event](rg, opts...))
}

// NewRowReader reads rows of T through r.
func NewRowReader[T any](r *parquet.GenericReader[T]) *RowReader[T] {
	rr := &RowReader[T]{r: r}
	typ := reflect.TypeFor[T]()
	timeType := reflect.TypeFor[time.Time]()
	for i := range typ.NumField() {
		f := typ.Field(i)
		ptr := f.Type.Kind() == reflect.Pointer
		if f.Type != timeType && !(ptr && f.Type.Elem() == timeType) {
			continue
		}
		name, _, _ := strings.Cut(f.Tag.Get("parquet"), ",")
		if name == "" {
			name = f.Name
		}
		leaf, ok := r.Schema().Lookup(name)
		if !ok {
			continue
		}
		lt := leaf.Node.Type().LogicalType()
		if lt == nil {
			continue
		}
		ts, ok := lt.Value.(*format.TimestampType)
		if !ok {
			continue
		}
		unit := time.Nanosecond
		switch ts.Unit.Value.(type) {
		case *format.MicroSeconds:
			unit = time.Microsecond
		case *format.MilliSeconds:
			unit = time.Millisecond
		}
		rr.times = append(rr.times, timeColumn{col: leaf.ColumnIndex, field: i, ptr: ptr, unit: unit})
	}
	return rr
}

// Read decodes up to len(buf) rows into buf. Like io.Reader it returns
// the number read and io.EOF at the end; it may read fewer than len(buf)
// before the end.
func (rr *RowReader[T]) Read(buf []T) (int, error) {
	if cap(rr.rows) < len(buf) {
		rr.rows = make([]parquet.Row, len(buf))
	}
	rows := rr.rows[:len(buf)]
	n, err := rr.r.ReadRows(rows)
	sch := rr.r.Schema()
	for i, row := range rows[:n] {
		if rr.event != nil {
			rr.cut = rr.cut[:0]
			for _, v := range row {
				if v.Column() < len(schema.Fields) {
					rr.cut = append(rr.cut, v)
				}
			}
			if rerr := rr.event.Reconstruct(&buf[i], rr.cut); rerr != nil {
				return i, rerr
			}
		} else if rerr := sch.Reconstruct(&buf[i], row); rerr != nil {
			return i, rerr
		}
		if len(rr.attrs) > 0 {
			if e, ok := any(&buf[i]).(*schema.Event); ok {
				rr.vals = rr.vals[:0]
				for _, ac := range rr.attrs {
					s := ""
					for _, v := range row {
						if v.Column() == ac.col {
							if !v.IsNull() {
								s = attrText(ac.typ, v)
							}
							break
						}
					}
					rr.vals = append(rr.vals, s)
				}
				e.Attrs = schema.JoinAttrs(rr.vals)
			}
		}
		if len(rr.times) == 0 {
			continue
		}
		rv := reflect.ValueOf(&buf[i]).Elem()
		for _, tc := range rr.times {
			for _, v := range row {
				if v.Column() != tc.col {
					continue
				}
				// Through typed pointers, so no value is boxed.
				fp := rv.Field(tc.field).Addr().Interface()
				switch {
				case tc.ptr && v.IsNull():
					*fp.(**time.Time) = nil
				case tc.ptr:
					t := storedInstant(v.Int64(), tc.unit)
					*fp.(**time.Time) = &t
				case v.IsNull():
					*fp.(*time.Time) = time.Time{}
				default:
					*fp.(*time.Time) = storedInstant(v.Int64(), tc.unit)
				}
				break
			}
		}
	}
	return n, err
}

// storedInstant is the UTC instant of a TIMESTAMP value v in unit.
func storedInstant(v int64, unit time.Duration) time.Time {
	switch unit {
	case time.Microsecond:
		return time.UnixMicro(v).UTC()
	case time.Millisecond:
		return time.UnixMilli(v).UTC()
	}
	return time.Unix(0, v).UTC()
}

// Close releases the underlying reader.
func (rr *RowReader[T]) Close() error { return rr.r.Close() }
