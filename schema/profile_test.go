package schema

import (
	"encoding/json"
	"errors"
	"os"
	"strings"
	"testing"
	"time"

	"github.com/goccy/go-yaml/lexer"
)

const fullProfile = `
format: csv            # the default
delimiter: ";"
quote: '"'
timezone: Europe/Amsterdam
local_time:
  ambiguous: earlier
  nonexistent: later
fields:
  site: {value: "north-clinic"}
  case_id: "Visit No"
  event_type:
    column: "Code"
    codes: {ARR: arrival, TRI: start, 01: complete}
    default: departure
  occurred_at:
    column: "When"
    layout: "%Y/%m/%d %H:%M:%S.%f"
  activity: {column: "Step", codes: {T: triage}}
`

func TestParseProfileFull(t *testing.T) {
	p, err := ParseProfile([]byte(fullProfile))
	if err != nil {
		t.Fatal(err)
	}
	if p.Format != FormatCSV || p.Delimiter != ";" || p.Quote != `"` || p.Timezone != "Europe/Amsterdam" {
		t.Errorf("header settings: %+v", p)
	}
	if p.Location().String() != "Europe/Amsterdam" {
		t.Errorf("Location = %v", p.Location())
	}
	if p.LocalTime != (LocalTimePolicy{Ambiguous: AmbiguousEarlier, Nonexistent: NonexistentLater}) {
		t.Errorf("local_time = %+v", p.LocalTime)
	}
	want := map[Field]Mapping{
		FieldSite:       {Value: "north-clinic"},
		FieldCaseID:     {Column: "Visit No"},
		FieldEventType:  {Column: "Code", Codes: map[string]string{"ARR": "arrival", "TRI": "start", "01": "complete"}, Default: "departure"},
		FieldOccurredAt: {Column: "When", Layout: "%Y/%m/%d %H:%M:%S.%f"},
		FieldActivity:   {Column: "Step", Codes: map[string]string{"T": "triage"}},
	}
	if len(p.Fields) != len(want) {
		t.Fatalf("fields %v", p.Fields)
	}
	for f, w := range want {
		g := p.Fields[f]
		if g.Column != w.Column || g.Value != w.Value || g.Default != w.Default || g.Layout != w.Layout || len(g.Codes) != len(w.Codes) {
			t.Errorf("%s = %+v, want %+v", f, g, w)
		}
		for k, v := range w.Codes {
			if g.Codes[k] != v {
				t.Errorf("%s code %q = %q, want %q", f, k, g.Codes[k], v)
			}
		}
	}
}

func TestParseProfileDefaults(t *testing.T) {
	p, err := ParseProfile([]byte("fields: {site: {value: s}, case_id: c, event_type: e, occurred_at: t}\n"))
	if err != nil {
		t.Fatal(err)
	}
	if p.Format != FormatCSV || p.Delimiter != "," || p.Quote != `"` || p.Timezone != "UTC" || p.Location() != time.UTC {
		t.Errorf("defaults: %+v", p)
	}
	if p.LocalTime != (LocalTimePolicy{Ambiguous: AmbiguousReject, Nonexistent: NonexistentReject}) {
		t.Errorf("local_time defaults %+v", p.LocalTime)
	}
	for in, want := range map[string]string{"format: tsv\n": "\t", "delimiter: '\\t'\n": "\t", "delimiter: \"\\t\"\n": "\t", "delimiter: '|'\n": "|"} {
		p, err := ParseProfile([]byte(in + "fields: {site: {value: s}, case_id: c, event_type: e, occurred_at: t}\n"))
		if err != nil {
			t.Errorf("%q: %v", in, err)
			continue
		}
		if p.Delimiter != want {
			t.Errorf("%q: delimiter %q, want %q", in, p.Delimiter, want)
		}
	}
}

