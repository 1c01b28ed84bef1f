package cli

import (
	"fmt"
	"io"
	"strings"
	"time"

	"github.com/flowcat-catalog/flowcat/quality"
)

// table is a list for people: a header and aligned rows, each row
// optionally followed by an indented note line (which does not widen the
// columns), so that lists fit 80 columns without cutting their headers.
type table struct {
	head  []string
	right map[int]bool // right-aligned columns (figures)
	rows  [][]string
	notes []string // per row; "" for none
}

func (t *table) add(note string, cells ...string) {
	t.rows = append(t.rows, cells)
	t.notes = append(t.notes, note)
}

func (t *table) write(w io.Writer) error {
	width := make([]int, len(t.head))
	for _, r := range append([][]string{t.head}, t.rows...) {
		for i, c := range r {
			width[i] = max(width[i], len([]rune(c)))
		}
	}
	indent := strings.Repeat(" ", width[0]+2)
	line := func(r []string) string {
		var b strings.Builder
		for i, c := range r {
			if i > 0 {
				b.WriteString("  ")
			}
			pad := strings.Repeat(" ", width[i]-len([]rune(c)))
			if t.right[i] {
				b.WriteString(pad + c)
			} else {
				b.WriteString(c + pad)
			}
		}
		return strings.TrimRight(b.String(), " ") + "\n"
	}
	var b strings.Builder
	b.WriteString(line(t.head))
	for i, r := range t.rows {
		b.WriteString(line(r))
		if n := t.notes[i]; n != "" {
			b.WriteString(indent + strings.ReplaceAll(quality.WrapText(n, 80-len(indent), ""), "\n", "\n"+indent) + "\n")
		}
	}
	_, err := io.WriteString(w, b.String())
	return err
}

// humanBytes formats a byte count with a binary unit, rounded.
func humanBytes(n int64) string {
	if n < 1024 {
		return fmt.Sprintf("%d B", n)
	}
	v, unit := float64(n)/1024, "KiB"
	for _, u := range []string{"MiB", "GiB", "TiB"} {
		if v < 1024 {
			break
		}
		v, unit = v/1024, u
	}
	return fmt.Sprintf("%.1f %s", v, unit)
}

// minute formats an instant for lists: UTC, to the minute.
func minute(t time.Time) string { return t.UTC().Format("2006-01-02 15:04") }
