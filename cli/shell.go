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
