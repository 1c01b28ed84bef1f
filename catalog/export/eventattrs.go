package export

import (
	"fmt"

	"github.com/flowcat-catalog/flowcat/catalog"
	"github.com/flowcat-catalog/flowcat/schema"
)

// A version's files may carry event attribute columns (catalog.FileEntry's
// Attributes). An export of every column carries them too, after the
// schema's: the union of the files' attributes, in the order they are
// first met (files in manifest order), a file without one of them giving
// null. An export that names its columns (Filter.Columns) names schema
// fields only and carries no attributes.

// exportAttributes returns the event attribute columns an export of files
// through f carries. Two files that give one attribute different types
// fail the export by name.
func exportAttributes(files []catalog.FileEntry, f Filter) ([]catalog.AttributeColumn, error) {
	if len(f.Columns) > 0 {
		return nil, nil
	}
	var out []catalog.AttributeColumn
	for _, fe := range files {
		for _, c := range fe.Attributes.Columns() {
			i := attrIndex(out, c.Name)
			if i < 0 {
				out = append(out, c)
				continue
			}
			if out[i].Type != c.Type {
				return nil, fmt.Errorf("export: event attribute %s is of type %s in one file and %s in another", c.Name, out[i].Type, c.Type)
			}
		}
	}
	return out, nil
}

func attrIndex(cols []catalog.AttributeColumn, name string) int {
	for i, c := range cols {
		if c.Name == name {
			return i
		}
	}
	return -1
}

// attrRemap returns, for a file with attribute columns have, the index in
// have of each column of want (-1: absent); nil when have is want.
func attrRemap(want []catalog.AttributeColumn, have []catalog.AttributeColumn) []int {
	same := len(want) == len(have)
	for i := range have {
		same = same && have[i].Name == want[i].Name
	}
	if same {
		return nil
	}
	out := make([]int, len(want))
	for i, c := range want {
		out[i] = attrIndex(have, c.Name)
	}
	return out
}

// remapAttrs puts e's attribute values in the export's order.
func remapAttrs(e *schema.Event, remap []int) {
	if remap == nil {
		return
	}
	vals := make([]string, len(remap))
	for i, j := range remap {
		if j >= 0 {
			vals[i] = e.AttrValue(j)
		}
	}
	e.Attrs = schema.JoinAttrs(vals)
}

// attrNames are the header names of attribute columns.
func attrNames(cols []catalog.AttributeColumn) []string {
	out := make([]string, len(cols))
	for i, c := range cols {
		out[i] = c.Name
	}
	return out
}

// xesType is the XES attribute type an event attribute is written as
// (IEEE 1849-2016's elementary types, from memory of the standard): an
// integer as int, a date as date (midnight UTC of the day), a code or an
// age band as string.
func xesType(t schema.AttrType) string {
	switch t {
	case schema.TypeInteger:
		return "int"
	case schema.TypeDate:
		return "date"
	}
	return "string"
}

// xesValue is the XES form of a stored attribute value of type t.
func xesValue(t schema.AttrType, v string) string {
	if t == schema.TypeDate {
		return v + "T00:00:00.000000Z"
	}
	return v
}
