package schema

import "strings"

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
var jsonSchemaV1 = buildJSONSchema()

func buildJSONSchema() []byte {
	var b strings.Builder
	b.WriteString(jsonSchemaHead)
	var required []string
	for i, f := range fieldTable {
		b.WriteString(`    "` + string(f.Name) + "\": {\n")
		for j, line := range strings.Split(f.JSONSchema, "\n") {
			if j > 0 {
				b.WriteString(",\n")
			}
			b.WriteString("      " + strings.TrimSuffix(line, ","))
		}
		b.WriteString("\n    }")
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
	return append([]byte(nil), jsonSchemaV1...)
}
