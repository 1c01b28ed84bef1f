package schema

import (
	"reflect"
	"slices"
	"strings"
	"testing"
	"time"
	"unsafe"
)

// notStored are the exported fields of Event that are not schema fields:
// they carry no Parquet column (parquet:"-").
var notStored = map[string]bool{"Attrs": true, "Line": true, "Row": true}

// TestFieldTableCoversEvent checks by reflection that every exported field
// of Event is in the field table (or is one of notStored), in the struct's
// order, under its Parquet column name and JSON member name, and that the
// table's accessors read and set that very struct field.
func TestFieldTableCoversEvent(t *testing.T) {
	typ := reflect.TypeFor[Event]()
	n := 0
	for i := range typ.NumField() {
		sf := typ.Field(i)
		if !sf.IsExported() {
			continue
		}
		col, _, _ := strings.Cut(sf.Tag.Get("parquet"), ",")
		if notStored[sf.Name] {
			if col != "-" {
				t.Errorf("Event.%s is not a schema field but has Parquet column %q", sf.Name, col)
			}
			continue
		}
		if n >= len(fieldTable) {
			t.Fatalf("Event.%s (column %q) is not in the field table", sf.Name, col)
		}
		spec := fieldTable[n]
		n++
		if spec.GoName != sf.Name || string(spec.Name) != col {
			t.Errorf("field table entry %d is %s/%s, Event's field in that place is %s/%s", n-1, spec.GoName, spec.Name, sf.Name, col)
		}
		if js, _, _ := strings.Cut(sf.Tag.Get("json"), ","); js != string(spec.Name) {
			t.Errorf("Event.%s: JSON member %q, field table name %q", sf.Name, js, spec.Name)
		}
		if spec.Doc == "" || spec.Type == "" || spec.Desc == "" {
			t.Errorf("%s: the table lacks its dictionary or JSON Schema text", spec.Name)
		}
		// The accessors touch this struct field and no other.
		var e Event
		fv := reflect.ValueOf(&e).Elem().Field(i)
		switch fv.Kind() {
		case reflect.String:
			if !spec.text {
				t.Errorf("%s: a text field without a setter", spec.Name)
				continue
			}
			e.SetValue(spec.Name, "v-"+string(spec.Name))
			if fv.String() != "v-"+string(spec.Name) || e.Value(spec.Name) != fv.String() {
				t.Errorf("%s: SetValue/Value do not reach Event.%s", spec.Name, sf.Name)
			}
			var zero Event
			reflect.ValueOf(&zero).Elem().Field(i).Set(fv)
			if zero != e {
				t.Errorf("%s: SetValue touched another field", spec.Name)
			}
		default:
			at := time.Date(2024, 3, 31, 1, 30, 0, 123456000, time.FixedZone("x", 3600))
			fv.Set(reflect.ValueOf(at))
			if got := e.Value(spec.Name); got != "2024-03-31T00:30:00.123456Z" {
				t.Errorf("%s: Value = %q", spec.Name, got)
			}
		}
	}
	if n != len(fieldTable) {
		t.Errorf("the field table has %d entries, Event %d schema fields", len(fieldTable), n)
	}
	if len(Fields) != len(fieldTable) || len(fieldsArray) != len(fieldTable) {
		t.Errorf("Fields (%d) or fieldsArray (%d) is not the table (%d)", len(Fields), len(fieldsArray), len(fieldTable))
	}
}

func TestFieldSpecLookup(t *testing.T) {
	if Field("age").Spec() != nil || Field("age").Required() || Field("age").Identifier() {
		t.Error("a name that is not a field has a spec")
	}
	var e Event
	e.SetValue(FieldOccurredAt, "2024-01-01T00:00:00Z") // ignored: no setter
	e.SetValue("age", "85")
	if e != (Event{}) {
		t.Errorf("SetValue changed the event: %+v", e)
	}
	var req, ids []Field
	for _, f := range Fields {
		if f.Required() {
			req = append(req, f)
		}
		if f.Identifier() {
			ids = append(ids, f)
		}
	}
	if !reflect.DeepEqual(req, []Field{FieldSite, FieldCaseID, FieldEventType, FieldOccurredAt}) ||
		!reflect.DeepEqual(ids, []Field{FieldCaseID, FieldSubjectID, FieldResourceID, FieldInstanceID}) {
		t.Errorf("required %v, identifiers %v", req, ids)
	}
	var specIDs []Field
	for _, f := range IdentifierSpecs() {
		specIDs = append(specIDs, f.Name)
	}
	if !slices.Equal(specIDs, ids) {
		t.Errorf("IdentifierSpecs %v, Identifier() %v", specIDs, ids)
	}
}

