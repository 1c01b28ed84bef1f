package anonymize

import (
	"fmt"
	"testing"
	"time"

	"github.com/flowcat-catalog/flowcat/schema"
)

func fixedPseudonymizer() *Pseudonymizer {
	key := make([]byte, 32)
	for i := range key {
		key[i] = byte(i)
	}
	return newPseudonymizer("pk-test", key)
}

// TestPseudonymVectors pins the scheme documented in doc.go. The expected
// values were computed outside Go, with Python's hmac, hashlib.sha256 and
// base64.b32encode (lower-cased, padding stripped) over
// b"flowcat/v1/" + field + b"\x00" + raw under key bytes 0x00..0x1f.
func TestPseudonymVectors(t *testing.T) {
	p := fixedPseudonymizer()
	tests := []struct {
		field     schema.Field
		raw, want string
	}{
		{schema.FieldCaseID, "C-1001", "rbvhhh4uskvac45sfoziw4kvpe"},
		{schema.FieldSubjectID, "C-1001", "vmxnqx7vzs72mnkz4ru3kebu2y"},
		{schema.FieldResourceID, "nurse-7", "2iuzj5t567rh4llf2ikiy2fl7a"},
		{schema.FieldCaseID, "", ""},
	}
	for _, tt := range tests {
		if got := p.Pseudonym(tt.field, tt.raw); got != tt.want {
			t.Errorf("%s: got %q, want %q", tt.field, got, tt.want)
		}
	}
}

func TestPseudonymProperties(t *testing.T) {
	mk := testKey()
	skA, err := NewProjectKey(mk, "site-a")
	if err != nil {
		t.Fatal(err)
	}
	skB, err := NewProjectKey(mk, "site-b")
	if err != nil {
		t.Fatal(err)
	}
	a1, _ := OpenProjectKey(mk, "site-a", skA)
	a2, _ := OpenProjectKey(mk, "site-a", skA)
	b, _ := OpenProjectKey(mk, "site-b", skB)

	seen := map[string]string{}
	for i := 0; i < 2000; i++ {
		raw := fmt.Sprintf("MRN%07d", i)
		for _, f := range []schema.Field{schema.FieldCaseID, schema.FieldSubjectID, schema.FieldResourceID} {
			pa := a1.Pseudonym(f, raw)
			if len(pa) != PseudonymLen || !IsPseudonym(pa) {
				t.Fatalf("pseudonym %q: wrong length or alphabet", pa)
			}
			if pa != a2.Pseudonym(f, raw) {
				t.Fatal("same project key, different pseudonym")
			}
			if pa == b.Pseudonym(f, raw) {
				t.Fatal("other project, same pseudonym")
			}
			if prev, dup := seen[pa]; dup {
				t.Fatalf("collision between %s and %s/%s", prev, f, raw)
			}
			seen[pa] = string(f) + "/" + raw
		}
		if a1.Pseudonym(schema.FieldCaseID, raw) == a1.Pseudonym(schema.FieldSubjectID, raw) {
			t.Fatal("case_id and subject_id domains agree")
		}
	}
	if got := a1.Pseudonym(schema.FieldCaseID, ""); got != "" {
		t.Fatalf("empty raw gave %q", got)
	}
	c := a1.Clone()
	if c.KeyID() != a1.KeyID() || c.Pseudonym(schema.FieldCaseID, "z") != a1.Pseudonym(schema.FieldCaseID, "z") {
		t.Fatal("Clone differs")
	}
}

func TestApply(t *testing.T) {
	p := fixedPseudonymizer()
	at := time.Date(2025, 3, 1, 8, 0, 0, 0, time.UTC)
	e := schema.Event{Site: "north", CaseID: "C-1001", SubjectID: "", ResourceID: "nurse-7",
		Type: schema.Arrival, Queue: "triage", OccurredAt: at, EventID: "ev-1"}
	p.Apply(&e)
	want := schema.Event{Site: "north", CaseID: "rbvhhh4uskvac45sfoziw4kvpe", SubjectID: "",
		ResourceID: "2iuzj5t567rh4llf2ikiy2fl7a", Type: schema.Arrival, Queue: "triage",
		OccurredAt: at, EventID: "ev-1"}
	if e != want {
		t.Fatalf("got %+v\nwant %+v", e, want)
	}
}

func TestIsPseudonym(t *testing.T) {
	p := fixedPseudonymizer()
	good := p.Pseudonym(schema.FieldCaseID, "C-1001")
	tests := []struct {
		s    string
		want bool
	}{
		{good, true},
		{good[:25], false},
		{good + "a", false},
		{"RBVHHH4USKVAC45SFOZIW4KVPE", false}, // upper case
		{"rbvhhh4uskvac45sfoziw4kvp1", false}, // '1' is not in the alphabet
		{"rbvhhh4uskvac45sfoziw4kvpf", false}, // last character carries non-zero padding bits
		{"", false},
	}
	for _, tt := range tests {
		if got := IsPseudonym(tt.s); got != tt.want {
			t.Errorf("IsPseudonym(%q) = %v, want %v", tt.s, got, tt.want)
		}
	}
}

func TestPseudonymAllocations(t *testing.T) {
	p := fixedPseudonymizer()
	e := schema.Event{CaseID: "C-1001", SubjectID: "S-77", ResourceID: "nurse-7"}
	allocs := testing.AllocsPerRun(100, func() {
		ev := e
		p.Apply(&ev)
	})
	// One allocation per result string is the floor.
	if allocs > 3 {
		t.Fatalf("Apply allocates %.1f times, want at most 3", allocs)
	}
}

func BenchmarkApply(b *testing.B) {
	p := fixedPseudonymizer()
	events := make([]schema.Event, 1024)
	for i := range events {
		events[i] = schema.Event{
			CaseID:     fmt.Sprintf("C-%08d", i),
			SubjectID:  fmt.Sprintf("MRN%07d", i*7),
			ResourceID: fmt.Sprintf("staff-%03d", i%50),
		}
	}
	b.ReportAllocs()
	b.ResetTimer()
	for i := 0; b.Loop(); i++ {
		e := events[i%len(events)]
		p.Apply(&e)
	}
}