func TestParseProfileErrors(t *testing.T) {
	const base = "fields:\n  site: {value: s}\n  case_id: c\n  event_type: e\n  occurred_at: t\n"
	tests := []struct {
		name string
		yaml string
		line int
		key  string
		msg  string // a piece of the message
	}{
		{"empty", "", 0, "", "empty"},
		{"not yaml", "fields: [a\n", 1, "", "YAML"},
		{"unknown top key", "formatt: csv\n" + base, 1, "formatt", "unknown key"},
		{"unknown field", base + "  age: Age\n", 6, "fields.age", "not a schema field"},
		{"unknown field key", "fields:\n  site: {value: s}\n  case_id: {column: c, colum: d}\n  event_type: e\n  occurred_at: t\n", 3, "fields.case_id.colum", "unknown key"},
		{"both column and value", "fields:\n  site: {value: s, column: x}\n  case_id: c\n  event_type: e\n  occurred_at: t\n", 2, "fields.site", "exactly one"},
		{"neither column nor value", "fields:\n  site: {codes: {a: b}}\n  case_id: c\n  event_type: e\n  occurred_at: t\n", 2, "fields.site", "exactly one"},
		{"required unmapped", "fields:\n  site: {value: s}\n  case_id: c\n  event_type: e\n", 1, "fields", "occurred_at"},
		{"no fields", "format: csv\n", 0, "fields", "missing"},
		{"bad zone", "timezone: Europe/Atlantis\n" + base, 1, "timezone", "time zone"},
		{"bad format", "format: xlsx\n" + base, 1, "format", "unknown format"},
		{"long delimiter", "delimiter: ';;'\n" + base, 1, "delimiter", "one character"},
		{"quote delimiter", "delimiter: '\"'\n" + base, 1, "delimiter", "one character"},
		{"bad quote", "quote: \"'\"\n" + base, 1, "quote", "RFC 4180"},
		{"quote none", "quote: none\n" + base, 1, "quote", "RFC 4180"},
		{"codes equal once trimmed", "fields:\n  site: {value: s}\n  case_id: c\n  event_type: {column: e, codes: {\"A\": arrival, \"A \": start}}\n  occurred_at: t\n", 4, "fields.event_type.codes.A ", "twice"},
		// A column that is an identifier's cannot feed another field, which
		// would keep or quote the raw identifier.
		{"identifier column reused as site", "fields:\n  site: c\n  case_id: c\n  event_type: e\n  occurred_at: t\n", 2, "fields.site", "identifier"},
		{"identifier column reused as activity", "fields:\n  site: {value: s}\n  case_id: c\n  subject_id: p\n  activity: {column: p, codes: {x: y}}\n  event_type: e\n  occurred_at: t\n", 5, "fields.activity", "identifier"},
		{"tsv with comma", "format: tsv\ndelimiter: ','\n" + base, 2, "delimiter", "tab"},
		{"jsonl with delimiter", "format: jsonl\ndelimiter: ','\n" + base, 2, "delimiter", "only for csv"},
		{"bad ambiguous", "local_time: {ambiguous: first}\n" + base, 1, "local_time.ambiguous", "earlier"},
		{"bad nonexistent", "local_time: {nonexistent: earlier}\n" + base, 1, "local_time.nonexistent", "reject or later"},
		{"unknown local_time key", "local_time: {gap: later}\n" + base, 1, "local_time.gap", "unknown key"},
		{"unknown layout directive", "fields:\n  site: {value: s}\n  case_id: c\n  event_type: e\n  occurred_at: {column: t, layout: '%Y-%m-%d %Q'}\n", 5, "fields.occurred_at.layout", "%Q"},
		{"layout without year", "fields:\n  site: {value: s}\n  case_id: c\n  event_type: e\n  occurred_at: {column: t, layout: '%H:%M'}\n", 5, "fields.occurred_at.layout", "no year"},
		{"layout on other field", "fields:\n  site: {value: s}\n  case_id: {column: c, layout: '%Y'}\n  event_type: e\n  occurred_at: t\n", 3, "fields.case_id.layout", "only to occurred_at"},
		{"code to bad event type", "fields:\n  site: {value: s}\n  case_id: c\n  event_type: {column: e, codes: {A: arrived}}\n  occurred_at: t\n", 4, "fields.event_type.codes", "not an event type"},
		{"bad event type default", "fields:\n  site: {value: s}\n  case_id: c\n  event_type: {column: e, codes: {A: arrival}, default: gone}\n  occurred_at: t\n", 4, "fields.event_type.default", "not an event type"},
		{"bad event type constant", "fields:\n  site: {value: s}\n  case_id: c\n  event_type: {value: came}\n  occurred_at: t\n", 4, "fields.event_type.value", "not an event type"},
		{"default without codes", "fields:\n  site: {value: s}\n  case_id: c\n  event_type: {column: e, default: arrival}\n  occurred_at: t\n", 4, "fields.event_type.default", "add codes"},
		{"constant time", "fields:\n  site: {value: s}\n  case_id: c\n  event_type: e\n  occurred_at: {value: '2021-01-01'}\n", 5, "fields.occurred_at", "column"},
		{"duplicate key", "fields:\n  site: {value: s}\n  case_id: c\n  case_id: d\n  event_type: e\n  occurred_at: t\n", 4, "", ""},
		{"field is a list", "fields:\n  site: [a, b]\n  case_id: c\n  event_type: e\n  occurred_at: t\n", 2, "fields.site", "single value"},
		{"null field", "fields:\n  site:\n  case_id: c\n  event_type: e\n  occurred_at: t\n", 2, "fields.site", "no value"},
		{"two documents", base + "---\n" + base, 7, "", "one YAML document"},
	}
	for _, tc := range tests {
		_, err := ParseProfile([]byte(tc.yaml))
		if err == nil {
			t.Errorf("%s: no error", tc.name)
			continue
		}
		if !errors.Is(err, ErrInvalidProfile) {
			t.Errorf("%s: %v does not wrap ErrInvalidProfile", tc.name, err)
		}
		var pe *ProfileError
		if !errors.As(err, &pe) {
			t.Errorf("%s: %T is not a *ProfileError", tc.name, err)
			continue
		}
		if pe.Line != tc.line {
			t.Errorf("%s: line %d, want %d (%v)", tc.name, pe.Line, tc.line, err)
		}
		if tc.key != "" && pe.Key != tc.key {
			t.Errorf("%s: key %q, want %q (%v)", tc.name, pe.Key, tc.key, err)
		}
		if !strings.Contains(pe.Msg, tc.msg) {
			t.Errorf("%s: message %q lacks %q", tc.name, pe.Msg, tc.msg)
		}
	}
}

