package schema

import _ "embed"

//go:embed service-event-v1.schema.json
var jsonSchemaV1 []byte

// JSONSchema returns the published JSON Schema (draft 2020-12) document of
// one event row of schema v1, as served to data users. The caller gets its
// own copy.
func JSONSchema() []byte {
	return append([]byte(nil), jsonSchemaV1...)
}
