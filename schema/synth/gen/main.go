// Command gen writes the invented benchmark logs of package synth to
// standard output, for measuring a real server (see DEVELOPERS.md):
//
//	go run ./schema/synth/gen -kind line -events 4400000 -per-hour 10000 > week.csv
//	go run ./schema/synth/gen -kind completions -cases 2000000 -per-case 20 > long.csv
package main

import (
	"bufio"
	"flag"
	"fmt"
	"io"
	"os"

	"github.com/flowcat-catalog/flowcat/schema/synth"
)

func main() {
	kind := flag.String("kind", "line", "line (a service line in the schema's columns) or completions (completion-only, grouped by case)")
	events := flag.Int64("events", 1_000_000, "line: rows to write")
	perHour := flag.Float64("per-hour", 0, "line: cases arriving per hour (0: 300)")
	seed := flag.Uint64("seed", 1, "line: random seed")
	cases := flag.Int64("cases", 100_000, "completions: cases")
	perCase := flag.Int64("per-case", 20, "completions: rows per case")
	flag.Parse()
	var r io.Reader
	switch *kind {
	case "line":
		r = synth.NewStreamRate(*seed, *events, *perHour)
	case "completions":
		r = synth.NewCompletions(*cases, *perCase)
	default:
		fmt.Fprintf(os.Stderr, "gen: -kind %q: want line or completions\n", *kind)
		os.Exit(2)
	}
	w := bufio.NewWriterSize(os.Stdout, 1<<20)
	if _, err := io.Copy(w, r); err != nil {
		fmt.Fprintln(os.Stderr, "gen:", err)
		os.Exit(1)
	}
	if err := w.Flush(); err != nil {
		fmt.Fprintln(os.Stderr, "gen:", err)
		os.Exit(1)
	}
}
