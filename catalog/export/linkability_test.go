package export

import (
	"strings"
	"testing"

	"github.com/flowcat-catalog/flowcat/catalog"
)

// TestDictionaryLinkability: the dictionary of a version says which
// versions share its pseudonym key generation and which do not.
func TestDictionaryLinkability(t *testing.T) {
	d := &catalog.Dataset{Project: "p", Name: "d", Timezone: "UTC"}
	spans := []catalog.KeySpan{
		{KeyID: "pk-aaaaaaaaaaaa", Generation: 1, Versions: []int{1, 2}},
		{KeyID: "pk-bbbbbbbbbbbb", Generation: 2, Versions: []int{3, 4}},
	}
	v := &catalog.Version{Number: 3, Manifest: &catalog.Manifest{KeyID: "pk-bbbbbbbbbbbb", SchemaVersion: "1"}}
	b, err := dictionary(d, v, nil, spans)
	if err != nil {
		t.Fatal(err)
	}
	got := string(b)
	for _, want := range []string{
		"Linkable with this version (same key generation: an identifier has the same pseudonym): versions 3, 4.",
		"Not linkable (another key generation: the same identifier has an unrelated pseudonym): versions 1, 2 (key `pk-aaaaaaaaaaaa`, generation 1).",
	} {
		if !strings.Contains(got, want) {
			t.Errorf("dictionary lacks %q:\n%s", want, got)
		}
	}
	one, _ := dictionary(d, v, nil, spans[1:])
	if !strings.Contains(string(one), "Every version of the dataset is of this key generation.") {
		t.Errorf("single generation:\n%s", one)
	}
	rule, _ := dictionary(d, v, nil, nil)
	if !strings.Contains(string(rule), "versions naming another key id are not") {
		t.Errorf("no spans:\n%s", rule)
	}
}
