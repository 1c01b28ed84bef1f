package export

import (
	"fmt"
	"strings"

	"github.com/flowcat-catalog/flowcat/catalog"
	"github.com/flowcat-catalog/flowcat/schema"
)

// attributeDictionary describes a version's case attribute table, its
// disclosure figures and its event attributes for DICTIONARY.md; "" when
// the version has none.
func attributeDictionary(m *catalog.Manifest) string {
	ev := eventAttributeDictionary(m)
	at := m.CaseAttributes
	if at == nil {
		return ev
	}
	var b strings.Builder
	fmt.Fprintf(&b, "\n## Case attributes\n\n`%s`: one row per row of the case table, in the same (`case_id`) order, holding the attributes the profile declares (%d cases). Values were generalized at ingest, before anything was stored; a missing value is null.\n\n", catalog.AttributesPath(at.SHA256), at.Rows)
	b.WriteString("| column | type | role | generalization |\n|---|---|---|---|\n")
	b.WriteString("| `case_id` | string | pseudonymized identifier | keyed HMAC, as in the events |\n")
	for _, c := range at.Columns {
		fmt.Fprintf(&b, "| `%s` | %s | %s | %s |\n", c.Name, attrTypeWords(c.Type), c.Role, c.Rule)
	}
	b.WriteString("\nRoles: `quasi` marks a quasi-identifier (with others it could single a person out), `sensitive` a value whose disclosure harms, `plain` neither.\n")
	if d := m.Disclosure; d != nil {
		fmt.Fprintf(&b, "\nDisclosure: the maximum prosecutor re-identification risk over the quasi-identifiers is %.3f (1 over the size of the smallest class of cases equal on all of them)", d.MaxRisk)
		if m.Lineage.Suppressed > 0 {
			fmt.Fprintf(&b, "; the quasi-identifiers of %d cases in classes below the project's k were suppressed", m.Lineage.Suppressed)
		}
		b.WriteString(".\n")
	}
	return b.String() + ev
}

// attrTypeWords is how the dictionary names an attribute's stored type.
func attrTypeWords(t schema.AttrType) string {
	switch t {
	case schema.TypeInteger:
		return "integer (INT64)"
	case schema.TypeDate:
		return "date (Parquet DATE)"
	}
	return "string (UTF-8)"
}

// eventAttributeDictionary describes the event attribute columns of a
// version's snapshot files (the union an export carries); "" when none.
func eventAttributeDictionary(m *catalog.Manifest) string {
	cols, err := exportAttributes(m.Files, Filter{})
	if err != nil || len(cols) == 0 {
		if err != nil {
			return "\n## Event attributes\n\n" + err.Error() + "\n"
		}
		return ""
	}
	with := 0
	for _, f := range m.Files {
		if f.Attributes != nil {
			with++
		}
	}
	var b strings.Builder
	fmt.Fprintf(&b, "\n## Event attributes\n\nColumns of the snapshot files after the schema's fields, one value per event (%d of %d files carry them; in the others, and where an event has none, they are null). Values were generalized at ingest, before anything was stored. They describe an event, not the person: none is a quasi-identifier (those are case attributes), and they are not part of an event's identity.\n\n", with, len(m.Files))
	b.WriteString("| column | type | role | generalization |\n|---|---|---|---|\n")
	for _, c := range cols {
		fmt.Fprintf(&b, "| `%s` | %s | %s | %s |\n", c.Name, attrTypeWords(c.Type), c.Role, c.Rule)
	}
	return b.String()
}