func TestProfileHash(t *testing.T) {
	a, err := ParseProfile([]byte(fullProfile))
	if err != nil {
		t.Fatal(err)
	}
	// The same profile written differently: other key order, flow style,
	// defaults spelled out, comments.
	b, err := ParseProfile([]byte(`
fields:
  activity:
    codes: {T: triage}
    column: Step
  occurred_at: {layout: "%Y/%m/%d %H:%M:%S.%f", column: When}
  event_type: {default: departure, codes: {TRI: start, "01": complete, ARR: arrival}, column: Code}
  case_id: {column: "Visit No"}
  site: {value: north-clinic}
local_time: {nonexistent: later, ambiguous: earlier}
timezone: "Europe/Amsterdam"
delimiter: ';'
`))
	if err != nil {
		t.Fatal(err)
	}
	if a.Hash() != b.Hash() {
		t.Errorf("equal profiles hash differently: %s vs %s", a.Hash(), b.Hash())
	}
	if len(a.Hash()) != 64 {
		t.Errorf("hash %q is not hex sha256", a.Hash())
	}
	c, err := ParseProfile([]byte(strings.Replace(fullProfile, "TRI: start", "TRI: enqueue", 1)))
	if err != nil {
		t.Fatal(err)
	}
	if c.Hash() == a.Hash() {
		t.Error("different codes hash equal")
	}
	if h1, h2 := DefaultProfile().Hash(), DefaultProfile().Hash(); h1 != h2 || h1 == a.Hash() {
		t.Error("default profile hash unstable or colliding")
	}
}

