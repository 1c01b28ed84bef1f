package schema

import (
	"encoding/json"
	"errors"
	"strings"
	"testing"
)

func TestProfileStableEventID(t *testing.T) {
	base := "fields:\n  site: s\n  case_id: c\n  event_type: t\n  occurred_at: at\n"
	p, err := ParseProfile([]byte(base + "  event_id:\n    column: id\n    stable: true\n"))
	if err != nil {
		t.Fatal(err)
	}
	if m := p.Fields[FieldEventID]; !m.Stable || m.Column != "id" {
		t.Errorf("event_id mapping %+v", m)
	}
	plain, err := ParseProfile([]byte(base + "  event_id: id\n"))
	if err != nil {
		t.Fatal(err)
	}
	if plain.Fields[FieldEventID].Stable {
		t.Error("an event_id without stable is stable")
	}
	// A profile that says nothing of stability hashes as before the key existed.
	b, err := json.Marshal(plain)
	if err != nil {
		t.Fatal(err)
	}
	if strings.Contains(string(b), "stable") {
		t.Error("stable: false enters the profile's canonical form")
	}
	for _, tc := range []struct{ yaml, key string }{
		{base + "  event_id:\n    column: id\n    stable: yes please\n", "fields.event_id.stable"},
		{strings.Replace(base, "case_id: c", "case_id:\n    column: c\n    stable: true", 1), "fields.case_id.stable"},
		{base + "  event_id:\n    value: x\n    stable: true\n", "fields.event_id.stable"},
	} {
		_, err := ParseProfile([]byte(tc.yaml))
		var pe *ProfileError
		if !errors.As(err, &pe) || pe.Key != tc.key || pe.Line == 0 {
			t.Errorf("%q: %v, want an error at %s with its line", tc.yaml, err, tc.key)
		}
	}
}
