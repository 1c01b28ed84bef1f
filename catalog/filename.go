package catalog

import (
	"strings"
	"unicode"
	"unicode/utf8"
)

// MaxFilenameBytes bounds an upload's stored file name.
const MaxFilenameBytes = 255

// CleanFilename is the file name an upload keeps and prints: the base
// name (after / or \), each control or format character (C0, C1, DEL,
// bidirectional overrides; Unicode categories Cc and Cf) and each invalid
// UTF-8 byte replaced by "_", cut to MaxFilenameBytes on a character
// boundary. A terminal or log line that shows it can then be neither
// rewritten nor flooded.
func CleanFilename(name string) string {
	if i := strings.LastIndexAny(name, `/\`); i >= 0 {
		name = name[i+1:]
	}
	var b strings.Builder
	for i, r := range name {
		if r == utf8.RuneError {
			if _, size := utf8.DecodeRuneInString(name[i:]); size <= 1 {
				r = '_'
			}
		}
		if unicode.Is(unicode.Cc, r) || unicode.Is(unicode.Cf, r) {
			r = '_'
		}
		if b.Len()+utf8.RuneLen(r) > MaxFilenameBytes {
			break
		}
		b.WriteRune(r)
	}
	return b.String()
}