func TestDefaultProfile(t *testing.T) {
	p := DefaultProfile()
	if p.Format != FormatCSV || p.Delimiter != "," || p.Location() != time.UTC {
		t.Errorf("%+v", p)
	}
	for _, f := range Fields {
		m, ok := p.Fields[f]
		if !ok || m.Column != string(f) || m.Optional == f.Required() {
			t.Errorf("%s: %+v", f, m)
		}
	}
	if err := p.validate(nil); err != nil {
		t.Errorf("default profile does not validate: %v", err)
	}
}

func TestSepsisProfileParses(t *testing.T) {
	data, err := os.ReadFile("../testdata/sepsis/profile.yaml")
	if err != nil {
		t.Fatal(err)
	}
	p, err := ParseProfile(data)
	if err != nil {
		t.Fatal(err)
	}
	if p.Delimiter != ";" || p.Timezone != "Europe/Amsterdam" || p.Fields[FieldOccurredAt].Layout != "%Y/%m/%d %H:%M:%S.%f" {
		t.Errorf("%+v", p)
	}
}

func TestProfileTerminal(t *testing.T) {
	base := "fields:\n  site: {value: s}\n  case_id: c\n  event_type: t\n  occurred_at: at\n"
	p, err := ParseProfile([]byte("terminal: [complete, transfer]\n" + base))
	if err != nil {
		t.Fatal(err)
	}
	if len(p.Terminal) != 2 || p.Terminal[0] != Complete || p.Terminal[1] != Transfer {
		t.Errorf("terminal %v", p.Terminal)
	}
	if p, err := ParseProfile([]byte("terminal: complete\n" + base)); err != nil || len(p.Terminal) != 1 {
		t.Errorf("one terminal type: %v %v", p, err)
	}
	// A profile without terminal hashes as before (the key is omitted).
	q, err := ParseProfile([]byte(base))
	if err != nil {
		t.Fatal(err)
	}
	if strings.Contains(string(mustJSON(t, q)), "terminal") {
		t.Error("terminal key in a profile without one")
	}
	if p, err := ParseProfile([]byte("resource_capacity: 3\n" + base)); err != nil || p.ResourceCapacity != 3 {
		t.Errorf("resource_capacity: %v %v", p, err)
	}
	if p, err := ParseProfile([]byte("max_case_days: 400\n" + base)); err != nil || p.MaxCaseDays != 400 || p.MaxCase() != 400*24*time.Hour {
		t.Errorf("max_case_days: %v %v", p, err)
	}
	if strings.Contains(string(mustJSON(t, q)), "max_case_days") {
		t.Error("max_case_days key in a profile without one")
	}
	for _, bad := range []string{"terminal: [arrival]\n", "terminal: [closed]\n", "terminal: [enqueue]\n", "resource_capacity: 0\n", "resource_capacity: two\n",
		"max_case_days: 0\n", "max_case_days: 36501\n", "max_case_days: 30d\n"} {
		_, err := ParseProfile([]byte(bad + base))
		var pe *ProfileError
		key := strings.SplitN(bad, ":", 2)[0]
		if !errors.As(err, &pe) || pe.Key != key || !strings.Contains(err.Error(), key) {
			t.Errorf("%q: %v, want an error naming %s", bad, err, key)
		}
	}
}

func mustJSON(t *testing.T, v any) []byte {
	t.Helper()
	b, err := json.Marshal(v)
	if err != nil {
		t.Fatal(err)
	}
	return b
}

