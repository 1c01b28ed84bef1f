package cli

import (
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
			return versionsTable(e, vs)
		},
	}
}
