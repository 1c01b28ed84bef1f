package cli

import (
	"errors"
	"fmt"
	"log/slog"

	"github.com/spf13/cobra"

	"github.com/flowcat-catalog/flowcat/catalog"
)

func newPseudonymKeyCmd(e *env) *cobra.Command {
	c := &cobra.Command{Use: "pseudonym-key", Short: "Rotate a project's pseudonym key"}
	var dir, masterFile string
	rotate := &cobra.Command{
		Use:   "rotate PROJECT --data DIR [--master-key FILE]",
		Short: "Give a project a new pseudonym key generation (admin, server stopped); each dataset's next version re-keys its files",
		Long: `Give a project a new pseudonym key generation, sealed under the master key; the earlier
generations stay sealed beside it, since every new upload's identifiers go through the whole chain.
No data file is touched now: the first version of each dataset made afterwards re-keys every file it
carries (one read and write of the dataset), so a version never mixes generations. Versions before
and after do not link: the same identifier has unrelated pseudonyms in them, and each version's
dictionary says which versions it links with. The rotation is audited (key.project_rotate, with both
key ids). The current master key is found as serve finds it.`,
		Args: cobra.ExactArgs(1),
		RunE: onData("pseudonym-key rotate", &dir, func(cmd *cobra.Command, args []string, d dataDir) error {
			mk, _, err := d.findMasterKey(masterFile)
			if err != nil {
				return err
			}
			st, err := d.openStore(mk, slog.New(slog.DiscardHandler))
			if errors.Is(err, catalog.ErrLocked) {
				return fmt.Errorf("%w: stop the server first", err)
			}
			if err != nil {
				return err
			}
			rot, err := st.RotateProjectKey(cmd.Context(), args[0], operator)
			if cerr := st.Close(); err == nil {
				err = cerr
			}
			if err != nil {
				return usageErr("%v", err)
			}
			if e.json {
				return writeJSON(e.stdout, rot)
			}
			fmt.Fprintf(e.stdout, "project %s: pseudonym key %s (generation %d) replaces %s; each dataset's next version re-keys its files, and versions before it do not link with those after\n",
				rot.Project, rot.NewKeyID, rot.Generation, rot.OldKeyID)
			return nil
		}),
	}
	f := rotate.Flags()
	f.StringVar(&dir, "data", "", "data directory (server stopped)")
	f.StringVar(&masterFile, "master-key", "", "the master key file (else as serve finds it)")
	c.AddCommand(rotate)
	return c
}
