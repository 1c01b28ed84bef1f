package synth

import (
	"fmt"
	"strconv"
	"strings"

	"github.com/flowcat-catalog/flowcat/schema"
)

// Profile returns the YAML mapping profile that maps the site's export into
// schema v1, or nil when the scenario has no site with that code. Columns
// the profile does not name (the clinic's free-text Note) are dropped.
func (s *Scenario) Profile(site string) []byte {
	si, _, err := s.Site(site)
	if err != nil {
		return nil
	}
	var b strings.Builder
	fmt.Fprintf(&b, "# Mapping profile of the %s export (synthetic).\n", si.Name)
	fmt.Fprintf(&b, "format: %s\n", si.Format)
	if si.Format == "csv" && si.Delimiter != 0 && si.Delimiter != ',' {
		fmt.Fprintf(&b, "delimiter: %s\n", strconv.Quote(string(si.Delimiter)))
	}
	fmt.Fprintf(&b, "timezone: %s\n", si.Zone)
	b.WriteString("fields:\n")
	q := strconv.Quote
	fmt.Fprintf(&b, "  site: {value: %s}\n", q(si.Code))
	var codes []string
	for _, t := range schema.EventTypes {
		if c, ok := si.Codes[t]; ok {
			codes = append(codes, fmt.Sprintf("%s: %s", c, t))
		}
	}
	eventTypes := "{" + strings.Join(codes, ", ") + "}"
	switch si.Format {
	case "csv":
		b.WriteString("  case_id: \"VisitRef\"\n")
		b.WriteString("  subject_id: \"PatientRef\"\n")
		b.WriteString("  resource_id: \"StaffRef\"\n")
		fmt.Fprintf(&b, "  event_type: {column: \"EvCode\", codes: %s}\n", eventTypes)
		b.WriteString("  activity: {column: \"Step\"}\n")
		b.WriteString("  queue: {column: \"Area\"}\n")
		b.WriteString("  priority: {column: \"Triage\"}\n")
		if si.Layout != "" {
			fmt.Fprintf(&b, "  occurred_at: {column: \"Stamp\", layout: %s}\n", q(si.Layout))
		} else {
			b.WriteString("  occurred_at: {column: \"Stamp\"}\n")
		}
	case "jsonl":
		b.WriteString("  case_id: \"call\"\n")
		b.WriteString("  subject_id: \"caller\"\n")
		b.WriteString("  resource_id: \"nurse\"\n")
		fmt.Fprintf(&b, "  event_type: {column: \"what\", codes: %s}\n", eventTypes)
		if len(si.Steps) == 1 {
			fmt.Fprintf(&b, "  activity: {value: %s}\n", q(si.Steps[0].Name))
		}
		b.WriteString("  queue: {column: \"line\"}\n")
		b.WriteString("  channel: {column: \"channel\"}\n")
		b.WriteString("  outcome: {column: \"disposition\"}\n")
		if si.Layout != "" {
			fmt.Fprintf(&b, "  occurred_at: {column: \"ts\", layout: %s}\n", q(si.Layout))
		} else {
			b.WriteString("  occurred_at: {column: \"ts\"}\n")
		}
	}
	return []byte(b.String())
}
