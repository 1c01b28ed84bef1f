package catalog

import "testing"

// FuzzSelector: ParseSelector never panics, and a selector it takes reads
// back the same from its String. Seeds are below and in
// testdata/fuzz/FuzzSelector.
func FuzzSelector(f *testing.F) {
	for _, s := range []string{"", "latest", "1", "0", "9999999", "12345678", "abc123", "2024-03-01T00:00:00Z", "2024-03-01", "-1", "@@@", "ffffffffffffffffffffffffffffffffffffffffffffffffffffffffffffffff0"} {
		f.Add(s)
	}
	f.Fuzz(func(t *testing.T, text string) {
		sel, err := ParseSelector(text)
		if err != nil {
			return
		}
		again, err := ParseSelector(sel.String())
		if err != nil {
			t.Fatalf("%q parsed, its String %q does not: %v", text, sel.String(), err)
		}
		if again.Kind != sel.Kind || again.Number != sel.Number || again.Prefix != sel.Prefix || !again.At.Equal(sel.At) {
			t.Fatalf("%q: %+v, read back %+v", text, sel, again)
		}
	})
}
