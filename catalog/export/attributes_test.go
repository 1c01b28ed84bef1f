package export

import (
	"strings"
	"testing"

	"github.com/flowcat-catalog/flowcat/catalog"
	"github.com/flowcat-catalog/flowcat/schema"
)

func TestAttributeDictionary(t *testing.T) {
	if s := attributeDictionary(&catalog.Manifest{}); s != "" {
		t.Errorf("a version without attributes: %q", s)
	}
	a := schema.Attribute{Name: "age", Type: schema.TypeAge, Role: schema.RoleQuasi, Band: 10}
	m := &catalog.Manifest{
		CaseAttributes: &catalog.AttributeTable{Rows: 8, Columns: []catalog.AttributeColumn{
			{Name: "age", Type: schema.TypeAge, Role: schema.RoleQuasi, Rule: a.Rule()},
			{Name: "admitted", Type: schema.TypeDate, Role: schema.RolePlain, Rule: "date truncated to the first day of its month"},
		}},
		Disclosure: &catalog.DisclosureRef{MaxRisk: 1.0 / 3},
		Lineage:    catalog.Lineage{Suppressed: 6},
	}
	s := attributeDictionary(m)
	for _, want := range []string{
		"| `age` | string (UTF-8) | quasi | age in 10-year bands, 90 and over as one group (90+) |",
		"| `admitted` | date (Parquet DATE) | plain |",
		"(8 cases)", "risk over the quasi-identifiers is 0.333", "of 6 cases in classes below",
	} {
		if !strings.Contains(s, want) {
			t.Errorf("the dictionary lacks %q:\n%s", want, s)
		}
	}
}

func TestEventAttributeDictionary(t *testing.T) {
	cols := catalog.AttributeColumns{
		{Name: "caller_age", Type: schema.TypeAge, Role: schema.RoleSensitive, Rule: "age in 5-year bands, 90 and over as one group (90+)"},
		{Name: "counter", Type: schema.TypeInteger, Role: schema.RolePlain, Rule: "as given"},
	}
	m := &catalog.Manifest{Files: []catalog.FileEntry{{Attributes: &cols}, {}}}
	s := attributeDictionary(m)
	for _, want := range []string{
		"## Event attributes", "(1 of 2 files carry them",
		"| `caller_age` | string (UTF-8) | sensitive | age in 5-year bands, 90 and over as one group (90+) |",
		"| `counter` | integer (INT64) | plain | as given |",
	} {
		if !strings.Contains(s, want) {
			t.Errorf("the dictionary lacks %q:\n%s", want, s)
		}
	}
	if strings.Contains(s, "## Case attributes") {
		t.Error("a case attribute section without case attributes")
	}
}
