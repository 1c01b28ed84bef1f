package catalog

import (
	"strings"
	"testing"
	"unicode/utf8"
)

func TestCleanFilename(t *testing.T) {
	long := strings.Repeat("é", 200) // 400 bytes
	for in, want := range map[string]string{
		"export.csv":                 "export.csv",
		"../../etc/passwd":           "passwd",
		`C:\exports\night.csv`:       "night.csv",
		"a\x1b[2Jb.csv":              "a_[2Jb.csv",
		"evil\u202egnp.csv":          "evil_gnp.csv", // right-to-left override
		"line\nbreak\r.csv":          "line_break_.csv",
		"bad\xff\xfeutf8.csv":        "bad__utf8.csv",
		"del\x7f.csv":                "del_.csv",
		"c1\u0085.csv":               "c1_.csv",
		"":                           "",
		"ünïcödé 名前.csv":             "ünïcödé 名前.csv",
		long:                         strings.Repeat("é", 127),
		strings.Repeat("x", 100<<10): strings.Repeat("x", MaxFilenameBytes),
	} {
		got := CleanFilename(in)
		if got != want {
			t.Errorf("CleanFilename(%.40q) = %.60q, want %.60q", in, got, want)
		}
		if len(got) > MaxFilenameBytes || !utf8.ValidString(got) {
			t.Errorf("CleanFilename(%.40q): %d bytes, valid UTF-8 %v", in, len(got), utf8.ValidString(got))
		}
	}
}
