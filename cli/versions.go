package cli

import (
	"fmt"
	"text/tabwriter"

	"github.com/spf13/cobra"

	"github.com/flowcat-catalog/flowcat/catalog"
)

func newVersionsCmd(e *env) *cobra.Command {
	return &cobra.Command{
		Use:   "versions PROJECT/DATASET",
		Short: "List a dataset's versions",
		Args:  cobra.ExactArgs(1),
		RunE: func(cmd *cobra.Command, args []string) error {
			var vs []catalog.Version
			if printed, err := e.fetch(cmd, args[0], false, func(r ref) string { return r.path() + "/versions" }, &vs); printed || err != nil {
				return err
			}
			tw := tabwriter.NewWriter(e.stdout, 2, 4, 2, ' ', 0)
			fmt.Fprintln(tw, "VERSION\tCREATED\tFILES\tROWS\tSCORE\tSNAPSHOT")
			for _, v := range vs {
				sc := "-"
				if v.Manifest.Quality != nil {
					sc = score(v.Manifest.Quality.Score)
				}
				fmt.Fprintf(tw, "%d\t%s\t%d\t%d\t%s\t%s\n", v.Number, stamp(v.Manifest.CreatedAt), len(v.Manifest.Files), v.Manifest.Rows, sc, v.SnapshotID[:16])
			}
			return tw.Flush()
		},
	}
}
