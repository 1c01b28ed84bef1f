package schema

import (
	"encoding/json"
	"strings"
	"sync"
)

// jsonSchemaHead is the published JSON Schema document up to its
// properties, which come from the field table.
const jsonSchemaHead = `{
  "$schema": "https://json-schema.org/draft/2020-12/schema",
  "$id": "https://flowcat.invalid/schema/service-event/v1",
  "title": "Service event, schema v1",
  "description": "One row of the common service-event schema v1: one thing that happened to one case at one instant at a partner site. In published snapshots the identifier fields (case_id, subject_id, resource_id, instance_id) hold keyed pseudonyms, never the partner's raw identifiers.",
  "type": "object",
  "properties": {
`

// jsonSchemaV1 is built once from the field table (TestJSONSchemaGolden
// holds it to the published bytes, testdata/service-event-v1.schema.json).
var jsonSchemaV1 = sync.OnceValue(buildJSONSchema) // after init sets the table's offsets

func buildJSONSchema() []byte {
	var b strings.Builder
	b.WriteString(jsonSchemaHead)
	var required []string
	for i, f := range fieldTable {
		b.WriteString(`    "` + string(f.Name) + "\": {\n")
		for _, m := range f.jsonMembers() {
			b.WriteString("      " + m + ",\n")
		}
		b.WriteString("      \"description\": " + jsonString(f.Desc) + "\n    }")
		if i < len(fieldTable)-1 {
			b.WriteString(",")
		}
		b.WriteString("\n")
		if f.Required {
			required = append(required, `"`+string(f.Name)+`"`)
		}
	}
	b.WriteString("  },\n")
	b.WriteString(`  "required": [` + strings.Join(required, ", ") + "],\n")
	b.WriteString(`  "additionalProperties": false` + "\n}\n")
	return []byte(b.String())
}

// JSONSchema returns the published JSON Schema (draft 2020-12) document of
// one event row of schema v1, as served to data users. The caller gets its
// own copy.
func JSONSchema() []byte {
	return append([]byte(nil), jsonSchemaV1()...)
}

// jsonMembers are f's members in the JSON Schema document before its
// description, one per line (FieldSpec.Desc says which).
func (f *FieldSpec) jsonMembers() []string {
	m := []string{`"type": "string"`}
	switch {
	case !f.text:
		m = append(m, `"format": "date-time"`)
	case f.Name == FieldEventType:
		types := make([]string, len(EventTypes))
		for i, t := range EventTypes {
			types[i] = jsonString(string(t))
		}
		m = append(m, `"enum": [`+strings.Join(types, ", ")+"]")
	case f.Required:
		m = append(m, `"minLength": 1`)
	}
	return m
}

// jsonString is s as a JSON string.
func jsonString(s string) string {
	b, err := json.Marshal(s)
	if err != nil {
		panic(err) // a Go string always marshals
	}
	return string(b)
}
