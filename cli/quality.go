package cli

import (
	"github.com/spf13/cobra"

	"github.com/flowcat-catalog/flowcat/quality"
)

func newQualityCmd(e *env) *cobra.Command {
	return &cobra.Command{
		Use:   "quality PROJECT/DATASET[@N]",
		Short: "Show the quality report of a version (latest by default)",
		Args:  cobra.ExactArgs(1),
		RunE: func(cmd *cobra.Command, args []string) error {
			r, err := parseRef(args[0], true)
			if err != nil {
				return err
			}
			cl, err := e.client()
			if err != nil {
				return err
			}
			var rep quality.Report
			if err := cl.getJSON(cmd.Context(), r.versionPath()+"/quality", &rep); err != nil {
				return err
			}
			if e.json {
				return writeJSON(e.stdout, &rep)
			}
			return rep.Text(e.stdout, e.tty())
		},
	}
}