// TestProfileLimits: an oversized or deeply nested profile is refused by
// name before the YAML parser sees it; the depth of ordinary profiles is
// well inside the limit.
func TestProfileLimits(t *testing.T) {
	deep := func(unit string, n int) string { return "fields: " + strings.Repeat(unit, n) + "x" }
	var indent strings.Builder
	indent.WriteString("fields:\n")
	for i := 1; i < 40; i++ {
		indent.WriteString(strings.Repeat(" ", i) + "k:\n")
	}
	for _, tc := range []struct {
		name string
		yaml string
		msg  string
	}{
		{"too large", "# " + strings.Repeat("x", DefaultProfileBytes) + "\n" + testProfileYAML, "max profile bytes"},
		{"block sequences", deep("- ", 80000), "max profile depth"},
		{"flow sequences", deep("[", 80000), "max profile depth"},
		{"flow mappings", deep("{a: ", 50000), "max profile depth"},
		{"indented mappings", indent.String(), "max profile depth"},
	} {
		_, err := ParseProfile([]byte(tc.yaml))
		var pe *ProfileError
		if !errors.As(err, &pe) || !strings.Contains(pe.Msg, tc.msg) || !errors.Is(err, ErrInvalidProfile) {
			t.Errorf("%s: got %v, want a profile error naming %q", tc.name, err, tc.msg)
		}
	}
	// Ordinary profiles, in block and in flow style, pass.
	for _, y := range []string{testProfileYAML, exampleProfileFlow} {
		if d, _ := yamlDepth(lexer.Tokenize(y)); d > 6 {
			t.Errorf("an ordinary profile measures depth %d", d)
		}
		if _, err := ParseProfile([]byte(y)); err != nil {
			t.Error(err)
		}
	}
	if _, err := ParseProfileLimits([]byte(testProfileYAML), ProfileLimits{MaxDepth: 2}); err == nil || !strings.Contains(err.Error(), "deeper than 2 levels") {
		t.Errorf("a set depth limit: %v", err)
	}
}

const exampleProfileFlow = `{format: csv, timezone: UTC, fields: {site: {value: s}, case_id: c, event_type: {column: t, codes: {A: arrival}}, occurred_at: {column: at, layout: "%Y-%m-%d"}}}`

// TestProfileCheckOrder pins the order of the profile's checks: with two
// problems, the one of the earlier concern (format, time, fields and
// their mappings, identifier columns, required fields, limits, terminal
// types) is the one reported.
func TestProfileCheckOrder(t *testing.T) {
	const base = "fields:\n  site: {value: s}\n  case_id: c\n  event_type: e\n  occurred_at: t\n"
	const noTime = "fields:\n  site: {value: s}\n  case_id: c\n  event_type: e\n"
	tests := []struct {
		name, yaml, key string
	}{
		{"format before time", "format: xlsx\ntimezone: Europe/Atlantis\n" + base, "format"},
		{"delimiter before quote", "delimiter: ';;'\nquote: none\n" + base, "delimiter"},
		{"multiline lines before bytes", "multiline: {max_lines: 1, max_bytes: 999999999}\n" + base, "multiline.max_lines"},
		{"time before fields", "timezone: Europe/Atlantis\nfields:\n  site: {value: s, column: x}\n  case_id: c\n  event_type: e\n  occurred_at: t\n", "timezone"},
		{"ambiguous before nonexistent", "local_time: {ambiguous: first, nonexistent: earlier}\n" + base, "local_time.ambiguous"},
		{"fields in schema order", "fields:\n  site: {value: s}\n  case_id: {column: c, layout: '%Y'}\n  event_type: {value: came}\n  occurred_at: t\n", "fields.case_id.layout"},
		{"source before layout", "fields:\n  site: {value: s}\n  case_id: c\n  event_type: e\n  occurred_at: {value: '2021', layout: '%Q'}\n", "fields.occurred_at"},
		{"layout before stable", "fields:\n  site: {value: s}\n  case_id: {column: c, layout: '%Y', stable: true}\n  event_type: e\n  occurred_at: t\n", "fields.case_id.layout"},
		{"stable before default", "fields:\n  site: {value: s}\n  case_id: {column: c, stable: true, default: x}\n  event_type: e\n  occurred_at: t\n", "fields.case_id.stable"},
		{"mapping before identifier column", "fields:\n  site: c\n  case_id: c\n  event_type: {value: came}\n  occurred_at: t\n", "fields.event_type.value"},
		{"identifier column before required", "fields:\n  site: c\n  case_id: c\n  event_type: e\n", "fields.site"},
		{"required before terminal", "terminal: [arrival]\n" + noTime, "fields"},
		{"resource capacity before case days", "resource_capacity: -1\nmax_case_days: -1\n" + base, "resource_capacity"},
		{"case days before terminal", "max_case_days: -1\nterminal: [arrival]\n" + base, "max_case_days"},
	}
	for _, tc := range tests {
		_, err := ParseProfile([]byte(tc.yaml))
		var pe *ProfileError
		if !errors.As(err, &pe) {
			t.Errorf("%s: %v is not a *ProfileError", tc.name, err)
			continue
		}
		if pe.Key != tc.key {
			t.Errorf("%s: key %q, want %q (%v)", tc.name, pe.Key, tc.key, err)
		}
	}
}

