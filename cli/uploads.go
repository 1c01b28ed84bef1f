package cli

import (
	"fmt"
	"strings"

	"github.com/spf13/cobra"

	"github.com/flowcat-catalog/flowcat/catalog"
)

func newUploadsCmd(e *env) *cobra.Command {
	return &cobra.Command{
		Use:   "uploads PROJECT/DATASET",
		Short: "List a dataset's uploads, accepted or not",
		Long: `Uploads lists every upload of a dataset, oldest first: when it arrived (UTC), what became of it
(accepted, duplicate, rejected, failed), the version it made, the file's size, its quality score
and rejected rows, and below it the file name and what became of its events. A failed upload shows
no size: the bytes read before it failed are in its note.`,
		Args: cobra.ExactArgs(1),
		RunE: func(cmd *cobra.Command, args []string) error {
			var ups []catalog.Upload
			if printed, err := e.fetch(cmd, args[0], false, func(r ref) string { return r.path() + "/uploads" }, &ups); printed || err != nil {
				return err
			}
			t := &table{head: []string{"UPLOAD", "RECEIVED (UTC)", "STATUS", "VERSION", "SIZE", "SCORE", "REJECTED"},
				right: map[int]bool{3: true, 4: true, 5: true}}
			for _, u := range ups {
				notes := []string{catalog.CleanFilename(u.Filename)}
				size, sc, rejected := humanBytes(u.Bytes), "-", "-"
				if u.Report != nil {
					total := u.Report.Rows.Total
					if u.Events != nil { // the report counts the stored events only
						total = u.Events.Read + u.Report.Rows.Rejected
					}
					sc = score(u.Report.Score)
					rejected = fmt.Sprintf("%d of %d rows", u.Report.Rows.Rejected, total)
				}
				if u.Error != nil {
					where := u.Error.Rule
					if u.Error.Line > 0 {
						where += fmt.Sprintf(" at line %d", u.Error.Line)
					}
					if u.Error.Column != "" {
						where += ", column " + u.Error.Column
					}
					if u.Status == catalog.UploadFailed {
						// Bytes is what was read before the failure, not the file's size.
						size = "-"
						where = fmt.Sprintf("failed after reading %s: %s", humanBytes(u.Bytes), where)
					}
					notes = append(notes, where)
				}
				if n := u.RejectedBefore; n > 0 {
					notes = append(notes, fmt.Sprintf("%d of the rejected rows rejected before (sent again)", n))
				}
				if ev := u.Events; ev != nil {
					if ev.Held > 0 {
						notes = append(notes, fmt.Sprintf("%d of %d events already held", ev.Held, ev.Read))
					}
					if ev.Copies > 0 {
						notes = append(notes, fmt.Sprintf("%d copied rows in the file", ev.Copies))
					}
					if ev.Changed > 0 {
						notes = append(notes, fmt.Sprintf("%d events changed", ev.Changed))
					}
					if ev.ChangeWindow != nil {
						notes = append(notes, ev.ChangeWindow.String())
					}
				}
				v := "-"
				if u.Version > 0 {
					v = fmt.Sprint(u.Version)
				}
				t.add(strings.Join(notes, "; "), u.ID.String(), minute(u.ReceivedAt), string(u.Status), v, size, sc, rejected)
			}
			return t.write(e.stdout)
		},
	}
}
