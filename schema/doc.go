// Package schema owns the common service-event schema v1 and everything
// needed to get partner exports into it: the event type and field list
// (event.go), row rejections and file errors (errors.go), the published
// JSON Schema document of one event row, the YAML mapping profile that says
// how a partner's columns map onto schema fields, timestamp parsing with
// explicit daylight-saving policies, and the streaming Reader that turns a
// CSV, TSV or JSON Lines export (optionally gzip-compressed) into typed
// events and row-level rejections without holding the file in memory.
//
// Nothing in this package writes the raw value of an identifier column
// (case_id, subject_id, resource_id) into an error, a rejection or a log.
// The package imports nothing else of the project.
package schema
