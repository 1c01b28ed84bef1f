package cli

import (
	"github.com/spf13/cobra"

	"github.com/flowcat-catalog/flowcat/schema"
)

func newSchemaCmd(e *env) *cobra.Command {
	return &cobra.Command{
		Use:   "schema",
		Short: "Print the service-event schema v1 as JSON Schema 2020-12",
		Args:  cobra.NoArgs,
		RunE: func(cmd *cobra.Command, args []string) error {
			_, err := e.stdout.Write(schema.JSONSchema())
			return err
		},
	}
}
