package schema

import (
	"encoding/json"
	"errors"
	"strings"
	"testing"
)

// TestProfileCapacity: capacities by queue and by resource pseudonym;
// a resource named by anything but a pseudonym is refused without being
// quoted (it may be a raw id), as are numbers out of range.
func TestProfileCapacity(t *testing.T) {
	const base = "fields:\n  site: s\n  case_id: c\n  event_type: t\n  occurred_at: at\n"
	const pseud = "abcdefghijklmnopqrstuvwxy4"
	p, err := ParseProfile([]byte("resource_capacity: 2\ncapacity:\n  queues: {chat: 3, phone: 1}\n  resources:\n    " + pseud + ": 5\n" + base))
	if err != nil {
		t.Fatal(err)
	}
	c := p.Capacity
	for _, tc := range []struct {
		res, queue string
		want       int
	}{{pseud, "chat", 5}, {"other", "chat", 3}, {"other", "phone", 1}, {"other", "walk-in", 2}, {"", "", 2}} {
		if got := c.Of(tc.res, tc.queue, p.ResourceCapacity); got != tc.want {
			t.Errorf("capacity of %q from %q: %d, want %d", tc.res, tc.queue, got, tc.want)
		}
	}
	if (*Capacity)(nil).Of("x", "y", 1) != 1 {
		t.Error("no capacity declared: not the default")
	}
	for _, tc := range []struct{ yaml, key, not string }{
		{"capacity:\n  resources: {PATIENT-4711: 2}\n", "capacity.resources", "PATIENT-4711"},
		{"capacity:\n  resources: {" + pseud + ": 0}\n", "capacity.resources", ""},
		{"capacity:\n  queues: {chat: lots}\n", "capacity.queues.chat", ""},
		{"capacity:\n  queues: {chat: 1001}\n", "capacity.queues.chat", ""},
		{"capacity:\n  desks: {a: 1}\n", "capacity.desks", ""},
		{"capacity: 3\n", "capacity", ""},
	} {
		_, err := ParseProfile([]byte(tc.yaml + base))
		var pe *ProfileError
		if !errors.As(err, &pe) || pe.Key != tc.key || pe.Line == 0 {
			t.Errorf("%q: %v, want an error at %s with its line", tc.yaml, err, tc.key)
			continue
		}
		if tc.not != "" && strings.Contains(err.Error(), tc.not) {
			t.Errorf("%q: the error quotes the resource key: %v", tc.yaml, err)
		}
	}
	// A profile without capacities hashes as before the key existed.
	q, err := ParseProfile([]byte(base))
	if err != nil {
		t.Fatal(err)
	}
	b, _ := json.Marshal(q)
	if q.Capacity != nil || strings.Contains(string(b), "capacity\"") {
		t.Error("no capacity: the profile's canonical form changed")
	}
}
