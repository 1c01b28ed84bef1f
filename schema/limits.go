package schema

import "fmt"

// Limits bound what the reader takes from one source file, so that a
// broken or hostile file costs bounded memory and time. Each is checked
// while streaming; going over one stops the file with a *FileError whose
// Rule names the limit. A zero field takes its default.
type Limits struct {
	// MaxLineBytes bounds one physical line (CSV/TSV) or one JSON Lines
	// line, without its ending (default 1 MiB): RuleLineTooLong.
	MaxLineBytes int
	// MaxColumns bounds the fields of a CSV/TSV header (default 4096):
	// RuleTooManyColumns.
	MaxColumns int
	// MaxBytes bounds the bytes of the file after decompression
	// (default 8 GiB): RuleTooManyBytes.
	MaxBytes int64
	// MaxRows bounds the data rows of the file, accepted or rejected
	// (default 50,000,000): RuleTooManyRows.
	MaxRows int64
}

// Default limits; see Limits.
const (
	DefaultMaxLineBytes = 1 << 20
	DefaultMaxColumns   = 4096
	DefaultMaxBytes     = 8 << 30
	DefaultMaxRows      = 50_000_000
)

// withDefaults returns l with zero fields set to their defaults.
func (l Limits) withDefaults() Limits {
	if l.MaxLineBytes <= 0 {
		l.MaxLineBytes = DefaultMaxLineBytes
	}
	if l.MaxColumns <= 0 {
		l.MaxColumns = DefaultMaxColumns
	}
	if l.MaxBytes <= 0 {
		l.MaxBytes = DefaultMaxBytes
	}
	if l.MaxRows <= 0 {
		l.MaxRows = DefaultMaxRows
	}
	return l
}

// sizeText writes a byte count for a message: exact, with a binary unit
// when it is a whole number of one.
func sizeText(n int64) string {
	switch {
	case n >= 1<<30 && n%(1<<30) == 0:
		return fmt.Sprintf("%d GiB", n>>30)
	case n >= 1<<20 && n%(1<<20) == 0:
		return fmt.Sprintf("%d MiB", n>>20)
	case n >= 1<<10 && n%(1<<10) == 0:
		return fmt.Sprintf("%d KiB", n>>10)
	}
	return fmt.Sprintf("%d bytes", n)
}
