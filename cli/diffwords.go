package cli

import (
	"fmt"
	"io"
	"math"
	"strings"
	"text/tabwriter"
	"time"

	"github.com/flowcat-catalog/flowcat/catalog/export"
	"github.com/flowcat-catalog/flowcat/quality"
	"github.com/flowcat-catalog/flowcat/server/api"
)

// diffFigures names the headline figures of a diff's summary_delta, in
// the order printed, with how to show a change of each.
var diffFigures = []struct {
	key, label string
	unit       string // "" a count, "s" seconds (shown as a duration), else the unit's words
}{
	{"events", "events", ""},
	{"cases.value", "cases", ""},
	{"subjects.value", "subjects", ""},
	{"resources.value", "resources", ""},
	{"arrivals.total", "arrivals", ""},
	{"length_of_stay.mean", "mean case duration", "s"},
	{"length_of_stay.p50", "median case duration", "s"},
	{"length_of_stay.p90", "case duration, 90th percentile", "s"},
	{"occupancy.peak", "peak in system (hourly mean)", "cases"},
	{"occupancy.little.l", "mean in system, L", "cases"},
	{"occupancy.little.lambda_w", "arrival rate × mean stay, λW", "cases"},
}

// signedDuration formats a change of seconds as a signed duration rounded
// to the second.
func signedDuration(sec float64) string {
	sign := "+"
	if sec < 0 {
		sign, sec = "-", -sec
	}
	return sign + time.Duration(math.Round(sec)*float64(time.Second)).String()
}

// printDiff writes a diff for people: labels, not JSON keys, rounded
// figures with their units.
func printDiff(w io.Writer, dataset string, d *api.Diff) {
	fmt.Fprintf(w, "%s, version %d -> version %d\n", dataset, d.From.Version, d.To.Version)
	ev := d.Events
	if ev == nil {
		ev = &export.DiffResult{}
	}
	files := "files"
	if ev.SharedFiles == 1 {
		files = "file"
	}
	fmt.Fprintf(w, "%d events added, %d removed, %d the same (%d of them in %d shared %s)\n",
		ev.Added, ev.Removed, ev.Same+ev.SharedRows, ev.SharedRows, ev.SharedFiles, files)
	if len(ev.BySite) > 0 {
		tw := tabwriter.NewWriter(w, 2, 4, 2, ' ', 0)
		fmt.Fprintln(w)
		fmt.Fprintln(tw, "site\tday (UTC)\tadded\tremoved")
		for _, c := range ev.BySite {
			fmt.Fprintf(tw, "%s\t%s\t%d\t%d\n", c.Site, c.Day, c.Added, c.Removed)
		}
		tw.Flush()
	}
	if v, ok := d.Quality["score"]; ok {
		parts := []string{fmt.Sprintf("score %+.1f", v)}
		for _, k := range []string{"completeness", "accuracy", "consistency", "currentness", "uniqueness"} {
			if x, ok := d.Quality[k]; ok && math.Abs(x) >= 0.05 {
				parts = append(parts, fmt.Sprintf("%s %+.1f", k, x))
			}
		}
		fmt.Fprintf(w, "\nquality (points of 100): %s\n", quality.WrapText(strings.Join(parts, ", "), 54, "  "))
	}
	var rows []string
	for _, f := range diffFigures {
		v := d.Summary[f.key]
		if v == nil || *v == 0 {
			continue
		}
		var t string
		switch f.unit {
		case "":
			t = fmt.Sprintf("%+.0f", *v)
		case "s":
			t = signedDuration(*v)
		default:
			t = fmt.Sprintf("%+.2f %s", *v, f.unit)
		}
		rows = append(rows, f.label+"\t"+t)
	}
	if len(rows) > 0 {
		fmt.Fprintln(w, "\nsummary changes")
		tw := tabwriter.NewWriter(w, 2, 4, 2, ' ', 0)
		for _, r := range rows {
			fmt.Fprintf(tw, "  %s\n", r)
		}
		tw.Flush()
	}
}
