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
			var rep quality.Report
			if printed, err := e.fetch(cmd, args[0], true, func(r ref) string { return r.versionPath() + "/quality" }, &rep); printed || err != nil {
				return err
			}
			return rep.Text(e.stdout, e.tty())
		},
	}
}
