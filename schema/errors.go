package schema

import (
	"errors"
	"fmt"
)

// FileError is a problem that stops the reading of a whole file: nothing of
// the file may be stored. Line and Column locate it when they are known
// (Line 0 means the file as a whole). Rule is a stable code; Msg is a plain
// sentence that never holds the raw value of an identifier column.
type FileError struct {
	Line   int64
	Column string
	Rule   string
	Msg    string
	Err    error // underlying cause, if any
}

// File-level rules.
const (
	RuleEmptyFile       = "empty_file"       // no bytes, or no header
	RuleNoRows          = "no_rows"          // a header but no data rows
	RuleMissingColumn   = "missing_column"   // a column the profile (or schema) needs is not in the header
	RuleDuplicateColumn = "duplicate_column" // a header names a column twice
	RuleEncoding        = "encoding"         // bytes are not valid UTF-8
	RuleCompression     = "compression"      // a gzip stream is corrupt or truncated
	RuleSyntax          = "syntax"           // the file cannot be parsed at all in its declared format
	RuleProfile         = "profile"          // the profile itself is invalid
	RuleRead            = "read"             // the byte stream failed (client went away, disk error)
	RuleLineTooLong     = "line_too_long"    // a line is longer than Limits.MaxLineBytes
	RuleTooManyColumns  = "too_many_columns" // the header has more fields than Limits.MaxColumns
	RuleTooManyBytes    = "too_many_bytes"   // the file decompresses to more than Limits.MaxBytes
	RuleTooManyRows     = "too_many_rows"    // the file has more data rows than Limits.MaxRows
)

func (e *FileError) Error() string {
	s := e.Rule
	if e.Line > 0 {
		s += fmt.Sprintf(": line %d", e.Line)
		if e.Column != "" {
			s += fmt.Sprintf(", column %q", e.Column)
		}
	} else if e.Column != "" {
		s += fmt.Sprintf(": column %q", e.Column)
	}
	return s + ": " + e.Msg
}

func (e *FileError) Unwrap() error { return e.Err }

// AsFileError returns the FileError in err's chain, if any.
func AsFileError(err error) (*FileError, bool) {
	var fe *FileError
	ok := errors.As(err, &fe)
	return fe, ok
}
