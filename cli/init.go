package cli

import (
	"fmt"

	"github.com/spf13/cobra"
)

func newInitCmd(e *env) *cobra.Command {
	var dir, masterFile, blobs string
	c := &cobra.Command{
		Use:   "init --data DIR [--blobs s3://BUCKET/PREFIX]",
		Short: "Create a data directory: catalog, blobs, signing and master keys",
		Args:  cobra.NoArgs,
		RunE: onData("init", &dir, func(cmd *cobra.Command, args []string, d dataDir) error {
			created, err := initDataDir(d, masterFile, blobs)
			if err != nil {
				return err
			}
			if e.json {
				return writeJSON(e.stdout, map[string]any{"data": dir, "master_key_created": created, "master_key_file": d.masterKey()})
			}
			fmt.Fprintf(e.stdout, "initialized %s\n", dir)
			if created {
				fmt.Fprintf(e.stdout, "created master key %s (mode 0600): keep a copy somewhere safe and apart from the data; without it no project key can be opened\n", d.masterKey())
			}
			return nil
		}),
	}
	c.Flags().StringVar(&dir, "data", "", "data directory to create")
	c.Flags().StringVar(&masterFile, "master-key", "", "use this existing master key file instead of creating one in DIR (else FLOWCAT_MASTER_KEY or FLOWCAT_MASTER_KEY_FILE when set)")
	c.Flags().StringVar(&blobs, "blobs", "", blobsFlagHelp)
	return c
}