// TestProfileValidateChecks covers checks that the YAML cases above do not
// reach: a profile built in Go goes through validate alone.
func TestProfileValidateChecks(t *testing.T) {
	const base = "fields:\n  site: {value: s}\n  case_id: c\n  event_type: e\n  occurred_at: t\n"
	for _, tc := range []struct{ name, yaml, key, msg string }{
		{"jsonl with quote", "format: jsonl\nquote: '\"'\n" + base, "quote", "only for csv"},
		{"xes with multiline", "format: xes\nmultiline: {max_lines: 3}\n" + base, "multiline", "only for csv"},
		{"constant with codes", "fields:\n  site: {value: s, codes: {a: b}}\n  case_id: c\n  event_type: e\n  occurred_at: t\n", "fields.site", "not to a constant"},
		{"time with codes", "fields:\n  site: {value: s}\n  case_id: c\n  event_type: e\n  occurred_at: {column: t, codes: {a: b}}\n", "fields.occurred_at", "do not apply to occurred_at"},
	} {
		_, err := ParseProfile([]byte(tc.yaml))
		var pe *ProfileError
		if !errors.As(err, &pe) || pe.Key != tc.key || !strings.Contains(pe.Msg, tc.msg) {
			t.Errorf("%s: %v, want key %q and %q", tc.name, err, tc.key, tc.msg)
		}
	}
	mapped := func() map[Field]Mapping {
		return map[Field]Mapping{FieldSite: {Value: "s"}, FieldCaseID: {Column: "c"}, FieldEventType: {Column: "e"}, FieldOccurredAt: {Column: "t"}}
	}
	for _, tc := range []struct {
		name string
		p    Profile
		key  string
	}{
		{"multiline bytes", Profile{Fields: mapped(), Multiline: &Multiline{MaxBytes: maxMultilineBytes + 1}}, "multiline.max_bytes"},
		{"unknown field", Profile{Fields: map[Field]Mapping{"age": {Column: "a"}}}, "fields.age"},
		{"resource capacity", Profile{Fields: mapped(), ResourceCapacity: MaxCapacity + 1}, "resource_capacity"},
		{"case days", Profile{Fields: mapped(), MaxCaseDays: -1}, "max_case_days"},
		{"optional required field", Profile{Fields: map[Field]Mapping{FieldSite: {Value: "s"}, FieldCaseID: {Column: "c", Optional: true}, FieldEventType: {Column: "e"}, FieldOccurredAt: {Column: "t"}}}, "fields.case_id"},
	} {
		err := tc.p.validate(nil)
		var pe *ProfileError
		if !errors.As(err, &pe) || pe.Key != tc.key {
			t.Errorf("%s: %v, want key %q", tc.name, err, tc.key)
		}
	}
	// A valid profile built in Go comes out with its defaults filled in.
	p := Profile{Fields: mapped()}
	if err := p.validate(nil); err != nil || p.Format != FormatCSV || p.Delimiter != "," || p.Timezone != "UTC" {
		t.Errorf("defaults: %v, %+v", err, p)
	}
}
