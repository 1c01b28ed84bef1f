package cli

import (
	"fmt"
	"text/tabwriter"

	"github.com/spf13/cobra"

	"github.com/flowcat-catalog/flowcat/catalog"
)

func newUploadsCmd(e *env) *cobra.Command {
	return &cobra.Command{
		Use:   "uploads PROJECT/DATASET",
		Short: "List a dataset's uploads, accepted or not",
		Args:  cobra.ExactArgs(1),
		RunE: func(cmd *cobra.Command, args []string) error {
			var ups []catalog.Upload
			if printed, err := e.fetch(cmd, args[0], false, func(r ref) string { return r.path() + "/uploads" }, &ups); printed || err != nil {
				return err
			}
			tw := tabwriter.NewWriter(e.stdout, 2, 4, 2, ' ', 0)
			fmt.Fprintln(tw, "UPLOAD\tRECEIVED\tSTATUS\tVERSION\tBYTES\tFILE\tNOTE")
			for _, u := range ups {
				note := ""
				switch {
				case u.Error != nil:
					note = fmt.Sprintf("%s line %d %s", u.Error.Rule, u.Error.Line, u.Error.Column)
				case u.Report != nil:
					total := u.Report.Rows.Total
					if u.Events != nil { // the report counts the stored events only
						total = u.Events.Read + u.Report.Rows.Rejected
					}
					note = fmt.Sprintf("score %s, %d rejected of %d", score(u.Report.Score), u.Report.Rows.Rejected, total)
				}
				if ev := u.Events; ev != nil && (ev.Held > 0 || ev.Copies > 0 || ev.Changed > 0) {
					if note != "" {
						note += "; "
					}
					note += fmt.Sprintf("already held: %d of %d", ev.Held, ev.Read)
					if ev.Copies > 0 {
						note += fmt.Sprintf(", %d copies", ev.Copies)
					}
					if ev.Changed > 0 {
						note += fmt.Sprintf(", %d changed", ev.Changed)
					}
				}
				v := "-"
				if u.Version > 0 {
					v = fmt.Sprint(u.Version)
				}
				fmt.Fprintf(tw, "%s\t%s\t%s\t%s\t%d\t%s\t%s\n", u.ID, stamp(u.ReceivedAt), u.Status, v, u.Bytes, catalog.CleanFilename(u.Filename), note)
			}
			return tw.Flush()
		},
	}
}