// TestCloneStrings fills every string field of Event (found by
// reflection) with text over one buffer, clones, overwrites the buffer and
// checks that no field followed it.
func TestCloneStrings(t *testing.T) {
	var e Event
	rv := reflect.ValueOf(&e).Elem()
	var bufs [][]byte
	for i := range rv.NumField() {
		f := rv.Field(i)
		if f.Kind() != reflect.String || !rv.Type().Field(i).IsExported() {
			continue
		}
		b := []byte("value-" + rv.Type().Field(i).Name)
		bufs = append(bufs, b)
		f.SetString(unsafe.String(&b[0], len(b)))
	}
	e.OccurredAt = time.Date(2024, 1, 2, 3, 4, 5, 6000, time.UTC)
	e.Line = 7
	want := e
	// Copies of the texts, for the comparison after the buffers change.
	for i := range rv.NumField() {
		if f := reflect.ValueOf(&want).Elem().Field(i); f.Kind() == reflect.String {
			f.SetString(strings.Clone(f.String()))
		}
	}
	e.CloneStrings()
	for _, b := range bufs {
		for i := range b {
			b[i] = 'x'
		}
	}
	if e != want {
		t.Errorf("after the buffers changed:\n got %+v\nwant %+v", e, want)
	}
}

// TestCloneTextsLeavesAttrs: CloneTexts gives every text field of the
// table a copy of its own, like CloneStrings, but leaves Attrs sharing its
// bytes.
func TestCloneTextsLeavesAttrs(t *testing.T) {
	var e Event
	var bufs [][]byte
	for _, f := range Fields {
		if f == FieldOccurredAt {
			continue
		}
		b := []byte("v-" + string(f))
		bufs = append(bufs, b)
		e.SetValue(f, unsafe.String(&b[0], len(b)))
	}
	ab := []byte("a\x00b")
	e.Attrs = unsafe.String(&ab[0], len(ab))
	e.CloneTexts()
	for _, b := range bufs {
		for i := range b {
			b[i] = 'x'
		}
	}
	for _, f := range Fields {
		if f != FieldOccurredAt {
			if got := e.Value(f); got != "v-"+string(f) {
				t.Errorf("%s = %q after its buffer changed, want %q", f, got, "v-"+string(f))
			}
		}
	}
	if unsafe.StringData(e.Attrs) != &ab[0] {
		t.Errorf("Attrs was copied; CloneTexts leaves it as it is")
	}
}

// TestTextsAndSameFields: Texts holds every string schema field of Event
// (found by reflection) in schema order, and SameFields tells apart two
// events that differ in any one field, the instant at microsecond
// precision, but not in Attrs or Line.
func TestTextsAndSameFields(t *testing.T) {
	var e Event
	for _, f := range Fields {
		e.SetValue(f, "v-"+string(f))
	}
	e.OccurredAt = time.Date(2024, 5, 6, 7, 8, 9, 10000, time.UTC)
	var want []string
	for _, f := range Fields {
		if f != FieldOccurredAt {
			want = append(want, "v-"+string(f))
		}
	}
	if got := e.Texts(); !slices.Equal(got[:], want) {
		t.Errorf("Texts = %v, want %v", got, want)
	}
	rv := reflect.ValueOf(e)
	for i := range rv.NumField() {
		sf := rv.Type().Field(i)
		if !sf.IsExported() {
			continue
		}
		c := e
		cv := reflect.ValueOf(&c).Elem().Field(i)
		switch cv.Kind() {
		case reflect.String:
			cv.SetString(cv.String() + "x")
		case reflect.Int64:
			cv.SetInt(cv.Int() + 1)
		default:
			cv.Set(reflect.ValueOf(e.OccurredAt.Add(time.Microsecond)))
		}
		if same := SameFields(&e, &c); same != notStored[sf.Name] {
			t.Errorf("an event that differs in %s: SameFields = %v", sf.Name, same)
		}
	}
	c := e
	c.OccurredAt = e.OccurredAt.Add(999 * time.Nanosecond)
	if !SameFields(&e, &c) {
		t.Error("a sub-microsecond difference made the events differ")
	}
}
