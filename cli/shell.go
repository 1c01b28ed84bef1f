package cli

import "strings"

// shellQuote quotes s for a POSIX shell when it holds anything but
// letters, digits and the few marks that are safe unquoted, so that a
// printed command runs as printed.
func shellQuote(s string) string {
	if s != "" && strings.Trim(s, "abcdefghijklmnopqrstuvwxyzABCDEFGHIJKLMNOPQRSTUVWXYZ0123456789-_./:=@%+,") == "" {
		return s
	}
	return "'" + strings.ReplaceAll(s, "'", `'\''`) + "'"
}

// wrap breaks s into lines of at most width columns (runes) at spaces,
// each line after the first starting with indent. A word longer than
// the width stays whole on its own line.
func wrap(s string, width int, indent string) string {
	var b strings.Builder
	col := 0
	for i, w := range strings.Fields(s) {
		n := len([]rune(w))
		switch {
		case i == 0:
		case col+1+n > width:
			b.WriteString("\n" + indent)
			col = len([]rune(indent))
		default:
			b.WriteByte(' ')
			col++
		}
		b.WriteString(w)
		col += n
	}
	return b.String()
}
