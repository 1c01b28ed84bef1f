package cli

import (
	"fmt"

	"github.com/spf13/cobra"

	"github.com/flowcat-catalog/flowcat/catalog"
)

func newQualityCmd(e *env) *cobra.Command {
	return &cobra.Command{
		Use:   "quality PROJECT/DATASET[@N]",
		Short: "Show the quality report of a version (latest by default)",
		Long: `Quality prints the report of the upload that made the version: the file it added.
Each earlier file keeps the report of its own upload (see flowcat quality P/D@N for the version it made).`,
		Args: cobra.ExactArgs(1),
		RunE: func(cmd *cobra.Command, args []string) error {
			var v catalog.Version
			r, err := parseRef(args[0], true)
			if err != nil {
				return err
			}
			cl, err := e.client()
			if err != nil {
				return err
			}
			if err := cl.getJSON(cmd.Context(), r.versionPath(), &v); err != nil {
				return err
			}
			m := v.Manifest
			if e.json {
				return writeJSON(e.stdout, m.Quality)
			}
			up := "-"
			if len(m.Uploads) > 0 {
				up = m.Uploads[len(m.Uploads)-1]
			}
			fmt.Fprintf(e.stdout, "%s@%d holds %d files, %d rows; this is the report of upload %s, the file it added\n\n",
				m.Dataset, v.Number, len(m.Files), m.Rows, up)
			return m.Quality.Text(e.stdout, e.tty())
		},
	}
}
