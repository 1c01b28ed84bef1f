package export

import (
	"fmt"
	"strings"

	"github.com/flowcat-catalog/flowcat/catalog"
)

// attributeDictionary describes a version's case attribute table and its
// disclosure figures for DICTIONARY.md; "" when the version has none.
func attributeDictionary(m *catalog.Manifest) string {
	at := m.CaseAttributes
	if at == nil {
		return ""
	}
	var b strings.Builder
	fmt.Fprintf(&b, "\n## Case attributes\n\n`%s`: one row per row of the case table, in the same (`case_id`) order, holding the attributes the profile declares (%d cases). Values were generalized at ingest, before anything was stored; a missing value is null.\n\n", catalog.AttributesPath(at.SHA256), at.Rows)
	b.WriteString("| column | type | role | generalization |\n|---|---|---|---|\n")
	b.WriteString("| `case_id` | string | pseudonymized identifier | keyed HMAC, as in the events |\n")
	for _, c := range at.Columns {
		typ := "string (UTF-8)"
		switch c.Type {
		case "integer":
			typ = "integer (INT64)"
		case "date":
			typ = "date (Parquet DATE)"
		}
		fmt.Fprintf(&b, "| `%s` | %s | %s | %s |\n", c.Name, typ, c.Role, c.Rule)
	}
	b.WriteString("\nRoles: `quasi` marks a quasi-identifier (with others it could single a person out), `sensitive` a value whose disclosure harms, `plain` neither.\n")
	if d := m.Disclosure; d != nil {
		fmt.Fprintf(&b, "\nDisclosure: the maximum prosecutor re-identification risk over the quasi-identifiers is %.3f (1 over the size of the smallest class of cases equal on all of them)", d.MaxRisk)
		if m.Lineage.Suppressed > 0 {
			fmt.Fprintf(&b, "; the quasi-identifiers of %d cases in classes below the project's k were suppressed", m.Lineage.Suppressed)
		}
		b.WriteString(".\n")
	}
	return b.String()
}
