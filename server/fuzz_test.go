package server

import (
	"net/url"
	"strings"
	"testing"
)

// FuzzQuery checks the strict query rule against Go's own parser: a query
// checkQuery accepts parses without error and keeps every non-empty pair
// (nothing dropped silently, the fault of issue 13's item 8); one Go's
// parser refuses, checkQuery refuses too. Seeds are below and in
// testdata/fuzz/FuzzQuery.
func FuzzQuery(f *testing.F) {
	for _, s := range []string{"", "format=csv&site=a", "site=nosuch;x", "bogus;=1", "mode=replace-all;", "a=%zz", "=x", "a&&b=", "a=1&a=2", "x=%3B", "k=v=w", "%20=%20"} {
		f.Add(s)
	}
	f.Fuzz(func(t *testing.T, raw string) {
		err := checkQuery(raw)
		vs, perr := url.ParseQuery(raw)
		if err == nil {
			if perr != nil {
				t.Fatalf("checkQuery took %q, which url.ParseQuery refuses: %v", raw, perr)
			}
			n := 0
			for _, p := range strings.Split(raw, "&") {
				if p != "" {
					n++
				}
			}
			got := 0
			for _, v := range vs {
				got += len(v)
			}
			if raw != "" && got != n {
				t.Fatalf("%q: %d pairs, url.ParseQuery kept %d", raw, n, got)
			}
		} else if !strings.Contains(err.Error(), "query") {
			t.Fatalf("%q: message %q does not say query", raw, err)
		}
	})
}
