package catalog

import (
	"fmt"
	"strconv"
	"strings"
	"time"
)

// SelectorKind says how a Selector names a version.
type SelectorKind int

// Selector kinds.
const (
	SelectLatest   SelectorKind = iota // the newest published version
	SelectNumber                       // a version number
	SelectSnapshot                     // a prefix of the snapshot id
	SelectTime                         // the published version in force at an instant
)

// MinSnapshotPrefix is the least number of hex digits of a snapshot id
// prefix selector.
const MinSnapshotPrefix = 8

// Selector names one version of a dataset, as written after '@' in
// "project/dataset@selector": a version number ("12"), "latest", a snapshot
// id prefix of at least MinSnapshotPrefix hex digits ("3fa9c0d2"), or an
// RFC 3339 instant ("2026-03-01T00:00:00Z").
type Selector struct {
	Kind   SelectorKind
	Number int
	Prefix string
	At     time.Time
	text   string
}

// String returns the selector as written.
func (s Selector) String() string { return s.text }

// MaxNumberDigits is the most digits a version number selector has; longer
// digit strings are snapshot id prefixes (which may be all decimal digits).
const MaxNumberDigits = 7

// ParseSelector parses the text after '@'. Up to MaxNumberDigits digits is
// a version number; otherwise hex digits are a snapshot prefix; a date and
// time with a zone is an instant. Anything else fails with ErrInvalid, saying which
// forms are accepted.
func ParseSelector(text string) (Selector, error) {
	sel := Selector{text: text}
	switch {
	case text == "" || text == "latest":
		sel.Kind = SelectLatest
		sel.text = "latest"
		return sel, nil
	case isDigits(text) && len(text) <= MaxNumberDigits:
		n, err := strconv.Atoi(text)
		if err != nil || n < 1 {
			return sel, fmt.Errorf("version %q: want a number from 1: %w", text, ErrInvalid)
		}
		sel.Kind, sel.Number = SelectNumber, n
		return sel, nil
	case isHex(text):
		if len(text) < MinSnapshotPrefix || len(text) > 64 {
			return sel, fmt.Errorf("snapshot id prefix %q: want %d to 64 hex digits: %w", text, MinSnapshotPrefix, ErrInvalid)
		}
		sel.Kind, sel.Prefix = SelectSnapshot, strings.ToLower(text)
		return sel, nil
	case len(text) >= 10 && isDigits(text[:4]) && text[4] == '-':
		at, err := time.Parse(time.RFC3339Nano, text)
		if err != nil {
			return sel, fmt.Errorf("instant %q: want RFC 3339, such as 2026-03-01T00:00:00Z: %w", text, ErrInvalid)
		}
		sel.Kind, sel.At = SelectTime, at.UTC()
		return sel, nil
	}
	return sel, fmt.Errorf("version selector %q: want a number, latest, a snapshot id prefix (%d+ hex digits) or an RFC 3339 instant: %w", text, MinSnapshotPrefix, ErrInvalid)
}

// SplitRef splits "project/dataset[@selector]" into its parts.
func SplitRef(ref string) (project, dataset string, sel Selector, err error) {
	name, at, hasAt := strings.Cut(ref, "@")
	project, dataset, ok := strings.Cut(name, "/")
	if !ok || project == "" || dataset == "" || strings.Contains(dataset, "/") {
		return "", "", sel, fmt.Errorf("dataset %q: want project/dataset[@version]: %w", ref, ErrInvalid)
	}
	if hasAt && at == "" {
		return "", "", sel, fmt.Errorf("dataset %q: nothing after '@': %w", ref, ErrInvalid)
	}
	sel, err = ParseSelector(at)
	return project, dataset, sel, err
}

func isDigits(s string) bool {
	for _, c := range []byte(s) {
		if c < '0' || c > '9' {
			return false
		}
	}
	return s != ""
}

func isHex(s string) bool {
	for _, c := range []byte(s) {
		if !(c >= '0' && c <= '9' || c >= 'a' && c <= 'f' || c >= 'A' && c <= 'F') {
			return false
		}
	}
	return s != ""
}
