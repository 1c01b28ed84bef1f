package schema

import (
	"bytes"
	"encoding/json"
	"os"
	"slices"
	"strings"
	"testing"
	"time"

	"github.com/santhosh-tekuri/jsonschema/v6"
)

func compileSchema(t *testing.T, doc []byte) (*jsonschema.Schema, error) {
	t.Helper()
	v, err := jsonschema.UnmarshalJSON(bytes.NewReader(doc))
	if err != nil {
		t.Fatalf("schema document is not JSON: %v", err)
	}
	c := jsonschema.NewCompiler()
	c.AssertFormat()
	const url = "https://flowcat.invalid/schema/service-event/v1"
	if err := c.AddResource(url, v); err != nil {
		return nil, err
	}
	return c.Compile(url)
}

func TestJSONSchemaCompiles(t *testing.T) {
	// Negative control: the compiler checks documents against the 2020-12
	// metaschema, so a malformed keyword must fail.
	if _, err := compileSchema(t, []byte(`{"$schema":"https://json-schema.org/draft/2020-12/schema","type":5}`)); err == nil {
		t.Fatal("metaschema check did not reject a bad document")
	}
	sch, err := compileSchema(t, JSONSchema())
	if err != nil {
		t.Fatalf("compile: %v", err)
	}
	good := Event{Site: "north-clinic", CaseID: "p-3f9a", Type: Arrival, Activity: "triage",
		OccurredAt: time.Date(2021, 6, 1, 8, 0, 0, 0, time.UTC)}
	b, err := json.Marshal(&good)
	if err != nil {
		t.Fatal(err)
	}
	tests := []struct {
		name string
		doc  string
		ok   bool
	}{
		{"marshalled event", string(b), true},
		{"all fields", `{"site":"s","case_id":"c","subject_id":"p","resource_id":"r","event_type":"abandon","activity":"a","queue":"q","occurred_at":"2021-06-01T08:00:00.5+02:00","priority":"1","channel":"phone","outcome":"ok","event_id":"e1"}`, true},
		{"missing case_id", `{"site":"s","event_type":"arrival","occurred_at":"2021-06-01T08:00:00Z"}`, false},
		{"unknown event type", `{"site":"s","case_id":"c","event_type":"arrived","occurred_at":"2021-06-01T08:00:00Z"}`, false},
		{"not a date-time", `{"site":"s","case_id":"c","event_type":"arrival","occurred_at":"2021/06/01 08:00"}`, false},
		{"extra property", `{"site":"s","case_id":"c","event_type":"arrival","occurred_at":"2021-06-01T08:00:00Z","age":"85"}`, false},
		{"number for string", `{"site":"s","case_id":7,"event_type":"arrival","occurred_at":"2021-06-01T08:00:00Z"}`, false},
	}
	for _, tc := range tests {
		v, err := jsonschema.UnmarshalJSON(strings.NewReader(tc.doc))
		if err != nil {
			t.Fatalf("%s: %v", tc.name, err)
		}
		err = sch.Validate(v)
		if (err == nil) != tc.ok {
			t.Errorf("%s: Validate = %v, want ok=%v", tc.name, err, tc.ok)
		}
	}
}

func TestJSONSchemaMatchesFields(t *testing.T) {
	var doc struct {
		ID         string                     `json:"$id"`
		Title      string                     `json:"title"`
		Properties map[string]json.RawMessage `json:"properties"`
		Required   []string                   `json:"required"`
	}
	if err := json.Unmarshal(JSONSchema(), &doc); err != nil {
		t.Fatal(err)
	}
	if doc.ID != "https://flowcat.invalid/schema/service-event/v"+Version || doc.Title == "" {
		t.Errorf("$id %q / title %q", doc.ID, doc.Title)
	}
	var props, fields, required, wantRequired []string
	for k := range doc.Properties {
		props = append(props, k)
	}
	for _, f := range Fields {
		fields = append(fields, string(f))
		if f.Required() {
			wantRequired = append(wantRequired, string(f))
		}
	}
	required = slices.Clone(doc.Required)
	slices.Sort(props)
	slices.Sort(fields)
	slices.Sort(required)
	slices.Sort(wantRequired)
	if !slices.Equal(props, fields) {
		t.Errorf("properties %v, want schema.Fields %v", props, fields)
	}
	if !slices.Equal(required, wantRequired) {
		t.Errorf("required %v, want %v", required, wantRequired)
	}
	for _, f := range Fields {
		var p struct {
			Description string   `json:"description"`
			Enum        []string `json:"enum"`
			Format      string   `json:"format"`
		}
		if err := json.Unmarshal(doc.Properties[string(f)], &p); err != nil {
			t.Fatal(err)
		}
		if p.Description == "" {
			t.Errorf("%s has no description", f)
		}
		if f.Identifier() && !strings.Contains(p.Description, "pseudonym") {
			t.Errorf("%s: description should say it is a pseudonym in snapshots", f)
		}
		switch f {
		case FieldOccurredAt:
			if p.Format != "date-time" {
				t.Errorf("occurred_at format %q", p.Format)
			}
		case FieldEventType:
			var want []string
			for _, et := range EventTypes {
				want = append(want, string(et))
			}
			if !slices.Equal(p.Enum, want) {
				t.Errorf("event_type enum %v, want %v", p.Enum, want)
			}
		}
	}
	// The reader's fixed field table must be the schema's field list.
	if !slices.Equal(fieldsArray[:], Fields) {
		t.Errorf("fieldsArray %v differs from Fields %v", fieldsArray, Fields)
	}
}

// TestJSONSchemaGolden holds the document built from the field table to
// the published bytes: a change to the table that would change the
// document fails here.
func TestJSONSchemaGolden(t *testing.T) {
	want, err := os.ReadFile("testdata/service-event-v1.schema.json")
	if err != nil {
		t.Fatal(err)
	}
	if got := JSONSchema(); !bytes.Equal(got, want) {
		t.Fatalf("JSON Schema built from the field table differs from the published document:\n%s", got)
	}
}
